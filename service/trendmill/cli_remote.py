"""Remote mode of the ``trendmill`` command: the server and the commands that call it.

Commands (all take ``--server HOST:PORT``, default ``$TRENDMILL_SERVER``, and
``--token-file F`` / ``--tls-ca F``, defaults ``$TRENDMILL_TOKEN_FILE`` /
``$TRENDMILL_TLS_CA``)::

    trendmill serve --listen HOST:PORT --state DIR [--data-root DIR...] ...
    trendmill fit SOURCE ... --output F --server HOST:PORT [--model NAME]
    trendmill jobs [--state S] [--model M] [--limit N]
    trendmill job JOB
    trendmill watch JOB
    trendmill cancel JOB
    trendmill models
    trendmill versions MODEL
    trendmill lookup RESULT [--key V ...]
    trendmill predict RESULT [--key V ...] --at X[,X...] [--at ...] [--confidence C]
    trendmill results RESULT --output F.parquet

RESULT is ``models/{model}[/versions/{n}]``, ``fitJobs/{job}`` or a bare
model id. Listings print tab-separated lines with a header (``--json``: one
JSON object per line), so they can be piped and cron'd. Errors are one line
on stderr. Exit status: 0 success; 1 the job failed or was cancelled; 2 the
request was refused (bad input, not found, no access...); 130 interrupted.
"""

from __future__ import annotations

import argparse
import functools
import json
import math
import os
import sys

__all__ = ["add_commands", "fit_remote", "main_serve"]

EXIT_JOB_FAILED = 1
EXIT_REFUSED = 2
EXIT_INTERRUPTED = 130


def _progress_bar(enabled: bool | None):
    from ._progress import ProgressBar

    return ProgressBar(enabled=enabled)


def _fail(message: str, status: int = EXIT_REFUSED) -> int:
    print(f"trendmill: error: {message}", file=sys.stderr)
    return status


def _client_errors(fn):
    """Turn client-side failures into one line on stderr and exit status 2."""
    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        from trendmill_client import ServiceError

        try:
            return fn(*args, **kwargs)
        except ServiceError as exc:
            return _fail(f"{exc.code}: {exc.message}")
        except OSError as exc:
            return _fail(f"{exc.filename or ''}: {exc.strerror or exc}".lstrip(": "))
        except ValueError as exc:
            return _fail(str(exc))
    return wrapper


def _connect(server: str | None, token_file: str | None, tls_ca: str | None,
             timeout: float | None = None):
    from trendmill_client import Client

    server = server or os.environ.get("TRENDMILL_SERVER")
    if not server:
        raise ValueError("--server: give HOST:PORT (or set TRENDMILL_SERVER)")
    token_file = token_file or os.environ.get("TRENDMILL_TOKEN_FILE") or None
    tls_ca = tls_ca or os.environ.get("TRENDMILL_TLS_CA") or None
    return Client(server, token_file=token_file, tls_ca=tls_ca,
                  timeout=30.0 if timeout is None else timeout)


# -- fit ----------------------------------------------------------------------
def _watch_with_bar(client, name: str, *, progress: bool):
    bar = _progress_bar(None if progress else False)
    job = None
    try:
        for job in client.watch_fit_job(name):
            p = job.progress
            if p.partitions_total:
                bar.update(p.partitions_done, p.partitions_total, p.rows_read, p.bytes_read)
    finally:
        bar.close()
    return job


def _job_outcome(job) -> str:
    if job.state == "SUCCEEDED":
        s = job.summary
        where = job.model_version or job.name
        if s is None:
            return f"{job.name} succeeded -> {where}"
        rate = s.rows_read / s.fit_seconds if s.fit_seconds > 0 else float("nan")
        return (f"fitted {s.groups} groups ({s.groups_ok} ok, {s.groups - s.groups_ok} flagged) "
                f"from {s.rows_read} rows in {s.partitions} partitions, {s.fit_seconds:.2f} s "
                f"({rate:,.0f} rows/s) on the server -> {where}")
    e = job.error
    why = f"{e.code}: {e.message}" if e else job.state
    return f"{job.name} {job.state.lower()}: {why}"


@_client_errors
def fit_remote(spec, *, server: str, output: str, token_file: str | None = None,
               tls_ca: str | None = None, model: str | None = None,
               progress: bool = True) -> int:
    """Run ``spec`` on a server, show its progress, write its result to ``output``.

    Returns the exit status. Ctrl-C cancels the job on the server. The output
    file is written (atomically) only when the job succeeded.
    """
    from trendmill_client import FitSpec as RemoteSpec

    from .io.results import write_results

    remote = RemoteSpec(**spec.to_dict())
    with _connect(server, token_file, tls_ca) as client:
        job = client.create_fit_job(remote, model=model)
        try:
            job = _watch_with_bar(client, job.name, progress=progress) or job
        except KeyboardInterrupt:
            try:
                client.cancel_fit_job(job.name, timeout=5.0)
                print(f"trendmill: cancelled {job.name}", file=sys.stderr)
            except Exception:  # noqa: BLE001 - interrupted anyway; say what we know
                print(f"trendmill: interrupted; {job.name} may still run", file=sys.stderr)
            return EXIT_INTERRUPTED
        if job.state != "SUCCEEDED":
            return _fail(_job_outcome(job), EXIT_JOB_FAILED)
        table = client.read_table(job.result)
    write_results(table, output)
    if progress:
        print(f"{_job_outcome(job)}; wrote {output}", file=sys.stderr)
    return 0


# -- listing helpers ------------------------------------------------------------
def _iso(t) -> str:
    return t.isoformat(timespec="seconds") if t is not None else ""


def _print_rows(rows: list[dict], columns: list[str], as_json: bool) -> None:
    out = sys.stdout
    if as_json:
        for r in rows:
            out.write(json.dumps(r, default=str) + "\n")
        return
    out.write("\t".join(columns) + "\n")
    for r in rows:
        out.write("\t".join(_cell(r.get(c)) for c in columns) + "\n")


def _cell(v) -> str:
    if v is None:
        return ""
    if isinstance(v, float):
        return repr(v) if math.isfinite(v) else str(v)
    return str(v).replace("\t", " ").replace("\n", " ")


def _job_row(job) -> dict:
    p = job.progress
    return {"name": job.name, "state": job.state, "model": job.model or "",
            "version": job.model_version or "",
            "progress": f"{p.partitions_done}/{p.partitions_total}",
            "rows_read": p.rows_read, "created": _iso(job.create_time),
            "ended": _iso(job.end_time), "source": job.spec.source,
            "error": f"{job.error.code}: {job.error.message}" if job.error else ""}


_JOB_COLUMNS = ["name", "state", "model", "version", "progress", "rows_read", "created",
                "ended", "source", "error"]


# -- commands -------------------------------------------------------------------
@_client_errors
def _cmd_jobs(args) -> int:
    with _connect(args.server, args.token_file, args.tls_ca) as c:
        rows = []
        for job in c.list_fit_jobs(state=args.state, model=args.model):
            rows.append(_job_row(job))
            if args.limit and len(rows) >= args.limit:
                break
    _print_rows(rows, _JOB_COLUMNS, args.json)
    return 0


@_client_errors
def _cmd_job(args) -> int:
    with _connect(args.server, args.token_file, args.tls_ca) as c:
        job = c.get_fit_job(args.job)
    _print_rows([_job_row(job)], _JOB_COLUMNS, args.json)
    return 0


@_client_errors
def _cmd_watch(args) -> int:
    with _connect(args.server, args.token_file, args.tls_ca) as c:
        try:
            job = _watch_with_bar(c, args.job, progress=not args.quiet)
        except KeyboardInterrupt:
            return EXIT_INTERRUPTED   # only the watch stops; the job runs on
    print(_job_outcome(job), file=sys.stderr if job.state != "SUCCEEDED" else sys.stdout)
    return 0 if job.state == "SUCCEEDED" else EXIT_JOB_FAILED


@_client_errors
def _cmd_cancel(args) -> int:
    with _connect(args.server, args.token_file, args.tls_ca) as c:
        job = c.cancel_fit_job(args.job)
    note = " (stops at the next partition)" if not job.done else ""
    print(f"{job.name}\t{job.state}{note}")
    return 0


@_client_errors
def _cmd_models(args) -> int:
    with _connect(args.server, args.token_file, args.tls_ca) as c:
        rows = [{"name": m.name, "versions": m.version_count, "latest": m.latest_version,
                 "y": m.spec.y, "x": ",".join(m.spec.x), "by": ",".join(m.spec.by),
                 "updated": _iso(m.update_time)} for m in c.list_models()]
    _print_rows(rows, ["name", "versions", "latest", "y", "x", "by", "updated"], args.json)
    return 0


@_client_errors
def _cmd_versions(args) -> int:
    with _connect(args.server, args.token_file, args.tls_ca) as c:
        rows = []
        for v in c.list_model_versions(args.model):
            s = v.summary
            rows.append({"name": v.name, "job": v.fit_job, "groups": s.groups if s else "",
                         "groups_ok": s.groups_ok if s else "", "rows": s.rows_read if s else "",
                         "created": _iso(v.create_time), "source": v.spec.source,
                         "filter": v.spec.filter or ""})
    _print_rows(rows, ["name", "job", "groups", "groups_ok", "rows", "created", "source",
                       "filter"], args.json)
    return 0


def _fit_row(fit) -> dict:
    row = fit.as_row()
    row.pop("covariance", None)
    return row


@_client_errors
def _cmd_lookup(args) -> int:
    with _connect(args.server, args.token_file, args.tls_ca) as c:
        fit = c.lookup_group(args.result, tuple(args.key))
    row = _fit_row(fit)
    if args.json:
        print(json.dumps(row, default=str))
    else:
        for k, v in row.items():
            print(f"{k}\t{_cell(v)}")
    return 0


def _points(texts: list[str]) -> list[list[float]]:
    points = []
    for i, text in enumerate(texts):
        try:
            points.append([float(v) for v in text.split(",")])
        except ValueError:
            raise ValueError(f"--at: {text!r} (point {i}) is not a comma-separated list of "
                             "numbers") from None
    return points


@_client_errors
def _cmd_predict(args) -> int:
    points = _points(args.at)
    with _connect(args.server, args.token_file, args.tls_ca) as c:
        res = c.predict(args.result, tuple(args.key), points,
                        confidence=args.confidence)
    rows = [{"x": ",".join(_cell(v) for v in p.x), "mean": p.mean,
             "mean_std_error": p.mean_std_error, "mean_ci_low": p.mean_ci_low,
             "mean_ci_high": p.mean_ci_high, "prediction_std_error": p.prediction_std_error,
             "prediction_low": p.prediction_low, "prediction_high": p.prediction_high}
            for p in res.predictions]
    _print_rows(rows, list(rows[0]) if rows else ["x"], args.json)
    return 0


@_client_errors
def _cmd_results(args) -> int:
    from .io.results import write_results

    if not args.output.endswith(".parquet"):
        return _fail(f"--output: {args.output!r} must end in .parquet")
    with _connect(args.server, args.token_file, args.tls_ca) as c:
        table = c.read_table(args.result)
    write_results(table, args.output)
    print(f"wrote {table.num_rows} groups to {args.output}", file=sys.stderr)
    return 0


def _cmd_serve(args) -> int:
    from .service import ServerConfig, serve

    config = ServerConfig(
        state_dir=args.state, listen=args.listen, data_roots=tuple(args.data_root or ()),
        token_file=args.token_file, tls_cert=args.tls_cert, tls_key=args.tls_key,
        workers=args.workers, max_running_jobs=args.max_jobs, max_queued_jobs=args.max_queued,
        max_features=args.max_features, max_groups=args.max_groups,
        max_message_bytes=int(args.max_message_mb * (1 << 20)), rpc_threads=args.rpc_threads)
    return serve(config)


# -- argument parsers -------------------------------------------------------------
def add_serve_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--listen", default="127.0.0.1:7070", metavar="HOST:PORT",
                   help="address to listen on (default 127.0.0.1:7070; port 0 picks a free one)")
    p.add_argument("--state", required=True, metavar="DIR",
                   help="state directory: jobs, models and results (created if missing)")
    p.add_argument("--data-root", action="append", metavar="DIR",
                   help="directory sources may be read from (repeat; default: the current one)")
    p.add_argument("--token-file", metavar="F", help="require one of the bearer tokens in F")
    p.add_argument("--tls-cert", metavar="F", help="PEM certificate chain (with --tls-key)")
    p.add_argument("--tls-key", metavar="F", help="PEM private key (with --tls-cert)")
    p.add_argument("--workers", type=int, metavar="N",
                   help="worker processes per fit (default: one per core)")
    p.add_argument("--max-jobs", type=int, default=2, metavar="N",
                   help="jobs running at once (default 2); more wait queued")
    p.add_argument("--max-queued", type=int, default=64, metavar="N",
                   help="jobs waiting before new ones are refused (default 64)")
    p.add_argument("--max-features", type=int, default=64, metavar="N",
                   help="most x columns a spec may have (default 64)")
    p.add_argument("--max-groups", type=int, default=50_000_000, metavar="N",
                   help="most groups a result may have (default 50M)")
    p.add_argument("--max-message-mb", type=float, default=16, metavar="MB",
                   help="largest gRPC message either way (default 16)")
    p.add_argument("--rpc-threads", type=int, default=32, metavar="N",
                   help="threads serving calls (default 32); calls beyond are refused")


def _remote_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--server", metavar="HOST:PORT", help="trendmill server (or $TRENDMILL_SERVER)")
    p.add_argument("--token-file", metavar="F", help="bearer token file (or $TRENDMILL_TOKEN_FILE)")
    p.add_argument("--tls-ca", metavar="F", help="CA certificate to trust (or $TRENDMILL_TLS_CA)")


def _group_options(p) -> None:
    """Server options plus the result and the key of one group (lookup, predict)."""
    _remote_options(p)
    p.add_argument("result", metavar="RESULT", help="model, models/{m}/versions/{n} or fitJobs/{id}")
    p.add_argument("--key", action="append", default=[], metavar="VALUE",
                   help="group key value, in --by order (repeat)")


def add_commands(sub) -> None:
    """Register ``serve`` and the remote commands on the ``trendmill`` subparsers."""
    serve = sub.add_parser("serve", help="run the fit service (gRPC)")
    add_serve_arguments(serve)
    serve.set_defaults(handler=_cmd_serve)

    p = sub.add_parser("jobs", help="list fit jobs on a server, newest first")
    _remote_options(p)
    p.add_argument("--state", choices=("queued", "running", "succeeded", "failed", "cancelled"),
                   type=str.lower)
    p.add_argument("--model", metavar="NAME", help="only jobs saving into this model")
    p.add_argument("--limit", type=int, default=0, metavar="N", help="at most N jobs")
    p.add_argument("--json", action="store_true", help="one JSON object per line")
    p.set_defaults(handler=_cmd_jobs)

    for name, fn, text in (("job", _cmd_job, "show one fit job"),
                           ("watch", _cmd_watch, "follow a fit job until it is done"),
                           ("cancel", _cmd_cancel, "cancel a queued or running fit job")):
        p = sub.add_parser(name, help=text)
        _remote_options(p)
        p.add_argument("job", metavar="JOB", help="fitJobs/{id} or the bare id")
        if name == "job":
            p.add_argument("--json", action="store_true", help="one JSON object")
        if name == "watch":
            p.add_argument("--quiet", action="store_true", help="no progress bar")
        p.set_defaults(handler=fn)

    p = sub.add_parser("models", help="list models on a server")
    _remote_options(p)
    p.add_argument("--json", action="store_true", help="one JSON object per line")
    p.set_defaults(handler=_cmd_models)

    p = sub.add_parser("versions", help="list a model's versions, newest first")
    _remote_options(p)
    p.add_argument("model", metavar="MODEL", help="models/{model} or the bare id")
    p.add_argument("--json", action="store_true", help="one JSON object per line")
    p.set_defaults(handler=_cmd_versions)

    p = sub.add_parser("lookup", help="show one group's fit")
    _group_options(p)
    p.add_argument("--json", action="store_true", help="one JSON object")
    p.set_defaults(handler=_cmd_lookup)

    p = sub.add_parser("predict", help="predict y for one group, with intervals")
    _group_options(p)
    p.add_argument("--at", action="append", required=True, metavar="X[,X...]",
                   help="x values of one point, in --x order (repeat for more points; "
                        "write --at=-1.5,2 when the first value is negative)")
    p.add_argument("--confidence", type=float, default=None,
                   help="level of both intervals (default: the fit's)")
    p.add_argument("--json", action="store_true", help="one JSON object per line")
    p.set_defaults(handler=_cmd_predict)

    p = sub.add_parser("results", help="download a result to a Parquet file")
    _remote_options(p)
    p.add_argument("result", metavar="RESULT", help="model, models/{m}/versions/{n} or fitJobs/{id}")
    p.add_argument("--output", required=True, metavar="PATH.parquet")
    p.set_defaults(handler=_cmd_results)


def main_serve(argv: list[str] | None = None) -> int:
    """``python -m trendmill.service``: ``trendmill serve`` without the rest of the CLI."""
    from .engine.errors import TrendmillError

    parser = argparse.ArgumentParser(prog="python -m trendmill.service",
                                     description="Run the trendmill fit service.")
    add_serve_arguments(parser)
    args = parser.parse_args(argv)
    try:
        return _cmd_serve(args)
    except TrendmillError as exc:
        return _fail(exc.message)
