#!/usr/bin/env python
"""Demo: find the freezers that are warming, through the trendmill service.

1. writes the invented freezer-fleet dataset (one Parquet partition per day),
2. starts ``trendmill serve`` on loopback (a free port, a bearer token, a
   fresh state directory),
3. submits the fit through the thin client and shows its progress,
4. prints the freezers with the steepest warming trend: the slope of cabinet
   temperature in degrees per day with its confidence interval (next to the
   drift the generator put in, to show the fit finds it),
5. looks one freezer up and predicts its temperature at noon on the last day,
6. stops the service it started.

Usage: ``python scripts/demo.py [--freezers N] [--days D] [--workdir DIR]``.
Everything is written under the work dir (default: a temp dir, removed after).
"""

from __future__ import annotations

import argparse
import secrets
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path[:0] = [str(ROOT / "service"), str(ROOT / "client")]

from trendmill._progress import ProgressBar  # noqa: E402
from trendmill.demo import generate_fleet  # noqa: E402
from trendmill.service.launch import start_server, stop_server  # noqa: E402
from trendmill_client import Client, FitSpec  # noqa: E402

DAY_S = 86_400


def start_service(workdir: Path, data_root: Path, token_file: Path) -> tuple[subprocess.Popen, str]:
    """Start ``trendmill serve`` on a free loopback port; returns (process, address)."""
    try:
        return start_server(["--listen", "127.0.0.1:0", "--state", str(workdir / "state"),
                             "--data-root", str(data_root), "--token-file", str(token_file)])
    except RuntimeError as exc:
        raise SystemExit(f"demo: {exc}") from None


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--freezers", type=int, default=400)
    parser.add_argument("--days", type=int, default=14)
    parser.add_argument("--interval-s", type=int, default=300, help="seconds between readings")
    parser.add_argument("--top", type=int, default=10, help="freezers to show")
    parser.add_argument("--workdir", help="keep data and state here (default: a temp dir)")
    args = parser.parse_args(argv)

    workdir = Path(args.workdir) if args.workdir else Path(tempfile.mkdtemp(prefix="trendmill-demo-"))
    workdir.mkdir(parents=True, exist_ok=True)
    data_root = workdir / "data"
    try:
        t0 = time.perf_counter()
        fleet = generate_fleet(data_root / "fleet", freezers=args.freezers, days=args.days,
                               interval_s=args.interval_s)
        print(f"1. wrote {fleet['rows']:,} readings of {args.freezers} freezers over "
              f"{args.days} days ({fleet['files']} Parquet files) in "
              f"{time.perf_counter() - t0:.1f} s")
        true_slope = dict(zip(fleet["freezer_id"].tolist(), fleet["slope_c_per_day"].tolist()))

        token_file = workdir / "token"
        token_file.write_text(secrets.token_urlsafe(24) + "\n")
        token_file.chmod(0o600)
        proc, address = start_service(workdir, data_root, token_file)
        try:
            print(f"2. trendmill serve is listening on {address} (bearer token required)")
            with Client(address, token_file=str(token_file), timeout=60) as client:
                spec = FitSpec("fleet", y="cabinet_temp_c",
                               x=("ts", "ambient_temp_c", "door_open_s"),
                               by=("site", "freezer_id"))
                job = client.create_fit_job(spec, model="freezer-drift")
                print(f"3. submitted {job.name}: cabinet_temp_c ~ ts + ambient_temp_c + "
                      "door_open_s per (site, freezer_id)")
                bar = ProgressBar(enabled=True, stream=sys.stdout)
                for job in client.watch_fit_job(job.name):
                    p = job.progress
                    if p.partitions_total:
                        bar.update(p.partitions_done, p.partitions_total, p.rows_read,
                                   p.bytes_read)
                bar.close()
                if job.state != "SUCCEEDED":
                    print(f"demo: the fit {job.state.lower()}: {job.error.message}",
                          file=sys.stderr)
                    return 1
                s = job.summary
                print(f"   {job.state.lower()}: {s.groups} freezers ({s.groups_ok} ok) from "
                      f"{s.rows_read:,} rows in {s.fit_seconds:.2f} s -> {job.model_version}")

                rows = [r for r in client.read_rows(job.model_version) if r["status"] == "ok"]
                rows.sort(key=lambda r: r["ts_estimate"], reverse=True)
                level = round(spec.confidence * 100)
                print(f"4. steepest warming trends (cabinet degC per day, {level}% confidence "
                      "interval; ambient and door openings held fixed):")
                print(f"   {'site':<8} {'freezer':>7} {'slope':>8}  {'interval':<19} "
                      f"{'true drift':>10}")
                for r in rows[:args.top]:
                    lo, hi = r["ts_ci_low"] * DAY_S, r["ts_ci_high"] * DAY_S
                    print(f"   {r['site']:<8} {r['freezer_id']:>7} {r['ts_estimate'] * DAY_S:>+8.3f}"
                          f"  [{lo:+.3f}, {hi:+.3f}]  {true_slope[r['freezer_id']]:>+10.3f}")

                top = rows[0]
                key = (top["site"], top["freezer_id"])
                fit = client.lookup_group(job.model_version, key)
                # inside the fitted range: a trend says nothing beyond the data it saw
                last_noon = float((fleet["days"] - 1) * DAY_S + DAY_S / 2) + _start_epoch(fleet)
                pred = client.predict("freezer-drift", key, [[last_noon, 20.0, 0.0]])
                p = pred.predictions[0]
                print(f"5. lookup {key[0]}/{key[1]}: {fit.n_rows} readings, R² {fit.r_squared:.3f}; "
                      f"at noon on the last day (ambient 20 degC, door shut) its cabinet "
                      f"is predicted at {p.mean:+.2f} degC ({round(pred.confidence * 100)}% "
                      f"prediction interval {p.prediction_low:+.2f} .. {p.prediction_high:+.2f})")
        finally:
            stop_server(proc)
            print("6. stopped the service")
    finally:
        if not args.workdir:
            shutil.rmtree(workdir, ignore_errors=True)
    return 0


def _start_epoch(fleet: dict) -> float:
    """Seconds since 1970 of the dataset's first midnight (timestamps fit as seconds)."""
    import datetime as dt

    start = dt.datetime.fromisoformat(fleet["start"]).replace(tzinfo=dt.timezone.utc)
    return start.timestamp()


if __name__ == "__main__":
    sys.exit(main())
