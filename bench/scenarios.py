"""Benchmark scenarios and their cached datasets (the invented freezer fleet).

A scenario names a dataset (generator parameters) and a model (y, x, group
key). Datasets are generated once with ``trendmill.demo.generate_fleet`` and
kept under ``bench/out/data/<dataset>/`` together with the parameters that made
them; a later run reuses them when the parameters match and regenerates them
otherwise.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
from dataclasses import dataclass, field
from pathlib import Path

import trendmill.demo
from trendmill.demo import generate_fleet

__all__ = ["Scenario", "Case", "DATASETS", "SCENARIOS", "prepare"]

#: fixed for every dataset; part of the cache key with the sizes below
BASE_PARAMS = dict(sites=8, seed=0, warming_fraction=0.05)
FEATURES_5 = ("ts", "ambient_temp_c", "door_open_s", "compressor_duty", "supply_voltage_v")

# generator parameters; rows = freezers * days * (86400 // interval_s)
DATASETS = {
    "full": {
        "p1": dict(freezers=10_000, days=24, interval_s=415),         # 49.9M rows
        "p5": dict(freezers=1_000, days=14, interval_s=60),           # 20.2M rows
        "groups1m": dict(freezers=1_000_000, days=2, interval_s=8640),  # 20.0M rows
        # the first 2 days of p1 exactly (same files): 4.2M rows
        "rss-2days": dict(freezers=10_000, days=2, interval_s=415),
        # p1's freezers and days, a tenth of the readings (10x smaller files): 4.8M rows
        "rss-thin": dict(freezers=10_000, days=24, interval_s=4150),
    },
    "quick": {
        "p1": dict(freezers=500, days=4, interval_s=415),             # 416k rows
        "p5": dict(freezers=100, days=3, interval_s=300),             # 86k rows
        "groups1m": dict(freezers=20_000, days=1, interval_s=8640),     # 200k rows
        "rss-2days": dict(freezers=500, days=2, interval_s=415),        # 208k rows
        "rss-thin": dict(freezers=500, days=4, interval_s=4150),        # 40k rows
    },
}


@dataclass(frozen=True, slots=True)
class Scenario:
    """What is fitted: ``y ~ x`` per ``key`` over dataset ``dataset``.

    ``kind`` is ``"speed"`` (contestants are timed side by side), ``"memory"``
    (peak RSS of a trendmill fit on ``dataset`` vs on each of ``small_datasets``) or
    ``"service"`` (remote vs local fit of ``dataset``; lookups in a model of the
    first of ``small_datasets``).
    """

    name: str
    about: str
    dataset: str
    x: tuple[str, ...]
    y: str = "cabinet_temp_c"
    key: str = "freezer_id"
    kind: str = "speed"
    small_datasets: tuple[str, ...] = ()


SCENARIOS = {
    "p1": Scenario("p1", "cabinet ~ ts per freezer (p=1), many rows per group", "p1", ("ts",)),
    "p5": Scenario("p5", "cabinet ~ 5 features per freezer (p=5)", "p5", FEATURES_5),
    "groups1m": Scenario("groups1m", "cabinet ~ ts (p=1), very many groups of 20 rows",
                         "groups1m", ("ts",)),
    "rss": Scenario("rss", "peak RSS of a trendmill fit (p=1): the p1 data vs about a tenth of "
                    "its rows, same groups", "p1", ("ts",), kind="memory",
                    small_datasets=("rss-2days", "rss-thin")),
    "service": Scenario("service", "the same p1 fit through the gRPC service vs locally; lookup "
                        "latency in a 1M-group model", "p1", ("ts",), kind="service",
                        small_datasets=("groups1m",)),
}


@dataclass(frozen=True, slots=True)
class Dataset:
    """A generated dataset on disk."""

    name: str
    path: Path
    rows: int
    groups: int
    bytes: int
    params: dict

    @property
    def glob(self) -> str:
        return str(self.path / "**" / "*.parquet")


@dataclass(frozen=True, slots=True)
class Case:
    """A scenario bound to its data; what a contestant function receives.

    ``scratch`` lets contestants of the same scenario share work that is not
    timed twice (the pandas frame) and leave results for the sanity checks.
    """

    scenario: Scenario
    data: Dataset
    smalls: tuple[Dataset, ...] = ()
    scratch: dict = field(default_factory=dict)

    @property
    def rows(self) -> int:
        return self.data.rows

    @property
    def groups(self) -> int:
        return self.data.groups


def _dataset(root: Path, name: str, params: dict, *, log) -> Dataset:
    """Generate ``root/name`` unless the cached copy was made with ``params``."""
    home = root / name
    # a change to the generator's code invalidates its data too
    code = hashlib.sha256(Path(trendmill.demo.__file__).read_bytes()).hexdigest()[:12]
    params = {**params, "generator": code}
    meta_path = home / "params.json"
    fleet = home / "fleet"
    meta = None
    if meta_path.exists() and fleet.is_dir():
        meta = json.loads(meta_path.read_text())
        if meta.get("params") != params:
            meta = None
    if meta is None:
        if home.exists():
            shutil.rmtree(home)       # stale: made with other parameters
        home.mkdir(parents=True)
        log(f"generating dataset {name} {params} ...")
        s = generate_fleet(fleet, **{k: v for k, v in params.items() if k != "generator"})
        meta = {"params": params, "rows": s["rows"], "groups": s["freezers"],
                "bytes": s["bytes"]}
        tmp = meta_path.with_suffix(".tmp")
        tmp.write_text(json.dumps(meta, indent=1))
        os.replace(tmp, meta_path)    # written last: its presence means complete
    return Dataset(name, fleet, meta["rows"], meta["groups"], meta["bytes"], params)


def prepare(scenario: Scenario, *, quick: bool, root: Path, log=print) -> Case:
    """Bind ``scenario`` to its (cached or freshly generated) data."""
    sizes = DATASETS["quick" if quick else "full"]
    prefix = "quick-" if quick else ""

    def get(name: str) -> Dataset:
        return _dataset(root, prefix + name, {**BASE_PARAMS, **sizes[name]}, log=log)

    smalls = tuple(get(name) for name in scenario.small_datasets)
    return Case(scenario, get(scenario.dataset), smalls)
