"""Peak memory of a trendmill fit, each in a fresh interpreter.

The fit runs in a child process (``python memory.py SOURCE Y KEY X...``) so
that nothing from the benchmark's own heap counts. Two figures are taken:

- ``tree_peak_mb``: the largest sum of RSS over the child and all its worker
  processes, sampled every 20 ms by the parent (psutil); ``worker_peak_mb``
  is the largest RSS one worker reached in those samples;
- ``self_peak_mb``: the child's own high-water mark (``VmHWM``) after the fit
  (the coordinator's exact peak), and ``import_peak_mb`` the same before the
  fit (what the interpreter and its imports take anyway). ``VmHWM`` rather
  than ``getrusage``: Linux carries ``ru_maxrss`` over from the forking parent
  (the benchmark, which may be large by then) across ``exec``.
"""

from __future__ import annotations

import json
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

POLL_S = 0.02


def _high_water_mb() -> float:
    """Peak RSS of this process image in MB."""
    try:
        with open("/proc/self/status") as f:
            for line in f:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024   # not Linux


def _child(argv: list[str]) -> None:
    source, y, key, *x = argv
    from trendmill.engine.spec import FitSpec
    from trendmill.local import run_fit
    base = _high_water_mb()
    run = run_fit(FitSpec(source=source, y=y, x=tuple(x), by=(key,)), workers=None)
    print(json.dumps({
        "groups": run.table.num_rows,
        "rows_read": getattr(run, "rows_read", None),
        "import_peak_mb": base,
        "self_peak_mb": _high_water_mb(),
    }))


def peak_rss(source: Path, *, y: str, key: str, x: tuple[str, ...], timeout_s: float = 600) -> dict:
    """Run one fit in a fresh process; return its peak memory figures (MB)."""
    import psutil
    service = Path(__file__).resolve().parents[1] / "service"
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(service), env.get("PYTHONPATH")) if p)
    cmd = [sys.executable, str(Path(__file__).resolve()), str(source), y, key, *x]
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    ps = psutil.Process(proc.pid)
    peak = worker_peak = 0
    while proc.poll() is None:
        try:
            workers = ps.children(recursive=True)
            total = ps.memory_info().rss
        except psutil.NoSuchProcess:
            break
        for p in workers:
            try:
                rss = p.memory_info().rss
            except psutil.NoSuchProcess:   # a worker that just finished
                continue
            total += rss
            worker_peak = max(worker_peak, rss)
        peak = max(peak, total)
        if time.perf_counter() - t0 > timeout_s:
            proc.kill()
            raise TimeoutError(f"fit of {source} ran over {timeout_s} s")
        time.sleep(POLL_S)
    out, err = proc.communicate()
    if proc.returncode != 0:
        last = (err.strip().splitlines() or ["(no output)"])[-1]
        raise RuntimeError(f"fit of {source} failed in the child: {last}")
    result = json.loads(out.strip().splitlines()[-1])
    result["tree_peak_mb"] = peak / 2**20
    result["worker_peak_mb"] = worker_peak / 2**20
    return result


if __name__ == "__main__":
    _child(sys.argv[1:])
