"""The invented freezer-fleet generator: layout, schema, determinism, recoverable drift."""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.dataset as ds
import pyarrow.parquet as pq
import pytest

from trendmill.demo import fleet_schema, generate_fleet
from trendmill.engine.errors import Conflict, SpecError

SMALL = dict(freezers=12, days=3, interval_s=3600, sites=3, seed=7, warming_fraction=0.25)


def _read(path) -> pa.Table:
    """All rows of a generated dataset in a canonical order (day key included)."""
    t = ds.dataset(str(path), format="parquet", partitioning="hive").to_table()
    return t.sort_by([("freezer_id", "ascending"), ("ts", "ascending")])


def test_hive_layout_schema_and_counts(tmp_path):
    out = tmp_path / "fleet"
    s = generate_fleet(out, **SMALL)
    days = sorted(p.name for p in out.iterdir())
    assert days == ["day=2026-01-01", "day=2026-01-02", "day=2026-01-03"]
    for d in days:
        assert [p.name for p in (out / d).iterdir()] == ["part-0.parquet"]
        f = pq.ParquetFile(out / d / "part-0.parquet")
        assert f.schema_arrow.equals(fleet_schema())
        assert f.metadata.num_rows == 12 * 24
    assert s["rows"] == 12 * 3 * 24 and s["files"] == 3 and s["readings_per_day"] == 24
    assert s["bytes"] == sum(p.stat().st_size for p in out.rglob("*.parquet"))
    assert list(s["freezer_id"]) == list(range(1, 13))
    # 25% of 12 freezers warm, at 0.2-1.5 degC/day; the rest drift about 0
    assert s["warming_ids"].size == 3
    warm = np.isin(s["freezer_id"], s["warming_ids"])
    assert np.all((s["slope_c_per_day"][warm] >= 0.2) & (s["slope_c_per_day"][warm] <= 1.5))
    assert np.all(np.abs(s["slope_c_per_day"][~warm]) < 0.1)
    # nothing else was left beside the dataset (it is built in a temporary sibling)
    assert [p.name for p in tmp_path.iterdir()] == ["fleet"]


def test_rows_sorted_by_freezer_then_time_and_inside_their_day(tmp_path):
    generate_fleet(tmp_path / "f", **SMALL)
    for path in sorted((tmp_path / "f").rglob("*.parquet")):
        t = pq.read_table(path)
        fid = t["freezer_id"].to_numpy()
        ts = t["ts"].cast(pa.int64()).to_numpy()
        assert np.all(np.diff(fid) >= 0)
        same = np.diff(fid) == 0
        step = np.diff(ts)[same] / 1e9
        # readings every interval_s with jitter of at most +-10% of it
        assert np.all((step > 0.8 * 3600) & (step < 1.2 * 3600))
        day = np.datetime64(path.parent.name.split("=")[1], "ns").astype(np.int64)
        assert ts.min() >= day and ts.max() < day + 86_400 * 10**9
        assert t.schema.field("ts").type == pa.timestamp("ns", tz="UTC")


def test_same_seed_same_data_any_file_layout(tmp_path):
    a = generate_fleet(tmp_path / "a", **SMALL)
    generate_fleet(tmp_path / "b", **SMALL)
    c = generate_fleet(tmp_path / "c", **SMALL, files_per_day=5, row_group_rows=50)
    generate_fleet(tmp_path / "d", **{**SMALL, "seed": 8})
    ta, tb, tc, td = (_read(tmp_path / k) for k in "abcd")
    assert ta.equals(tb)
    assert ta.equals(tc), "values must not depend on files_per_day or row_group_rows"
    assert not ta.column("cabinet_temp_c").equals(td.column("cabinet_temp_c"))
    assert c["files"] == 15
    for path in (tmp_path / "c").rglob("*.parquet"):
        md = pq.ParquetFile(path).metadata
        sizes = [md.row_group(i).num_rows for i in range(md.num_row_groups)]
        assert all(n == 50 for n in sizes[:-1]) and 0 < sizes[-1] <= 50
    assert np.array_equal(a["slope_c_per_day"], c["slope_c_per_day"])


def test_values_nulls_and_ranges(tmp_path):
    generate_fleet(tmp_path / "f", freezers=60, days=2, interval_s=300, sites=4, seed=3)
    t = _read(tmp_path / "f")
    n = t.num_rows
    assert n == 60 * 2 * 288
    nulls = t["cabinet_temp_c"].null_count
    # about 0.1% sensor dropouts (~35 expected); only in the cabinet temperature
    assert 5 <= nulls <= 0.003 * n
    for name in ("site", "freezer_id", "ts", "ambient_temp_c", "door_open_s",
                 "compressor_duty", "supply_voltage_v"):
        assert t[name].null_count == 0, name
    cab = t["cabinet_temp_c"].drop_null().to_numpy()
    assert -25 < np.median(cab) < -15
    door = t["door_open_s"].to_numpy()
    assert np.mean(door == 0) > 0.9 and door.min() >= 0 and door.max() <= 180
    duty = t["compressor_duty"].to_numpy()
    assert duty.dtype == np.float32 and duty.min() >= 0 and duty.max() <= 1
    sites = set(pc.unique(t["site"]).to_pylist())
    assert sites <= {"site-01", "site-02", "site-03", "site-04"} and len(sites) >= 2
    amb = t["ambient_temp_c"].to_numpy()
    assert 5 < amb.min() and amb.max() < 40 and amb.std() > 1   # a daily cycle is there


def test_true_drift_is_recovered_by_polyfit(tmp_path):
    s = generate_fleet(tmp_path / "f", freezers=30, days=7, interval_s=600, sites=3,
                       seed=11, warming_fraction=0.2)
    t = _read(tmp_path / "f").filter(pc.is_valid(pc.field("cabinet_temp_c")))
    fid = t["freezer_id"].to_numpy()
    days = t["ts"].cast(pa.int64()).to_numpy() / 86_400e9
    cab = t["cabinet_temp_c"].to_numpy()
    fitted = np.array([np.polyfit(days[fid == f], cab[fid == f], 1)[0] for f in s["freezer_id"]])
    # reference: numpy.polyfit slope of cabinet vs days; ambient weather and noise
    # leave a few hundredths of a degree per day
    np.testing.assert_allclose(fitted, s["slope_c_per_day"], atol=0.05)
    assert set(s["freezer_id"][fitted > 0.15]) == set(s["warming_ids"])
    assert s["warming_ids"].size == 6


def test_bad_arguments_name_the_parameter(tmp_path):
    with pytest.raises(SpecError, match=r"^freezers: 0 must be >= 1"):
        generate_fleet(tmp_path / "x", freezers=0)
    with pytest.raises(SpecError, match=r"^interval_s: 5 must be between 10 and 86400"):
        generate_fleet(tmp_path / "x", interval_s=5)
    with pytest.raises(SpecError, match=r"^warming_fraction: 1.5 must be between 0 and 1"):
        generate_fleet(tmp_path / "x", warming_fraction=1.5)
    with pytest.raises(SpecError, match=r"^files_per_day: 9 must be between 1 and 4"):
        generate_fleet(tmp_path / "x", freezers=4, files_per_day=9)
    assert not (tmp_path / "x").exists()


def test_refuses_a_non_empty_directory_and_leaves_it_alone(tmp_path):
    out = tmp_path / "busy"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    with pytest.raises(Conflict, match=r"out_dir: .*busy.* not an empty directory"):
        generate_fleet(out, freezers=2, days=1)
    assert [p.name for p in out.iterdir()] == ["keep.txt"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["busy"]
    empty = tmp_path / "empty"
    empty.mkdir()
    assert generate_fleet(empty, freezers=2, days=1, interval_s=3600)["rows"] == 48
