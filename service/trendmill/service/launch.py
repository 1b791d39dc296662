"""Start and stop ``trendmill serve`` as a child process (the demo, the benchmark, tests).

The server logs one JSON line per event on stderr; it is up once the
``serving`` line names its address (a free port when asked for port 0).
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

__all__ = ["start_server", "stop_server"]


def _import_path() -> str:
    """PYTHONPATH that finds this checkout's trendmill and trendmill_client."""
    import trendmill
    import trendmill_client
    dirs = {str(Path(m.__file__).resolve().parent.parent) for m in (trendmill, trendmill_client)}
    return os.pathsep.join(sorted(dirs) + [os.environ.get("PYTHONPATH", "")])


def start_server(args: list[str], *, env: dict | None = None, timeout: float = 60.0,
                 log: list[str] | None = None) -> tuple[subprocess.Popen, str]:
    """Run ``python -m trendmill serve ARGS``; return (process, address) once it serves.

    The rest of its log is drained on a thread (appended to ``log`` when given),
    so the server never blocks on a full pipe.
    """
    env = dict(os.environ if env is None else env, PYTHONPATH=_import_path())
    proc = subprocess.Popen([sys.executable, "-m", "trendmill", "serve", *args],
                            stderr=subprocess.PIPE, text=True, env=env)
    lines = log if log is not None else []
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        line = proc.stderr.readline()
        if not line:
            break
        lines.append(line)
        try:
            event = json.loads(line)
        except ValueError:
            continue
        if event.get("event") == "serving":
            drain = threading.Thread(target=lambda: lines.extend(proc.stderr), daemon=True)
            drain.start()
            proc.log_drain = drain      # joined by stop_server, so ``log`` is complete
            return proc, event["address"]
    proc.kill()
    proc.wait()
    raise RuntimeError("trendmill serve did not start:\n" + "".join(lines))


def stop_server(proc: subprocess.Popen, *, timeout: float = 60.0) -> int:
    """SIGTERM (a clean stop), then kill after ``timeout``; returns the exit code."""
    if proc.poll() is None:
        proc.send_signal(signal.SIGTERM)
        try:
            proc.wait(timeout=timeout)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
    drain = getattr(proc, "log_drain", None)
    if drain is not None:
        drain.join(timeout)
    return proc.returncode
