"""Bearer tokens, TLS and data roots on a real server."""

from __future__ import annotations

import os

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from service_fixtures import *  # noqa: F401,F403
from trendmill.engine.errors import AccessError, SourceNotFound
from trendmill.service._roots import DataRoots
from trendmill_client import (Client, FitSpec, InvalidArgument, PermissionDenied,
                              Unauthenticated, Unavailable)

FAST = FitSpec("fleet", "cabinet_temp_c", ("ts",), by=("freezer_id",))


def test_token_protected_server(start_server, tmp_path, fleet):
    token_file = tmp_path / "tokens"
    token_file.write_text("# rotated weekly\nold-token-1\n\nnew-token-2\n")
    token_file.chmod(0o600)
    _, port = start_server(token_file=str(token_file))
    target = f"127.0.0.1:{port}"
    with Client(target) as anon:
        with pytest.raises(Unauthenticated, match="authorization"):
            anon.create_fit_job(FAST)
        with pytest.raises(Unauthenticated):
            list(anon.list_fit_jobs())
        with pytest.raises(Unauthenticated):
            next(anon.watch_fit_job("fitJobs/0000000000000000"))
        # Health stays open to probes.
        assert anon.health() == "SERVING"
    with Client(target, token="wrong") as bad:
        with pytest.raises(Unauthenticated, match="not accepted"):
            bad.get_model("models/none")
    mine = tmp_path / "client-token"
    mine.write_text("new-token-2\n")
    for kwargs in (dict(token="old-token-1"), dict(token_file=str(mine))):
        with Client(target, timeout=60, **kwargs) as ok:
            job = ok.fit(FAST, timeout=120)
            assert job.state == "SUCCEEDED"
            assert ok.lookup_group(job.name, 3).status == "ok"


def test_tls_server_with_a_trusting_client(start_server, tls_files, fleet):
    cert, key = tls_files
    _, port = start_server(tls_cert=cert, tls_key=key)
    with Client(f"127.0.0.1:{port}", tls_ca=cert, timeout=60) as c:
        assert c.health() == "SERVING"
        job = c.fit(FAST, timeout=120)
        assert job.state == "SUCCEEDED"
        assert c.read_table(job.name).num_rows == 60
    with open(cert, "rb") as f:
        pem = f.read()
    with Client(f"localhost:{port}", tls_ca=pem, timeout=30) as c:
        assert c.get_fit_job(job.name).state == "SUCCEEDED"
    # A plaintext client cannot talk to it.
    with Client(f"127.0.0.1:{port}", timeout=3, retries=0) as plain:
        with pytest.raises(Unavailable):
            plain.get_fit_job(job.name)


def test_sources_outside_the_data_roots_are_permission_denied(start_server, tmp_path,
                                                              data_root, fleet):
    outside = tmp_path / "outside"
    outside.mkdir()
    pq.write_table(pa.table({"y": [1.0, 2.0, 3.0], "x": [0.0, 1.0, 2.0]}),
                   outside / "secret.parquet")
    link = data_root / "escape-link"
    if not link.exists():
        os.symlink(outside, link)
    _, port = start_server()
    with Client(f"127.0.0.1:{port}") as c:
        for source in (str(outside / "secret.parquet"), "../outside/secret.parquet",
                       "fleet/../../outside", "escape-link", "escape-link/secret.parquet",
                       str(outside / "missing.parquet")):
            with pytest.raises(PermissionDenied, match="source") as e:
                c.create_fit_job(FitSpec(source, "y", ("x",)))
            assert e.value.reason == "OUTSIDE_DATA_ROOTS"
        with pytest.raises(InvalidArgument, match="source"):
            c.create_fit_job(FitSpec("", "y", ("x",)))
        # An absolute path inside the root is fine.
        job = c.fit(FitSpec(str(data_root / fleet), "cabinet_temp_c", ("ts",)), timeout=120)
        assert job.state == "SUCCEEDED" and job.summary.groups == 1


def test_data_roots_resolution(tmp_path):
    root = tmp_path / "root"
    (root / "a" / "day=1").mkdir(parents=True)
    (root / "a" / "day=1" / "p.parquet").write_bytes(b"x")
    other = tmp_path / "other"
    other.mkdir()
    roots = DataRoots([root])
    assert roots.resolve("a") == str(root / "a")
    assert roots.resolve("a/day=*/p.parquet") == str(root / "a" / "day=*" / "p.parquet")
    assert roots.resolve(str(root / "a")) == str(root / "a")
    with pytest.raises(SourceNotFound):
        roots.resolve("nothing")
    with pytest.raises(SourceNotFound):
        roots.resolve("a/day=*/q.parquet")
    # A link deep inside a directory source must not lead out either.
    os.symlink(other, root / "a" / "day=1" / "sneaky")
    with pytest.raises(AccessError, match="link leading outside"):
        roots.resolve("a")
    with pytest.raises(AccessError, match=r"'\.\.'"):
        roots.resolve("a/../a")
