"""The thin client needs only grpcio and protobuf: proven in an isolated interpreter.

The child runs with ``-I -S`` (no site-packages, no environment, no current
directory on the path); its path holds only the client package, grpcio (with
its one dependency, typing_extensions) and google.protobuf, linked into a temp
dir. Against a real server it checks health, reads rows, looks up a group,
predicts, and decodes a rich error, all without numpy, pyarrow, duckdb, pandas
or googleapis-common-protos.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import google.protobuf
import grpc
import typing_extensions

from service_fixtures import *  # noqa: F401,F403
from trendmill_client import FitSpec

REPO = Path(__file__).resolve().parent.parent

CHILD = r"""
import json, sys
sys.path[:0] = [sys.argv[1]]
from trendmill_client import Client, FitSpec, InvalidArgument
heavy = [m for m in ("numpy", "pyarrow", "duckdb", "pandas", "google.rpc", "trendmill")
         if m in sys.modules]
blocked = []
for m in ("numpy", "pyarrow", "duckdb", "google.rpc"):
    try:
        __import__(m)
    except ImportError:
        blocked.append(m)
out = {"heavy": heavy, "blocked": blocked}
with Client(sys.argv[2], timeout=30) as c:
    out["health"] = c.health()
    rows = list(c.read_rows(sys.argv[3], page_size=16))
    out["groups"] = [r["freezer_id"] for r in rows]
    out["slope"] = c.lookup_group(sys.argv[3], 9).term("ts").estimate
    p = c.predict(sys.argv[3], 9, [1767312000.0]).predictions[0]
    out["interval"] = [p.prediction_low, p.mean, p.prediction_high]
    try:
        c.create_fit_job(FitSpec("fleet", "cabinet_temp_c", ("ts",), confidence=1.5))
    except InvalidArgument as e:
        out["error"] = [e.code, e.field, e.reason]
print(json.dumps(out))
"""


def _isolated_path(tmp: Path) -> Path:
    iso = tmp / "isolated"
    (iso / "google").mkdir(parents=True)
    os.symlink(REPO / "client" / "trendmill_client", iso / "trendmill_client")
    os.symlink(Path(grpc.__file__).parent, iso / "grpc")
    os.symlink(Path(google.protobuf.__file__).parent, iso / "google" / "protobuf")
    os.symlink(typing_extensions.__file__, iso / "typing_extensions.py")
    return iso


def test_client_works_without_numpy_pyarrow_duckdb(client, server, tmp_path, fleet):
    job = client.fit(FitSpec("fleet", "cabinet_temp_c", ("ts",), by=("freezer_id",)),
                     timeout=120)
    iso = _isolated_path(tmp_path)
    proc = subprocess.run(
        [sys.executable, "-I", "-S", "-c", CHILD, str(iso), f"127.0.0.1:{server[1]}", job.name],
        capture_output=True, text=True, timeout=60, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    out = json.loads(proc.stdout)
    assert out["heavy"] == []
    assert out["blocked"] == ["numpy", "pyarrow", "duckdb", "google.rpc"]
    assert out["health"] == "SERVING"
    assert out["groups"] == list(range(1, 61))
    assert out["slope"] == client.lookup_group(job.name, 9).term("ts").estimate
    low, mean, high = out["interval"]
    assert low < mean < high
    assert out["error"] == ["INVALID_ARGUMENT", "confidence", "INVALID_SPEC"]
