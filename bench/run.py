"""trendmill benchmark: every contestant on the same generated data, side by side.

Usage::

    python bench/run.py [--quick] [--scenarios p1 p5 groups1m rss]
                        [--contestants NAME ...] [--out bench/out/results.json] [--check]

Prints a table of ratios (and rows/s for context) and writes all figures as
JSON. See bench/README.md.
"""

from __future__ import annotations

import argparse
import gc
import json
import os
import platform
import sys
import traceback
from pathlib import Path

HERE = Path(__file__).resolve().parent
try:
    import trendmill  # noqa: F401
except ImportError:        # run from a checkout without PYTHONPATH=service
    sys.path.insert(0, str(HERE.parent / "service"))

import numpy as np  # noqa: E402

import contestants as _contestants  # noqa: E402
from contestants import CONTESTANTS, Measurement, Unavailable  # noqa: E402
from report import format_report, ratios  # noqa: E402
from scenarios import SCENARIOS, Case, prepare  # noqa: E402

__all__ = ["main"]


def _log(msg: str) -> None:
    print(msg, file=sys.stderr, flush=True)


def _machine() -> dict:
    import duckdb
    import pandas
    import pyarrow
    return {
        "cpus": os.cpu_count(), "platform": platform.platform(),
        "python": platform.python_version(), "load_start": round(os.getloadavg()[0], 2),
        "numpy": np.__version__, "pyarrow": pyarrow.__version__,
        "duckdb": duckdb.__version__, "pandas": pandas.__version__,
    }


def _as_measurement(m) -> Measurement:
    return m if isinstance(m, Measurement) else Measurement(float(m))


def _summary(case: Case, runs: list[Measurement]) -> dict:
    best = min(runs, key=lambda m: m.seconds)
    return {"seconds": best.seconds, "runs": len(runs), "all_seconds": [m.seconds for m in runs],
            "rows_per_s": case.rows / best.seconds, "note": best.note,
            "sampled": best.sampled, "detail": best.detail}


def _agreement(case: Case) -> dict | None:
    """trendmill's n_rows and R² against DuckDB's regr_count and regr_r2, group by group."""
    tm, dk = case.scratch.get("trendmill_table"), case.scratch.get("duckdb_regr_table")
    if tm is None or dk is None:
        return None
    key = case.scenario.key
    if not {"n_rows", "r_squared"} <= set(tm.column_names):
        return {"skipped": "trendmill table lacks n_rows or r_squared"}
    a = tm.sort_by(key)
    b = dk.sort_by(key)
    if a[key].to_numpy().tolist() != b[key].to_numpy().tolist():
        return {"skipped": "the two results cover different groups"}
    ra = a["r_squared"].to_numpy(zero_copy_only=False).astype(float)
    rb = b["r2"].to_numpy(zero_copy_only=False).astype(float)
    na = a["n_rows"].to_numpy(zero_copy_only=False)
    nb = b["count"].to_numpy(zero_copy_only=False)
    both = np.isfinite(ra) & np.isfinite(rb)
    return {"groups": int(len(ra)), "n_rows_mismatch": int(np.sum(na != nb)),
            "max_abs_r2_diff": float(np.max(np.abs(ra[both] - rb[both]))) if both.any() else 0.0}


def _run_speed(case: Case, names: list[str]) -> dict:
    """Time every applicable contestant; fast ones interleaved, best run kept.

    Contestants with ``repeats > 1`` first run once untimed (page cache,
    imports, compilation), then in rounds -- A B C, A B C, ... -- so that a
    burst of load from other users of the machine hits them alike.
    """
    chosen = [CONTESTANTS[n] for n in names if CONTESTANTS[n].applies(case)]
    fast = [c for c in chosen if c.repeats > 1]
    slow = [c for c in chosen if c.repeats <= 1]
    runs: dict[str, list[Measurement]] = {c.name: [] for c in chosen}
    failed: dict[str, dict] = {}

    def attempt(c, timed: bool) -> None:
        if c.name in failed:
            return
        _log(f"  {case.scenario.name}: {c.name}{'' if timed else ' (warm-up)'} ...")
        try:
            m = _as_measurement(c.fn(case))
        except Unavailable as exc:
            failed[c.name] = {"skipped": str(exc)}
        except Exception as exc:
            traceback.print_exc()
            failed[c.name] = {"error": f"{type(exc).__name__}: {exc}"}
        else:
            if timed:
                runs[c.name].append(m)

    for c in fast:
        attempt(c, timed=False)
    for r in range(max((c.repeats for c in fast), default=0)):
        for c in fast:
            if r < c.repeats:
                attempt(c, timed=True)
    for c in slow:
        for _ in range(max(c.repeats, 1)):
            attempt(c, timed=True)
    entries = {c.name: failed.get(c.name) or _summary(case, runs[c.name]) for c in chosen}
    out = {"contestants": entries}
    agree = _agreement(case)
    if agree:
        out["agreement"] = agree
    return out


def _run_memory(case: Case) -> dict:
    import importlib.util

    from memory import peak_rss
    if importlib.util.find_spec("trendmill.local") is None:
        return {"skipped": "trendmill.local not importable"}
    sc = case.scenario
    fits = {}
    try:
        for label, data in ((sc.dataset, case.data), *zip(sc.small_datasets, case.smalls)):
            _log(f"  {sc.name}: trendmill fit on {data.rows:,} rows in a fresh process ...")
            m = peak_rss(data.path, y=sc.y, key=sc.key, x=sc.x)
            fits[label] = {**m, "rows": data.rows, "groups": data.groups, "bytes": data.bytes,
                           "params": data.params}
    except Exception as exc:
        traceback.print_exc()
        return {"error": f"{type(exc).__name__}: {exc}"}
    return {"large": sc.dataset, "small": list(sc.small_datasets), "fits": fits}


def _run_service(case: Case, *, quick: bool) -> dict:
    from service_bench import run_service_bench
    try:
        return run_service_bench(fit_source=case.data.path, lookup_source=case.smalls[0].path,
                                 repeats=2 if quick else 5, lookups=500 if quick else 5000,
                                 lookups_per_client=100 if quick else 1000, log=_log)
    except Exception as exc:
        traceback.print_exc()
        return {"error": f"{type(exc).__name__}: {exc}"}


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python bench/run.py", description=__doc__.split("\n")[0])
    ap.add_argument("--quick", action="store_true", help="tiny sizes, about a minute")
    ap.add_argument("--scenarios", nargs="+", choices=list(SCENARIOS), default=list(SCENARIOS))
    ap.add_argument("--contestants", nargs="+", choices=list(CONTESTANTS),
                    default=list(CONTESTANTS))
    ap.add_argument("--out", type=Path, default=HERE / "out" / "results.json")
    ap.add_argument("--data-dir", type=Path, default=HERE / "out" / "data",
                    help="where generated datasets are cached")
    ap.add_argument("--check", action="store_true", help="exit 1 when a target FAILs")
    args = ap.parse_args(argv)

    results = {"quick": args.quick, "machine": _machine(), "scenarios": {},
               "contestants": {n: CONTESTANTS[n].about for n in args.contestants},
               "pandas_max_groups": _contestants.PANDAS_MAX_GROUPS,
               "statsmodels_groups": _contestants.STATSMODELS_GROUPS}
    for name in args.scenarios:
        sc = SCENARIOS[name]
        case = prepare(sc, quick=args.quick, root=args.data_dir, log=_log)
        head = {"about": sc.about, "kind": sc.kind, "x": list(sc.x), "y": sc.y, "key": sc.key,
                "rows": case.rows, "groups": case.groups, "bytes": case.data.bytes,
                "params": case.data.params}
        if sc.kind == "memory":
            body = _run_memory(case)
        elif sc.kind == "service":
            body = _run_service(case, quick=args.quick)
        else:
            body = _run_speed(case, args.contestants)
        results["scenarios"][name] = {**head, **body}
        case.scratch.clear()      # drop the pandas frame before the next scenario
        gc.collect()
    results["machine"]["load_end"] = round(os.getloadavg()[0], 2)
    results["ratios"] = ratios(results)

    print(format_report(results))
    service = results["scenarios"].get("service", {})
    for t in service.get("targets", []):
        print(f"  service {t['figure']:<28} {t['value']:>10.3f}  ({t['bound']})  {t['result']}")
        results["ratios"].append({"scenario": "service", "ratio": t["figure"], "value": t["value"],
                                  "target": t["bound"], "result": t["result"]})
    for name in ("service_overhead_s", "lookup_p50_ms", "lookup_p99_ms", "lookups_per_s", "concurrent_clients"):
        if name in service:
            print(f"  service {name:<28} {service[name]:>10.3f}")
    args.out.parent.mkdir(parents=True, exist_ok=True)
    tmp = args.out.with_suffix(".tmp")
    tmp.write_text(json.dumps(results, indent=1, default=str))
    os.replace(tmp, args.out)
    print(f"\nwritten {args.out}")
    failed = any(r["result"] == "FAIL" for r in results["ratios"])
    return 1 if (args.check and failed) else 0


if __name__ == "__main__":
    sys.exit(main())
