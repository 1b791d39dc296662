"""Client behaviour: exports, typed results, deadlines, retries on UNAVAILABLE."""

from __future__ import annotations

import socket
import threading
import time

import pytest

import trendmill_client
from service_fixtures import *  # noqa: F401,F403
from trendmill.service import ServerConfig, create_server
from trendmill_client import Client, DeadlineExceeded, FitSpec, Unavailable

SLOW = FitSpec("slow", "cabinet_temp_c", ("ts",), by=("freezer_id",))
FAST = FitSpec("fleet", "cabinet_temp_c", ("ts",), by=("freezer_id",))


def test_exported_members():
    exported = {n for n in dir(trendmill_client) if not n.startswith("_")}
    assert set(trendmill_client.__all__) == exported - {"_proto"}
    for name in trendmill_client.__all__:
        assert getattr(trendmill_client, name).__module__.startswith("trendmill_client")


def test_typed_job_and_group(client, fleet):
    job = client.fit(FAST, model="typed", timeout=120)
    assert job.spec == FAST and job.done and job.state == "SUCCEEDED"
    assert job.create_time <= job.start_time <= job.end_time
    assert job.summary.groups == 60 and job.summary.fit_seconds > 0
    fit = client.lookup_group("typed", 4)
    assert fit.key_columns == ("freezer_id",) and [t.term for t in fit.terms] == ["intercept", "ts"]
    cov = fit.covariance_matrix()
    assert len(cov) == 2 and cov[1][1] == pytest.approx(fit.term("ts").std_error ** 2, rel=1e-12)
    frame = client.read_dataframe("typed")
    assert list(frame["freezer_id"]) == list(range(1, 61))


def test_wait_deadline(client, slow_fleet):
    job = client.create_fit_job(SLOW)
    with pytest.raises(DeadlineExceeded):
        client.wait(job.name, timeout=0.3)
    client.cancel_fit_job(job.name)


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_retries_until_the_server_is_up(tmp_path, data_root, fleet):
    port = _free_port()
    started = []

    def start_later():
        time.sleep(1.0)
        started.append(create_server(ServerConfig(
            state_dir=str(tmp_path / "s"), listen=f"127.0.0.1:{port}",
            data_roots=(str(data_root),), workers=1))[0])

    t = threading.Thread(target=start_later)
    t.start()
    try:
        with Client(f"127.0.0.1:{port}", retries=8, backoff=0.1, timeout=30) as c:
            t0 = time.monotonic()
            assert c.health() == "SERVING"
            assert time.monotonic() - t0 >= 0.5
            # Create is retried too (safely: one request id), and gives one job.
            c.create_fit_job(FAST)
            assert len(list(c.list_fit_jobs())) == 1
    finally:
        t.join()
        for s in started:
            s.stop(grace=5)
    with Client(f"127.0.0.1:{port}", retries=1, backoff=0.05, timeout=5) as c:
        with pytest.raises(Unavailable):
            c.health()
