"""The service end to end on loopback: fits, paging, lookup, predict, errors, health.

References: the local executor (same engine, no service in between) for the
remote results; statsmodels OLS for a group's fit and its prediction intervals;
the standard grpc health and reflection clients; googleapis' own status
classes (grpc_status) for the rich error details.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import grpc
import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
import pytest
import statsmodels.api as sm
from google.rpc import error_details_pb2
from grpc_health.v1 import health_pb2, health_pb2_grpc
from grpc_status import rpc_status

from service_fixtures import *  # noqa: F401,F403
from service_fixtures import group_rows, read_source
from trendmill.engine.spec import FitSpec as EngineSpec
from trendmill.local import run_fit
from trendmill_client import (Client, FailedPrecondition, FitSpec, InvalidArgument, NotFound)
from trendmill_client._proto import jobs_pb2, jobs_pb2_grpc, spec_pb2

SPEC = FitSpec("fleet", "cabinet_temp_c", ("ts", "ambient_temp_c"), by=("freezer_id",),
               filter="door_open_s < 200")


def _assert_tables_equal(remote: pa.Table, local: pa.Table, rtol: float = 1e-12) -> None:
    assert remote.schema == local.schema
    assert remote.num_rows == local.num_rows
    for name in local.column_names:
        a, b = remote.column(name), local.column(name)
        if pa.types.is_floating(b.type):
            np.testing.assert_allclose(a.to_numpy(), b.to_numpy(), rtol=rtol, atol=0,
                                       equal_nan=True, err_msg=name)
        elif pa.types.is_list(b.type):
            fa = pc.list_flatten(a).to_numpy(zero_copy_only=False)
            fb = pc.list_flatten(b).to_numpy(zero_copy_only=False)
            np.testing.assert_allclose(fa, fb, rtol=rtol, atol=0, equal_nan=True, err_msg=name)
        else:
            assert a.equals(b), name


def test_remote_fit_equals_local_fit(start_server, data_root, fleet):
    _, port = start_server(workers=2)  # real worker processes on the server
    with Client(f"127.0.0.1:{port}", timeout=60) as c:
        job = c.create_fit_job(SPEC, model="drift")
        assert job.name.startswith("fitJobs/") and job.state in ("QUEUED", "RUNNING")
        done = c.wait(job.name, timeout=120)
        assert done.state == "SUCCEEDED", done.error
        assert done.model_version == "models/drift/versions/1"
        remote = c.read_table(done.result, page_size=13)
    local = run_fit(EngineSpec(str(data_root / fleet), SPEC.y, SPEC.x, by=SPEC.by,
                               filter=SPEC.filter), workers=1).table
    # Reference: the local executor over the same files.
    _assert_tables_equal(remote, local)
    assert done.summary.groups == local.num_rows == 60


def test_paging_returns_every_group_once(client, fleet):
    job = client.wait(client.create_fit_job(SPEC).name, timeout=120)
    assert job.state == "SUCCEEDED" and job.model_version is None
    pages = list(client.read_pages(job.name, format="rows", page_size=7))
    assert [p.row_offset for p in pages] == list(range(0, 60, 7))
    assert all(p.total_rows == 60 for p in pages) and pages[-1].next_page_token == ""
    keys = [r.key[0].value.int_value for p in pages for r in p.rows]
    assert sorted(keys) == list(range(1, 61)) and len(keys) == 60
    # Arrow pages and a resumed read (page token after two pages) give the same groups.
    first = list(client.read_pages(job.name, format="arrow", page_size=11, max_pages=2))
    assert len(first) == 2
    rest = list(client.read_pages(job.name, format="arrow", page_size=11,
                                  page_token=first[-1].next_page_token))
    ids = []
    for p in first + rest:
        with pa.ipc.open_stream(p.arrow_ipc) as r:
            ids += r.read_all().column("freezer_id").to_pylist()
    assert ids == list(range(1, 61))
    # Plain rows carry the same numbers as the Arrow table.
    table = client.read_table(job.name)
    rows = list(client.read_rows(job.name, page_size=25))
    assert [r["freezer_id"] for r in rows] == table.column("freezer_id").to_pylist()
    np.testing.assert_array_equal([r["ts_estimate"] for r in rows],
                                  table.column("ts_estimate").to_numpy())


def test_page_token_of_another_request_is_invalid(client, fleet):
    a = client.wait(client.create_fit_job(SPEC).name, timeout=120)
    (page,) = list(client.read_pages(a.name, page_size=5, max_pages=1))
    with pytest.raises(InvalidArgument, match="page_token") as e:
        list(client.read_pages(a.name, format="rows", page_size=5,
                               page_token=page.next_page_token))
    assert e.value.field == "page_token"
    with pytest.raises(InvalidArgument, match="page_size"):
        list(client.read_pages(a.name, page_size=-1))


def test_lookup_and_predict_agree_with_file_and_statsmodels(client, data_root, fleet):
    spec = FitSpec("fleet", "cabinet_temp_c", ("ambient_temp_c", "door_open_s"),
                   by=("freezer_id",), confidence=0.9)
    job = client.wait(client.create_fit_job(spec, model="doors").name, timeout=120)
    assert job.state == "SUCCEEDED", job.error
    table = client.read_table("models/doors")
    fid = 17
    fit = client.lookup_group("models/doors/versions/1", fid)
    row = group_rows(table, "freezer_id", fid).to_pylist()[0]
    # Against the results file: the same numbers.
    assert fit.key == (fid,) and fit.status == "ok" and fit.n_rows == row["n_rows"]
    for t in fit.terms:
        for f in ("estimate", "std_error", "t_value", "p_value", "ci_low", "ci_high"):
            assert getattr(t, f) == row[f"{t.term}_{f}"], (t.term, f)
    assert fit.residual_std_error == row["residual_std_error"]
    assert list(fit.covariance) == row["covariance"]

    # Against statsmodels OLS on the group's raw rows (nulls dropped).
    raw = group_rows(read_source(data_root, fleet), "freezer_id", fid)
    cols = ["cabinet_temp_c", "ambient_temp_c", "door_open_s"]
    arr = np.column_stack([raw.column(c).to_numpy(zero_copy_only=False).astype(float)
                           for c in cols])
    arr = arr[np.isfinite(arr).all(axis=1)]
    ols = sm.OLS(arr[:, 0], sm.add_constant(arr[:, 1:])).fit()
    assert fit.n_rows == len(arr)
    np.testing.assert_allclose([t.estimate for t in fit.terms], ols.params, rtol=1e-9)
    np.testing.assert_allclose([t.std_error for t in fit.terms], ols.bse, rtol=1e-9)
    np.testing.assert_allclose(np.array(fit.covariance).reshape(3, 3), ols.cov_params(),
                               rtol=1e-9)

    points = [[-5.0, 0.0], [12.5, 30.0], [30.0, 240.0]]
    res = client.predict("doors", fid, points)
    assert res.confidence == 0.9 and res.df_residual == len(arr) - 3
    frame = ols.get_prediction(sm.add_constant(np.array(points), has_constant="add")) \
               .summary_frame(alpha=0.1)
    got = np.array([[p.mean, p.mean_std_error, p.mean_ci_low, p.mean_ci_high,
                     p.prediction_low, p.prediction_high] for p in res.predictions])
    want = frame[["mean", "mean_se", "mean_ci_lower", "mean_ci_upper",
                  "obs_ci_lower", "obs_ci_upper"]].to_numpy()
    np.testing.assert_allclose(got, want, rtol=1e-9)
    # Another level on request.
    res99 = client.predict("doors", fid, points, confidence=0.99)
    frame99 = ols.get_prediction(sm.add_constant(np.array(points), has_constant="add")) \
                 .summary_frame(alpha=0.01)
    np.testing.assert_allclose([p.prediction_high for p in res99.predictions],
                               frame99["obs_ci_upper"], rtol=1e-9)

    with pytest.raises(NotFound, match="freezer_id=999"):
        client.lookup_group("doors", 999)
    with pytest.raises(InvalidArgument, match=r"points\[0\]\.x") as e:
        client.predict("doors", fid, [[1.0]])
    assert e.value.field == "points[0].x"
    with pytest.raises(InvalidArgument, match="key") as e:
        client.lookup_group("doors", "not a number")
    assert e.value.field == "key[0]"
    # A string key value is accepted for an integer key (what the CLI sends).
    assert client.lookup_group("doors", "17").key == (17,)


@pytest.mark.parametrize("change, field, text", [
    (dict(x=("no_such_column",)), "x", "no_such_column"),
    (dict(x=()), "x", "at least one"),
    (dict(confidence=1.5), "confidence", "between 0 and 1"),
    (dict(confidence=0.0), "confidence", "between 0 and 1"),
    (dict(y="nope"), "y", "nope"),
    (dict(by=("nope",)), "by", "nope"),
    (dict(filter="door_open_s <"), "filter", "filter"),
])
def test_bad_spec_is_invalid_argument_naming_the_field(client, fleet, change, field, text):
    spec = dataclasses.replace(SPEC, **change)
    with pytest.raises(InvalidArgument, match=text) as e:
        client.create_fit_job(spec)
    assert e.value.field == field
    assert e.value.message.startswith(f"{field}:") or field in e.value.message


def test_rich_status_details_are_standard(server, fleet):
    # Read with googleapis' own classes (grpc_status): what any gRPC client sees.
    with grpc.insecure_channel(f"127.0.0.1:{server[1]}") as ch:
        stub = jobs_pb2_grpc.FitJobsStub(ch)
        req = jobs_pb2.CreateFitJobRequest(spec=spec_pb2.FitSpec(
            source="fleet", y="cabinet_temp_c", x=["ts"], confidence=2.0))
        with pytest.raises(grpc.RpcError) as e:
            stub.CreateFitJob(req)
        status = rpc_status.from_call(e.value)
    assert e.value.code() == grpc.StatusCode.INVALID_ARGUMENT
    info, bad = error_details_pb2.ErrorInfo(), error_details_pb2.BadRequest()
    assert status.details[0].Unpack(info) and status.details[1].Unpack(bad)
    assert info.domain == "trendmill" and info.reason == "INVALID_SPEC"
    assert info.metadata["field"] == "confidence"
    assert bad.field_violations[0].field == "confidence"


def test_not_found_and_failed_precondition(client, slow_fleet):
    with pytest.raises(NotFound):
        client.get_fit_job("fitJobs/0000000000000000")
    with pytest.raises(NotFound):
        client.get_model("models/nothing-here")
    with pytest.raises(NotFound, match="source"):
        client.create_fit_job(dataclasses.replace(SPEC, source="no/such/dir"))
    with pytest.raises(InvalidArgument, match="name"):
        client.get_fit_job("fitJobs/../x")
    job = client.create_fit_job(FitSpec("slow", "cabinet_temp_c", ("ts",), by=("freezer_id",)))
    with pytest.raises(FailedPrecondition, match="has succeeded"):
        client.lookup_group(job.name, 1)
    client.cancel_fit_job(job.name)
    assert client.wait(job.name, timeout=60).state == "CANCELLED"


def test_models_versions_and_shape_check(client, fleet):
    one = client.fit(SPEC, model="fleet-drift", timeout=120)
    two = client.fit(dataclasses.replace(SPEC, filter="door_open_s < 100"), model="fleet-drift",
                     timeout=120)
    assert (one.model_version, two.model_version) == (
        "models/fleet-drift/versions/1", "models/fleet-drift/versions/2")
    model = client.get_model("fleet-drift")
    assert model.version_count == 2 and model.latest_version == two.model_version
    versions = list(client.list_model_versions("fleet-drift", page_size=1))
    assert [v.name for v in versions] == [two.model_version, one.model_version]
    assert versions[0].fit_job == two.name and versions[0].terms == ("intercept", "ts",
                                                                       "ambient_temp_c")
    assert versions[0].key_columns[0].name == "freezer_id"
    assert versions[0].key_columns[0].type == "int64"
    assert client.get_model_version("models/fleet-drift/versions/latest").name == two.model_version
    # The latest version serves the newest numbers.
    latest = client.lookup_group("fleet-drift", 5)
    assert latest.term("ts").estimate == client.lookup_group(two.model_version, 5).term("ts").estimate
    assert [m.name for m in client.list_models()] == ["models/fleet-drift"]
    # A different fit cannot become a version of the same model.
    with pytest.raises(FailedPrecondition, match="model"):
        client.create_fit_job(dataclasses.replace(SPEC, x=("ts",)), model="fleet-drift")
    with pytest.raises(InvalidArgument, match="model"):
        client.create_fit_job(SPEC, model="Bad Name")


def test_list_jobs_pages_and_filters(client, fleet):
    names = [client.create_fit_job(SPEC, model="listed" if i % 2 else None).name
             for i in range(5)]
    for n in names:
        client.wait(n, timeout=120)
    listed = [j.name for j in client.list_fit_jobs(page_size=2)]
    assert listed == names[::-1]
    assert [j.name for j in client.list_fit_jobs(model="listed")] == [names[3], names[1]]
    assert len(list(client.list_fit_jobs(state="succeeded"))) == 5
    assert list(client.list_fit_jobs(state="failed")) == []


def test_create_is_idempotent_by_request_id(client, fleet):
    a = client.create_fit_job(SPEC, request_id="nightly-2026-01-04")
    b = client.create_fit_job(SPEC, request_id="nightly-2026-01-04")
    assert a.name == b.name
    assert client.wait(a.name, timeout=120).state == "SUCCEEDED"
    assert len(list(client.list_fit_jobs())) == 1


def test_health_serving_and_reflection(server):
    target = f"127.0.0.1:{server[1]}"
    with grpc.insecure_channel(target) as ch:
        reply = health_pb2_grpc.HealthStub(ch).Check(health_pb2.HealthCheckRequest(service=""))
        assert reply.status == health_pb2.HealthCheckResponse.SERVING
        reply = health_pb2_grpc.HealthStub(ch).Check(
            health_pb2.HealthCheckRequest(service="trendmill.v1.FitJobs"))
        assert reply.status == health_pb2.HealthCheckResponse.SERVING
        from grpc_reflection.v1alpha import reflection_pb2, reflection_pb2_grpc
        stub = reflection_pb2_grpc.ServerReflectionStub(ch)
        (resp,) = list(stub.ServerReflectionInfo(iter([
            reflection_pb2.ServerReflectionRequest(list_services="")])))
        names = {s.name for s in resp.list_services_response.service}
    assert {"trendmill.v1.FitJobs", "trendmill.v1.Models", "trendmill.v1.Results",
            "grpc.health.v1.Health"} <= names
    with Client(target) as c:
        assert c.health() == "SERVING"
        assert c.health("trendmill.v1.Results") == "SERVING"


def test_results_file_written_atomically_in_state_dir(client, server, fleet):
    job = client.fit(SPEC, timeout=120)
    files = list((Path(server[0].store.directory) / "results").iterdir())
    assert [f.name for f in files] == [f"{job.name.split('/')[1]}.parquet"]
    assert pq.read_table(files[0]).num_rows == 60
