"""Ratios, targets and the printed table. Pure functions over the results dict."""

from __future__ import annotations

import math

__all__ = ["TARGETS", "ratios", "format_report"]

TM = "trendmill"
FLOOR = "duckdb-sum"

#: (scenario, ratio, comparison, goal); a ratio ``trendmill/X`` is X's seconds
#: over trendmill's, i.e. trendmill's throughput over X's.
TARGETS = [
    ("p1", "trendmill/duckdb-sum", ">=", 0.6),
    ("p1", "trendmill/duckdb-regr", ">=", 1.0),
    ("p5", "trendmill/duckdb-sum", ">=", 0.4),
    ("p1", "trendmill/pandas-lstsq", ">=", 30.0),
    ("p5", "trendmill/pandas-lstsq", ">=", 30.0),
    ("groups1m", "trendmill/pandas-lstsq", ">=", 30.0),
    ("rss", "rss-p1/rss-2days", "<=", 1.2),
    ("rss", "rss-p1/rss-thin", "<=", 1.2),
]


def _seconds(entry: dict | None) -> float | None:
    s = (entry or {}).get("seconds")
    return s if s and s > 0 else None


def ratios(results: dict) -> list[dict]:
    """Every ratio of the run, with its target and PASS/FAIL where one is set."""
    found: dict[tuple[str, str], float] = {}
    for name, sc in results["scenarios"].items():
        if sc["kind"] == "memory":
            fits = sc.get("fits", {})
            large = fits.get(sc.get("large"), {}).get("tree_peak_mb")
            for small in sc.get("small", []):
                peak = fits.get(small, {}).get("tree_peak_mb")
                if large and peak:
                    found[(name, f"rss-{sc['large']}/rss-{small.removeprefix('rss-')}")] = large / peak
            continue
        if sc["kind"] == "service":     # its own targets, printed by run.py
            continue
        tm = _seconds(sc["contestants"].get(TM))
        for other, entry in sc["contestants"].items():
            s = _seconds(entry)
            if other != TM and tm and s:
                found[(name, f"{TM}/{other}")] = s / tm
    out = []
    targets = {(s, r): (op, goal) for s, r, op, goal in TARGETS}
    for (s, r), value in found.items():
        out.append(_row(s, r, value, targets.get((s, r))))
    for (s, r), tgt in targets.items():
        if (s, r) not in found and s in results["scenarios"]:
            out.append(_row(s, r, None, tgt))
    return out


def _row(scenario: str, ratio: str, value: float | None, target) -> dict:
    row = {"scenario": scenario, "ratio": ratio, "value": value, "target": None, "result": None}
    if target:
        op, goal = target
        row["target"] = f"{op} {goal:g}"
        if value is None:
            row["result"] = "n/a"
        else:
            ok = value >= goal if op == ">=" else value <= goal
            row["result"] = "PASS" if ok else "FAIL"
    return row


def _rate(x: float) -> str:
    for unit, div in (("G", 1e9), ("M", 1e6), ("k", 1e3)):
        if x >= div:
            return f"{x / div:.1f}{unit}"
    return f"{x:.0f}"


def _fmt(v: float | None, digits: int = 2) -> str:
    if v is None or not math.isfinite(v):
        return "-"
    return f"{v:.{digits}f}" if v < 100 else f"{v:,.0f}"


def _speed_block(name: str, sc: dict) -> list[str]:
    c = sc["contestants"]
    tm, floor = _seconds(c.get(TM)), _seconds(c.get(FLOOR))
    lines = [f"{name}: {sc['about']}  [{sc['rows']:,} rows, {sc['groups']:,} groups, "
             f"{sc['bytes'] / 1e9:.2f} GB]",
             f"  {'contestant':<17}{'rows/s':>9}{'trendmill x':>13}{'of floor':>10}{'runs':>6}  note"]
    for cname, e in c.items():
        s = _seconds(e)
        if s is None:
            why = e.get("skipped") or e.get("error") or "no time"
            lines.append(f"  {cname:<17}{'-':>9}{'-':>13}{'-':>10}{'-':>6}  {why}")
            continue
        lines.append(
            f"  {cname:<17}{_rate(sc['rows'] / s) + '/s':>9}"
            f"{_fmt(s / tm if tm else None):>13}{_fmt(floor / s if floor else None):>10}"
            f"{e['runs']:>6}  {'(est.) ' if e.get('sampled') else ''}{e.get('note', '')}")
    agree = sc.get("agreement")
    if agree:
        if "skipped" in agree:
            lines.append(f"  agreement with duckdb-regr: skipped ({agree['skipped']})")
        else:
            lines.append(f"  agreement with duckdb-regr: {agree['groups']:,} groups, "
                         f"n_rows mismatches {agree['n_rows_mismatch']}, "
                         f"max |r2 difference| {agree['max_abs_r2_diff']:.2e}")
    return lines


def _memory_block(name: str, sc: dict) -> list[str]:
    lines = [f"{name}: {sc['about']}"]
    if "skipped" in sc or "error" in sc:
        return lines + [f"  {sc.get('skipped') or sc.get('error')}"]
    lines.append(f"  {'dataset':<11}{'rows':>12}{'groups':>9}{'rows/file':>11}"
                 f"{'peak RSS MB:':>14}{'all':>7}{'coordinator':>13}{'(imports)':>11}"
                 f"{'a worker':>10}")
    for label, m in sc["fits"].items():
        per_file = m["rows"] // (m["params"]["days"] * m["params"].get("files_per_day", 1))
        lines.append(f"  {label:<11}{m['rows']:>12,}{m['groups']:>9,}{per_file:>11,}{'':>14}"
                     f"{m['tree_peak_mb']:>7.0f}{m['self_peak_mb']:>13.0f}"
                     f"{m['import_peak_mb']:>11.0f}{m['worker_peak_mb']:>10.0f}")
    return lines


def format_report(results: dict) -> str:
    m = results["machine"]
    lines = [f"trendmill bench ({'quick' if results['quick'] else 'full'}): {m['cpus']} cpus, "
             f"load {m['load_start']} at start, duckdb {m['duckdb']}, pyarrow {m['pyarrow']}",
             "  'trendmill x' = contestant's time / trendmill's time (trendmill's speed-up);",
             "  'of floor' = contestant's throughput / the bare grouped-sum scan's; (est.) = "
             "sampled and scaled by rows", ""]
    for name, sc in results["scenarios"].items():
        if sc["kind"] == "service":
            continue
        lines += (_memory_block if sc["kind"] == "memory" else _speed_block)(name, sc)
        lines.append("")
    lines.append(f"  {'scenario':<10}{'ratio':<26}{'value':>9}  {'target':<8} result")
    for r in results["ratios"]:
        lines.append(f"  {r['scenario']:<10}{r['ratio']:<26}{_fmt(r['value']):>9}  "
                     f"{r['target'] or '':<8} {r['result'] or ''}")
    if results["quick"]:
        lines.append("  (--quick sizes are too small for the targets to mean much)")
    return "\n".join(lines)
