"""The CLI's remote mode against real servers: fit --server, job/model/result commands, serve."""

from __future__ import annotations

import json
from pathlib import Path

import pyarrow.compute as pc
import pyarrow.parquet as pq

from service_fixtures import *  # noqa: F401,F403
from trendmill.cli import main
from trendmill.service import launch

REPO = Path(__file__).resolve().parent.parent
FIT = ["--y", "cabinet_temp_c", "--x", "ts", "--x", "ambient_temp_c", "--by", "freezer_id",
       "--filter", "door_open_s < 300", "--solver", "qr", "--confidence", "0.9"]


def _run(capsys, *argv):
    rc = main(list(argv))
    out, err = capsys.readouterr()
    return rc, out, err


def test_fit_remote_writes_the_same_file_as_local(server, capsys, tmp_path, data_root, fleet):
    target = f"127.0.0.1:{server[1]}"
    remote, local = tmp_path / "remote.parquet", tmp_path / "local.parquet"
    rc, _, err = _run(capsys, "fit", fleet, *FIT, "--output", str(remote), "--server", target,
                      "--model", "cli-drift")
    assert rc == 0, err
    assert "models/cli-drift/versions/1" in err
    rc, _, err = _run(capsys, "fit", str(data_root / fleet), *FIT, "--output", str(local),
                      "--workers", "1", "--quiet")
    assert rc == 0, err
    # Reference: the local fit of the same spec, column by column, bit for bit.
    assert pq.read_table(remote).equals(pq.read_table(local))

    rc, out, _ = _run(capsys, "jobs", "--server", target)
    header, line = out.splitlines()
    assert header.split("\t")[:2] == ["name", "state"]
    job = line.split("\t")[0]
    assert line.split("\t")[1:4] == ["SUCCEEDED", "models/cli-drift", "models/cli-drift/versions/1"]
    rc, out, _ = _run(capsys, "jobs", "--server", target, "--state", "failed")
    assert rc == 0 and out.splitlines() == [header]
    rc, out, _ = _run(capsys, "job", job, "--server", target, "--json")
    assert json.loads(out)["state"] == "SUCCEEDED"
    rc, out, _ = _run(capsys, "watch", job, "--server", target)
    assert rc == 0 and "fitted 60 groups" in out

    rc, out, _ = _run(capsys, "models", "--server", target, "--json")
    (model,) = [json.loads(l) for l in out.splitlines()]
    assert model["name"] == "models/cli-drift" and model["versions"] == 1
    rc, out, _ = _run(capsys, "versions", "cli-drift", "--server", target)
    assert out.splitlines()[1].startswith("models/cli-drift/versions/1\t" + job)

    table = pq.read_table(local)
    row = table.filter(pc.equal(table.column("freezer_id"), 5)).to_pylist()[0]
    rc, out, _ = _run(capsys, "lookup", "cli-drift", "--key", "5", "--server", target, "--json")
    got = json.loads(out)
    assert got["ts_estimate"] == row["ts_estimate"] and got["status"] == row["status"]
    rc, out, _ = _run(capsys, "predict", "models/cli-drift/versions/1", "--key", "5",
                      "--at", "1767312000,-10", "--at", "1767398400,25", "--server", target)
    lines = out.splitlines()
    assert rc == 0 and len(lines) == 3 and lines[0].startswith("x\tmean\t")
    low, high = (float(v) for v in lines[1].split("\t")[6:8])
    assert low < float(lines[1].split("\t")[1]) < high

    fetched = tmp_path / "fetched.parquet"
    rc, _, _ = _run(capsys, "results", "cli-drift", "--output", str(fetched), "--server", target)
    assert rc == 0 and pq.read_table(fetched).equals(pq.read_table(remote))


def test_cli_errors_are_one_line(server, capsys, tmp_path, fleet):
    target = f"127.0.0.1:{server[1]}"
    out_file = tmp_path / "never.parquet"
    rc, _, err = _run(capsys, "fit", fleet, "--y", "cabinet_temp_c", "--x", "nope",
                      "--output", str(out_file), "--server", target)
    assert rc == 2 and not out_file.exists()
    assert err.count("\n") == 1 and err.startswith("trendmill: error: INVALID_ARGUMENT: x:")
    rc, _, err = _run(capsys, "lookup", "models/none", "--key", "1", "--server", target)
    assert rc == 2 and err.startswith("trendmill: error: NOT_FOUND:") and err.count("\n") == 1
    rc, _, err = _run(capsys, "predict", "none", "--at", "1,x", "--server", target)
    assert rc == 2 and "--at" in err and "Traceback" not in err
    rc, _, err = _run(capsys, "cancel", "fitJobs/0000000000000000", "--server", target)
    assert rc == 2 and "NOT_FOUND" in err
    rc, _, err = _run(capsys, "jobs", "--server", "127.0.0.1:1")
    assert rc == 2 and "UNAVAILABLE" in err and err.count("\n") == 1


def test_serve_command_with_token_then_sigterm(tmp_path, data_root, fleet, capsys):
    token = tmp_path / "token"
    token.write_text("s3cret\n")
    token.chmod(0o600)
    lines: list[str] = []
    proc, address = launch.start_server(
        ["--listen", "127.0.0.1:0", "--state", str(tmp_path / "state"), "--data-root",
         str(data_root), "--token-file", str(token), "--workers", "1"], log=lines)
    try:
        out = tmp_path / "r.parquet"
        rc, _, err = _run(capsys, "fit", fleet, "--y", "cabinet_temp_c", "--x", "ts",
                          "--output", str(out), "--server", address)
        assert rc == 2 and "UNAUTHENTICATED" in err
        rc, _, err = _run(capsys, "fit", fleet, "--y", "cabinet_temp_c", "--x", "ts",
                          "--output", str(out), "--server", address, "--token-file", str(token))
        assert rc == 0, err
        assert pq.read_table(out).num_rows == 1
    finally:
        assert launch.stop_server(proc) == 0       # SIGTERM: a clean stop
    events = [json.loads(l) for l in lines if l.strip()]
    states = [e["state"] for e in events if e["event"] == "job_state"]
    assert states == ["QUEUED", "RUNNING", "SUCCEEDED"]
    assert events[-1]["event"] == "stopped"


def test_serve_refuses_bad_options(tmp_path, capsys):
    rc, _, err = _run(capsys, "serve", "--state", str(tmp_path / "s"), "--listen", "nohost")
    assert rc == 2 and "listen" in err
    rc, _, err = _run(capsys, "serve", "--state", str(tmp_path / "s"), "--tls-cert", "c.pem")
    assert rc == 2 and "--tls-key" in err
    rc, _, err = _run(capsys, "serve", "--state", str(tmp_path / "s"), "--data-root",
                      str(tmp_path / "missing"))
    assert rc == 2 and "data root" in err
