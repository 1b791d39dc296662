"""Fixtures of the service and client tests: real data, real servers on loopback.

Import the fixtures into a test module with
``from service_fixtures import *  # noqa: F401,F403``. Every server binds
``127.0.0.1:0`` (a free port), uses a state directory under ``tmp_path`` and
is stopped at the end of the test.
"""

from __future__ import annotations

import datetime as dt
import os
from pathlib import Path

import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.dataset as ds
import pytest

from trendmill.demo import generate_fleet
from trendmill.service import ServerConfig, create_server
from trendmill_client import Client

__all__ = ["data_root", "fleet", "slow_fleet", "start_server", "server", "client",
           "read_source", "group_rows", "tls_files", "SLOW_COPIES"]

#: hard links of one day file in the slow fleet (each is one partition)
SLOW_COPIES = 300


@pytest.fixture(scope="session")
def data_root(tmp_path_factory) -> Path:
    """A data root holding the session's datasets."""
    return tmp_path_factory.mktemp("data")


@pytest.fixture(scope="session")
def fleet(data_root) -> str:
    """Small freezer fleet, relative to ``data_root``: 60 freezers, 3 day partitions."""
    generate_fleet(data_root / "fleet", freezers=60, days=3, interval_s=900, sites=4, seed=11,
                   warming_fraction=0.1)
    return "fleet"


@pytest.fixture(scope="session")
def slow_fleet(data_root) -> str:
    """A fleet of many partitions, so that a fit runs long enough to cancel or interrupt.

    One generated day file (96 freezers, 1-minute readings) is hard-linked
    SLOW_COPIES times under distinct day directories: real Parquet files, each
    one partition, at no cost in disk or generation time.
    """
    seed_dir = data_root / "slow-seed"
    generate_fleet(seed_dir, freezers=96, days=1, interval_s=60, sites=4, seed=5)
    (day_file,) = list(seed_dir.glob("day=*/part-0.parquet"))
    out = data_root / "slow"
    start = dt.date(2026, 1, 1)
    for i in range(SLOW_COPIES):
        d = out / f"day={(start + dt.timedelta(days=i)).isoformat()}"
        d.mkdir(parents=True)
        os.link(day_file, d / "part-0.parquet")
    return "slow"


@pytest.fixture
def start_server(tmp_path, data_root):
    """Factory: ``start_server(**config) -> (server, port)``; all are stopped after the test."""
    started = []

    def start(**config):
        config.setdefault("state_dir", str(tmp_path / "state"))
        config.setdefault("data_roots", (str(data_root),))
        config.setdefault("workers", 1)
        srv, port = create_server(ServerConfig(listen="127.0.0.1:0", **config))
        started.append(srv)
        return srv, port

    yield start
    for srv in started:
        srv.stop(grace=5.0)


@pytest.fixture
def server(start_server):
    """A plain server (no token, no TLS): ``(server, port)``."""
    return start_server()


@pytest.fixture
def client(server):
    with Client(f"127.0.0.1:{server[1]}", timeout=60.0) as c:
        yield c


def read_source(root: Path, source: str) -> pa.Table:
    """Every row of a hive-partitioned dataset under ``root`` (day key included)."""
    return ds.dataset(str(root / source), format="parquet", partitioning="hive").to_table()


def group_rows(table: pa.Table, column: str, value) -> pa.Table:
    return table.filter(pc.equal(table.column(column), value))


@pytest.fixture(scope="session")
def tls_files(tmp_path_factory):
    """A self-signed certificate for localhost / 127.0.0.1 and its key: (cert, key) paths."""
    from cryptography import x509
    from cryptography.hazmat.primitives import hashes, serialization
    from cryptography.hazmat.primitives.asymmetric import ec
    from cryptography.x509.oid import NameOID
    import ipaddress

    key = ec.generate_private_key(ec.SECP256R1())
    name = x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, "trendmill test")])
    now = dt.datetime.now(dt.timezone.utc)
    cert = (x509.CertificateBuilder()
            .subject_name(name).issuer_name(name).public_key(key.public_key())
            .serial_number(x509.random_serial_number())
            .not_valid_before(now - dt.timedelta(minutes=5))
            .not_valid_after(now + dt.timedelta(days=1))
            .add_extension(x509.SubjectAlternativeName([
                x509.DNSName("localhost"), x509.IPAddress(ipaddress.ip_address("127.0.0.1"))]),
                critical=False)
            .add_extension(x509.BasicConstraints(ca=True, path_length=None), critical=True)
            .sign(key, hashes.SHA256()))
    d = tmp_path_factory.mktemp("tls")
    cert_path, key_path = d / "cert.pem", d / "key.pem"
    cert_path.write_bytes(cert.public_bytes(serialization.Encoding.PEM))
    key_path.write_bytes(key.private_bytes(serialization.Encoding.PEM,
                                           serialization.PrivateFormat.PKCS8,
                                           serialization.NoEncryption()))
    return str(cert_path), str(key_path)

