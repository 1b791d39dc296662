"""Job lifecycle on a real server: watch, cancel, several at once, limits, restarts, logs."""

from __future__ import annotations

import json
import logging
import sqlite3
import threading
import time
from pathlib import Path

import pytest

from service_fixtures import *  # noqa: F401,F403
from service_fixtures import SLOW_COPIES
from trendmill.service._state import StateStore
from trendmill_client import (Client, FailedPrecondition, FitSpec, InvalidArgument,
                              ResourceExhausted)

FAST = FitSpec("fleet", "cabinet_temp_c", ("ts",), by=("freezer_id",))
SLOW = FitSpec("slow", "cabinet_temp_c", ("ts",), by=("freezer_id",))


def _wait_running(client: Client, name: str, *, partitions: int = 1):
    """Follow the watch until the job has scanned ``partitions`` partitions."""
    for job in client.watch_fit_job(name, timeout=60):
        if job.state == "RUNNING" and job.progress.partitions_done >= partitions:
            return job
        assert not job.done, f"{name} finished before it could be interrupted: {job.state}"
    raise AssertionError("watch ended")


def test_watch_streams_progress_and_ends_with_terminal_state(client, slow_fleet):
    job = client.create_fit_job(SLOW)
    events = list(client.watch_fit_job(job.name, timeout=120))
    states = [e.state for e in events]
    assert states[-1] == "SUCCEEDED" and events[-1].done
    assert "RUNNING" in states
    running = [e for e in events if e.state == "RUNNING" and e.progress.partitions_total]
    assert len(running) >= 2, "expected several progress events"
    done = [e.progress.partitions_done for e in running]
    assert done == sorted(done) and all(e.progress.partitions_total == SLOW_COPIES
                                        for e in running)
    mid = running[len(running) // 2].progress
    assert mid.rows_read > 0 and mid.bytes_read > 0 and mid.rows_per_second > 0
    if 0 < mid.partitions_done < SLOW_COPIES:
        assert mid.eta_s is not None and mid.eta_s > 0
    last = events[-1].progress
    assert last.partitions_done == last.partitions_total == SLOW_COPIES
    assert events[-1].summary.partitions == SLOW_COPIES


def test_cancel_stops_a_running_job_and_keeps_no_version(client, server, slow_fleet, fleet):
    job = client.create_fit_job(SLOW, model="to-cancel")
    _wait_running(client, job.name)
    t0 = time.monotonic()
    answer = client.cancel_fit_job(job.name)
    assert answer.cancel_requested and answer.state in ("RUNNING", "CANCELLED")
    final = client.wait(job.name, timeout=60)
    assert final.state == "CANCELLED" and final.error.code == "CANCELLED"
    assert time.monotonic() - t0 < 10
    assert final.progress.partitions_done < SLOW_COPIES
    # No partial version, no model, no result file.
    with pytest.raises(Exception, match="does not exist"):
        client.get_model("to-cancel")
    assert list((Path(server[0].store.directory) / "results").iterdir()) == []
    with pytest.raises(FailedPrecondition):
        client.lookup_group(job.name, 1)
    # Cancelling again is a no-op; a succeeded job cannot be cancelled.
    assert client.cancel_fit_job(job.name).state == "CANCELLED"
    ok = client.fit(FAST, timeout=120)
    with pytest.raises(FailedPrecondition, match="succeeded"):
        client.cancel_fit_job(ok.name)


def test_several_jobs_run_at_once_without_blocking_rpcs(start_server, slow_fleet, fleet):
    _, port = start_server(max_running_jobs=2)
    with Client(f"127.0.0.1:{port}", timeout=60) as c:
        a = c.create_fit_job(SLOW)
        b = c.create_fit_job(SLOW)
        queued = c.create_fit_job(FAST)
        seen_both = False
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            t0 = time.monotonic()
            states = [c.get_fit_job(n).state for n in (a.name, b.name, queued.name)]
            assert time.monotonic() - t0 < 2.0, "RPCs must not wait for the running fits"
            if states[:2] == ["RUNNING", "RUNNING"]:
                assert states[2] == "QUEUED"  # the third waits for a job slot
                listed = list(c.list_fit_jobs(state="running"))
                assert {j.name for j in listed} == {a.name, b.name}
                seen_both = True
                break
            time.sleep(0.02)
        assert seen_both
        for n in (a.name, b.name):
            c.cancel_fit_job(n)
        assert c.wait(queued.name, timeout=120).state == "SUCCEEDED"


def test_queue_and_feature_limits_are_resource_exhausted(start_server, slow_fleet, fleet):
    _, port = start_server(max_running_jobs=1, max_queued_jobs=1, max_features=1)
    with Client(f"127.0.0.1:{port}", timeout=60) as c:
        with pytest.raises(ResourceExhausted, match="x: 2 features") as e:
            c.create_fit_job(FitSpec("fleet", "cabinet_temp_c", ("ts", "ambient_temp_c")))
        assert e.value.field == "x"
        running = c.create_fit_job(SLOW)
        _wait_running(c, running.name)
        waiting = c.create_fit_job(SLOW)
        with pytest.raises(ResourceExhausted, match="max_queued_jobs"):
            c.create_fit_job(SLOW)
        c.cancel_fit_job(waiting.name)
        c.cancel_fit_job(running.name)
        assert c.wait(waiting.name, timeout=30).state == "CANCELLED"


def test_restart_keeps_jobs_and_models_and_resumes_interrupted_job(start_server, tmp_path,
                                                                   slow_fleet, fleet):
    state = str(tmp_path / "restart-state")
    srv, port = start_server(state_dir=state)
    with Client(f"127.0.0.1:{port}", timeout=60) as c:
        done = c.fit(FAST, model="kept", timeout=120)
        before = c.lookup_group("kept", 7)
        interrupted = c.create_fit_job(SLOW, model="resumed")
        _wait_running(c, interrupted.name)
    srv.stop(grace=30)
    # Nothing is left RUNNING in the store once the server has stopped.
    with sqlite3.connect(Path(state) / "state.sqlite3") as db:
        assert db.execute("SELECT count(*) FROM jobs WHERE state = 'RUNNING'").fetchone()[0] == 0

    _, port = start_server(state_dir=state)
    with Client(f"127.0.0.1:{port}", timeout=60) as c:
        again = c.get_fit_job(done.name)
        assert again.state == "SUCCEEDED" and again.model_version == "models/kept/versions/1"
        assert c.get_model("kept").version_count == 1
        assert c.lookup_group("kept", 7) == before
        resumed = c.wait(interrupted.name, timeout=120)
        assert resumed.state == "SUCCEEDED" and resumed.attempts == 2
        assert resumed.model_version == "models/resumed/versions/1"
        assert {j.name for j in c.list_fit_jobs()} == {done.name, interrupted.name}


def test_recover_after_a_crash_requeues_then_gives_up(tmp_path):
    # A crash leaves rows RUNNING; recover() must never keep them so.
    store = StateStore(str(tmp_path / "s"))
    job, _ = store.create_job(spec={"source": "x", "y": "y", "x": ["a"]}, source_path="/x",
                              model=None, request_id=None, max_queued=10)
    store.update_job(job.id, state="RUNNING", attempts=1)
    (orphan := Path(store.directory) / "results" / "orphan.parquet").write_bytes(b"partial")
    requeued, failed = store.recover(max_attempts=2)
    assert [j.id for j in requeued] == [job.id] and requeued[0].state == "QUEUED"
    assert not orphan.exists()
    store.update_job(job.id, state="RUNNING", attempts=2)
    requeued, failed = store.recover(max_attempts=2)
    assert requeued == [] and [j.state for j in failed] == ["FAILED"]
    assert failed[0].error["reason"] == "INTERRUPTED"
    store.close()


def test_one_json_log_line_per_state_change(client, fleet, caplog):
    caplog.set_level(logging.INFO, logger="trendmill.service")
    job = client.fit(FAST, timeout=120)
    lines = [json.loads(r.getMessage()) for r in caplog.records
             if r.name == "trendmill.service" and r.getMessage().startswith("{")]
    mine = [l for l in lines if l.get("job") == job.name]
    assert [l["state"] for l in mine] == ["QUEUED", "RUNNING", "SUCCEEDED"]
    assert all(l["event"] == "job_state" for l in mine)
    assert mine[-1]["groups"] == 60


def test_watch_limit_and_bad_names(start_server, slow_fleet):
    _, port = start_server(max_watches=1)
    with Client(f"127.0.0.1:{port}", timeout=60) as c:
        job = c.create_fit_job(SLOW)
        first = c.watch_fit_job(job.name)
        next(first)  # holds the only watch slot
        with pytest.raises(ResourceExhausted, match="max_watches"):
            next(c.watch_fit_job(job.name))
        first.close()
        with pytest.raises(InvalidArgument):
            next(c.watch_fit_job("jobs/1"))
        c.cancel_fit_job(job.name)


def test_job_failing_while_running_reports_its_error(client, data_root):
    # Negative weights are only seen when the rows are read: the RPC succeeds, the job fails.
    import pyarrow as pa
    import pyarrow.parquet as pq

    path = data_root / "neg-weight.parquet"
    if not path.exists():
        pq.write_table(pa.table({"y": [1.0, 2.0, 3.0, 4.0], "x": [0.0, 1.0, 2.0, 3.0],
                                 "w": [1.0, -1.0, 1.0, 1.0]}), path)
    job = client.create_fit_job(FitSpec("neg-weight.parquet", "y", ("x",), weight="w"))
    final = client.wait(job.name, timeout=60)
    assert final.state == "FAILED" and final.done
    assert final.error.code == "FAILED_PRECONDITION" and final.error.reason == "BAD_DATA"
    assert "w" in final.error.message
    with pytest.raises(FailedPrecondition, match="FAILED"):
        client.read_table(job.name)


def test_group_limit_fails_the_job(start_server, fleet):
    _, port = start_server(max_groups=10)
    with Client(f"127.0.0.1:{port}", timeout=60) as c:
        job = c.fit(FAST, model="too-big", timeout=120)
        assert job.state == "FAILED" and job.error.code == "RESOURCE_EXHAUSTED"
        assert "max_groups" in job.error.message and "60 groups" in job.error.message
        assert list(c.list_models()) == []


def test_message_size_limit(start_server, fleet):
    _, port = start_server(max_message_bytes=1 << 16)
    with Client(f"127.0.0.1:{port}", timeout=60) as c:
        job = c.fit(FAST, model="small-pages", timeout=120)
        # Pages shrink to fit the limit: every group still arrives, in several messages.
        pages = list(c.read_pages(job.name, page_size=100_000))
        assert sum(p.row_count for p in pages) == 60
        assert all(p.ByteSize() < 1 << 16 for p in pages)
        # A request over the limit is refused by gRPC itself.
        with pytest.raises(ResourceExhausted):
            c.predict("small-pages", 3, [[1.7e9]] * 9000)
        with pytest.raises(InvalidArgument, match="points"):
            c.predict("small-pages", 3, [])


def test_predict_point_limit(client, fleet):
    client.fit(FAST, model="points", timeout=120)
    assert len(client.predict("points", 3, [[1.7e9]] * 10_000).predictions) == 10_000
    with pytest.raises(ResourceExhausted, match="points: 10001 points") as e:
        client.predict("points", 3, [[1.7e9]] * 10_001)
    assert e.value.field == "points"
