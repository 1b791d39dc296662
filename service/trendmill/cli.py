"""The ``trendmill`` command: fit locally or on a server, generate demo data, run the service.

User errors print one line on stderr (``trendmill: error: ...``) and exit 2; no
traceback, and no file is left at ``--output``.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

from .engine.errors import TrendmillError

__all__ = ["main", "build_parser"]

EXIT_USER_ERROR = 2
EXIT_INTERRUPTED = 130


class _Parser(argparse.ArgumentParser):
    """argparse, but a usage error is one line, like every other error."""

    def error(self, message: str) -> None:   # noqa: D401 - argparse API
        raise _UsageError(f"{self.prog}: {message}")


class _UsageError(Exception):
    pass


def _add_fit_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("source", metavar="SOURCE", help="Parquet file, directory (hive partitions) or glob")
    p.add_argument("--y", required=True, metavar="COL", help="response column")
    p.add_argument("--x", action="append", required=True, metavar="COL", help="feature column (repeat)")
    p.add_argument("--by", action="append", default=[], metavar="COL", help="group key column (repeat)")
    p.add_argument("--weight", metavar="COL", help="precision weight column (>= 0)")
    p.add_argument("--no-intercept", action="store_true", help="fit through the origin")
    p.add_argument("--filter", metavar="EXPR", help="row filter, e.g. \"ambient_temp_c < 30 AND site = 'site-02'\"")
    p.add_argument("--solver", choices=("normal", "qr"), default="normal",
                   help="normal: equilibrated Cholesky (default); qr: R-factor state, never squares the data")
    p.add_argument("--confidence", type=float, default=0.95, help="confidence level of the intervals (default 0.95)")
    p.add_argument("--output", required=True, metavar="PATH.parquet", help="result file (written atomically)")
    p.add_argument("--workers", type=int, default=None, help="local worker processes (default: one per core)")
    p.add_argument("--server", metavar="HOST:PORT", help="run the fit on a trendmill server")
    p.add_argument("--token-file", metavar="F", help="bearer token file for --server")
    p.add_argument("--tls-ca", metavar="F", help="CA certificate to trust for --server over TLS")
    p.add_argument("--model", metavar="NAME", help="with --server: save the fit as a version of this model")
    p.add_argument("--quiet", action="store_true", help="no progress bar and no summary")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="trendmill", description="Per-group least squares over Parquet.")
    sub = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)
    fit = sub.add_parser("fit", help="fit y ~ x per group and write one result row per group")
    _add_fit_options(fit)
    gen = sub.add_parser("generate", help="write the invented freezer-fleet demo dataset")
    gen.add_argument("out", metavar="DIR")
    gen.add_argument("--freezers", type=int, default=200)
    gen.add_argument("--days", type=int, default=7)
    gen.add_argument("--interval-s", type=int, default=300, help="seconds between readings")
    gen.add_argument("--seed", type=int, default=0)
    try:
        from . import cli_remote
    except ImportError:     # the service layer is optional for local use
        cli_remote = None
    if cli_remote is not None:
        cli_remote.add_commands(sub)
    return parser


def _spec_from_args(args: argparse.Namespace):
    from .engine.spec import FitSpec
    return FitSpec(source=args.source, y=args.y, x=tuple(args.x), by=tuple(args.by), weight=args.weight,
                   intercept=not args.no_intercept, filter=args.filter, solver=args.solver,
                   confidence=args.confidence)


def _check_output(path: str) -> None:
    if not path.endswith(".parquet"):
        raise TrendmillError(f"--output: {path!r} must end in .parquet")
    directory = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(directory):
        raise TrendmillError(f"--output: directory {directory!r} does not exist")


def _summary(table, rows: int, partitions: int, seconds: float, output: str) -> str:
    import pyarrow.compute as pc
    groups = table.num_rows
    ok = pc.sum(pc.equal(table.column("status"), "ok")).as_py() or 0 if groups else 0
    rate = rows / seconds if seconds > 0 else float("nan")
    from ._progress import human_count
    return (f"fitted {groups} groups ({ok} ok, {groups - ok} flagged) from {human_count(rows)} rows in "
            f"{partitions} partitions, {seconds:.2f} s ({human_count(rate)} rows/s) -> {output}")


def _cmd_fit(args: argparse.Namespace) -> int:
    spec = _spec_from_args(args)
    _check_output(args.output)
    if args.server:
        from .cli_remote import fit_remote
        return fit_remote(spec, server=args.server, output=args.output, token_file=args.token_file,
                          tls_ca=args.tls_ca, model=args.model, progress=not args.quiet)
    if args.workers is not None and args.workers < 1:
        raise TrendmillError(f"--workers: {args.workers} must be >= 1")
    from ._progress import ProgressBar
    from .io.results import write_results
    from .local import run_fit
    bar = ProgressBar(enabled=False if args.quiet else None)
    try:
        run = run_fit(spec, workers=args.workers, progress=lambda p: bar.update(
            p.partitions_done, p.partitions_total, p.rows_read, p.bytes_read, p.rows_total))
    finally:
        bar.close()
    write_results(run.table, args.output)
    if not args.quiet:
        print(_summary(run.table, run.rows_read, run.partitions, run.seconds, args.output), file=sys.stderr)
    return 0


def _cmd_generate(args: argparse.Namespace) -> int:
    from .demo import generate_fleet
    t0 = time.perf_counter()
    info = generate_fleet(args.out, freezers=args.freezers, days=args.days, interval_s=args.interval_s,
                          seed=args.seed)
    print(f"wrote {info['rows']} rows in {info['files']} files to {args.out} "
          f"({time.perf_counter() - t0:.1f} s)", file=sys.stderr)
    return 0


def main(argv: list[str] | None = None) -> int:
    try:
        parser = build_parser()
        args = parser.parse_args(argv)
        handler = {"fit": _cmd_fit, "generate": _cmd_generate}.get(args.command) or args.handler
        return handler(args)
    except _UsageError as exc:
        print(f"{exc}", file=sys.stderr)
        return EXIT_USER_ERROR
    except TrendmillError as exc:
        print(f"trendmill: error: {exc.message}", file=sys.stderr)
        return EXIT_USER_ERROR
    except KeyboardInterrupt:
        print("trendmill: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED


if __name__ == "__main__":
    sys.exit(main())
