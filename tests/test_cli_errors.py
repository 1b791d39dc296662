"""The ``trendmill fit`` command on bad input: one line naming the culprit, nothing left behind.

Each case runs the real command in a subprocess (``python -m trendmill fit ...``)
over real files and checks the contract for user errors: a non-zero exit, stderr
of exactly one line that names the column / file / expression / field at fault,
no traceback, no file at ``--output`` and no temporary file beside it.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from helpers import REPO, write_parquet

pytestmark = pytest.mark.skipif(not (REPO / "service" / "trendmill" / "cli.py").exists(),
                                reason="the CLI is not written yet")

CONTRACT = ["n_rows", "status",
            *(f"{t}_{f}" for t in ("intercept", "ambient_temp_c")
              for f in ("estimate", "std_error", "t_value", "p_value", "ci_low", "ci_high")),
            "r_squared", "adj_r_squared", "residual_std_error", "df_residual", "f_statistic",
            "f_p_value", "condition_number"]


def run_cli(args: list[str], cwd: Path) -> subprocess.CompletedProcess:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(REPO / "service"), str(REPO / "client")])
    return subprocess.run([sys.executable, "-m", "trendmill", "fit", *args], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=120)


def _fleet(rng, n: int = 300) -> pa.Table:
    ambient = rng.uniform(10, 30, n)
    return pa.table({
        "site": rng.choice(["site-01", "site-02"], n),
        "freezer": rng.integers(0, 3, n),
        "ambient_temp_c": ambient,
        "door_openings": rng.integers(0, 6, n),
        "cabinet_temp_c": -18 + 0.04 * ambient + rng.normal(0, 0.2, n),
        "load_weight": rng.uniform(0.5, 2.0, n),
    })


@pytest.fixture
def fleet(tmp_path):
    """A directory of two good Parquet files of the invented freezer fleet."""
    rng = np.random.default_rng(21)
    src = tmp_path / "fleet"
    for day in ("2026-01-01", "2026-01-02"):
        write_parquet(src / f"day={day}" / "part-0.parquet", _fleet(rng))
    return src


def _truncated(src: Path) -> Path:
    good = src / "day=2026-01-01" / "part-0.parquet"
    bad = src / "day=2026-01-03" / "part-0.parquet"
    bad.parent.mkdir()
    data = good.read_bytes()
    bad.write_bytes(data[: len(data) // 2])
    return bad


def _negative_weight(src: Path) -> Path:
    rng = np.random.default_rng(22)
    t = _fleet(rng)
    w = t.column("load_weight").to_numpy().copy()
    w[5] = -0.5
    path = src / "day=2026-01-04" / "part-0.parquet"
    write_parquet(path, t.set_column(t.schema.get_field_index("load_weight"), "load_weight", pa.array(w)))
    return path


BASE = ["--y", "cabinet_temp_c", "--x", "ambient_temp_c", "--by", "freezer"]

# name -> (arguments after SOURCE, how to prepare the source, text stderr must contain)
CASES = {
    "missing_column": (["--y", "cabinet_temp_c", "--x", "compressor_amps"], None, ["compressor_amps"]),
    "string_feature": (["--y", "cabinet_temp_c", "--x", "site"], None, ["site"]),
    "missing_key": (BASE[:4] + ["--by", "rack"], None, ["rack"]),
    "truncated_file": (BASE, _truncated, ["day=2026-01-03"]),
    "negative_weight": (BASE + ["--weight", "load_weight"], _negative_weight, ["load_weight", "day=2026-01-04"]),
    "invalid_filter": (BASE + ["--filter", "ambient_temp_c >"], None, ["filter"]),
    "filter_unknown_column": (BASE + ["--filter", "humidity > 3"], None, ["humidity"]),
    "hostile_filter_sql": (BASE + ["--filter", "ambient_temp_c = 1; DROP TABLE t"], None, ["filter"]),
    "hostile_filter_python": (BASE + ["--filter", "__import__('os').system('touch PWNED')"], None, ["filter"]),
    "confidence_out_of_range": (BASE + ["--confidence", "1.5"], None, ["confidence", "1.5"]),
    "duplicate_feature": (BASE + ["--x", "ambient_temp_c"], None, ["ambient_temp_c"]),
}


def _assert_user_error(proc: subprocess.CompletedProcess, out_dir: Path, output: Path, needles) -> None:
    lines = proc.stderr.splitlines()
    assert proc.returncode != 0, proc.stderr
    assert "Traceback" not in proc.stderr, proc.stderr
    assert len(lines) == 1, f"expected one line on stderr, got {len(lines)}:\n{proc.stderr}"
    for needle in needles:
        assert needle in lines[0], f"{needle!r} not named in: {lines[0]}"
    assert not output.exists()
    assert sorted(os.listdir(out_dir)) == [], f"left behind: {os.listdir(out_dir)}"


@pytest.mark.parametrize("case", list(CASES))
def test_fit_user_error(tmp_path, fleet, case):
    args, prepare, needles = CASES[case]
    if prepare is not None:
        prepare(fleet)
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    output = out_dir / "fits.parquet"
    proc = run_cli([str(fleet), *args, "--output", str(output)], cwd=tmp_path)
    _assert_user_error(proc, out_dir, output, needles)
    # the hostile text was treated as text, never run
    assert not (tmp_path / "PWNED").exists()


@pytest.mark.parametrize("kind", ["empty_directory", "nonexistent_path"])
def test_fit_bad_source(tmp_path, kind):
    source = tmp_path / ("empty" if kind == "empty_directory" else "no-such-place")
    if kind == "empty_directory":
        source.mkdir()
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    output = out_dir / "fits.parquet"
    proc = run_cli([str(source), *BASE, "--output", str(output)], cwd=tmp_path)
    _assert_user_error(proc, out_dir, output, [source.name])


def test_fit_success_writes_the_contract(tmp_path, fleet):
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    output = out_dir / "fits.parquet"
    proc = run_cli([str(fleet), *BASE, "--filter", "site = 'site-01'", "--solver", "qr",
                    "--confidence", "0.9", "--output", str(output)], cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert "Traceback" not in proc.stderr
    table = pq.read_table(output)
    assert table.column_names[:1] == ["freezer"]
    assert [c for c in table.column_names if c in CONTRACT] == CONTRACT      # all there, in order
    assert table.column("freezer").to_pylist() == [0, 1, 2]
    assert set(table.column("status").to_pylist()) == {"ok"}
    assert os.listdir(out_dir) == ["fits.parquet"]
