"""Conversion between protobuf messages and trendmill's own types.

The one place where ``trendmill.v1.FitSpec`` meets :class:`FitSpec`, and where
stored records and result rows become messages. Nothing here does I/O.
"""

from __future__ import annotations

import datetime as dt
import math
from typing import Mapping, Sequence

import pyarrow as pa
from google.protobuf import duration_pb2, timestamp_pb2

from trendmill_client._proto import jobs_pb2, models_pb2, results_pb2, spec_pb2
# key values travel the same way both directions: one codec, the client's
from trendmill_client._types import value_to_proto

from ..engine.errors import SpecError
from ..engine.spec import FitSpec
from ._state import JobRecord, ModelRecord, VersionRecord

__all__ = [
    "spec_from_proto", "spec_to_proto", "job_to_proto", "model_to_proto",
    "version_to_proto", "group_fit_to_proto", "value_to_proto", "key_from_proto",
    "progress_figures", "STATES",
]

_SOLVER_FROM = {spec_pb2.SOLVER_UNSPECIFIED: "normal", spec_pb2.SOLVER_NORMAL: "normal",
                spec_pb2.SOLVER_QR: "qr"}
_SOLVER_TO = {"normal": spec_pb2.SOLVER_NORMAL, "qr": spec_pb2.SOLVER_QR}
#: stored state name <-> FitJob.State
STATES = {name: jobs_pb2.FitJob.State.Value(name)
          for name in ("QUEUED", "RUNNING", "SUCCEEDED", "FAILED", "CANCELLED")}


# -- spec ---------------------------------------------------------------------
def spec_from_proto(msg: spec_pb2.FitSpec) -> FitSpec:
    """Validated :class:`FitSpec` of a message; unset optional fields get their defaults.

    Raises
    ------
    SpecError
        Naming the field, as :class:`FitSpec` does, or ``solver`` for an
        unknown enum value.
    """
    if msg.solver not in _SOLVER_FROM:
        raise SpecError("solver", f"enum value {msg.solver} is not a known solver")
    return FitSpec(
        source=msg.source,
        y=msg.y,
        x=tuple(msg.x),
        by=tuple(msg.by),
        weight=msg.weight if msg.HasField("weight") else None,
        intercept=msg.intercept if msg.HasField("intercept") else True,
        filter=msg.filter or None,
        solver=_SOLVER_FROM[msg.solver],
        confidence=msg.confidence if msg.HasField("confidence") else 0.95,
    )


def spec_to_proto(spec: FitSpec | Mapping) -> spec_pb2.FitSpec:
    """Message of a spec (or of its ``to_dict()``); every field is set explicitly."""
    d = spec.to_dict() if isinstance(spec, FitSpec) else spec
    msg = spec_pb2.FitSpec(
        source=d["source"], y=d["y"], x=list(d["x"]), by=list(d.get("by", ())),
        intercept=bool(d.get("intercept", True)), filter=d.get("filter") or "",
        solver=_SOLVER_TO[d.get("solver", "normal")],
        confidence=float(d.get("confidence", 0.95)))
    if d.get("weight"):
        msg.weight = d["weight"]
    return msg


# -- time ---------------------------------------------------------------------
def _timestamp(t: float | None) -> timestamp_pb2.Timestamp | None:
    if t is None:
        return None
    ts = timestamp_pb2.Timestamp()
    ts.FromNanoseconds(int(round(t * 1e9)))
    return ts


def _duration(seconds: float | None) -> duration_pb2.Duration | None:
    if seconds is None or not math.isfinite(seconds):
        return None
    d = duration_pb2.Duration()
    d.FromNanoseconds(int(round(max(seconds, 0.0) * 1e9)))
    return d


# -- jobs ---------------------------------------------------------------------
def progress_figures(p: Mapping) -> dict:
    """Rates and ETA of a progress record (pure: from counts and elapsed time).

    The ETA assumes the remaining partitions take as long on average as the
    ones done; it is None until one partition is done.
    """
    done = int(p.get("partitions_done", 0))
    total = int(p.get("partitions_total", 0))
    rows = int(p.get("rows_read", 0))
    elapsed = float(p.get("elapsed_s", 0.0))
    rate = rows / elapsed if elapsed > 0 else 0.0
    if total and done >= total:
        eta = 0.0
    elif done > 0 and total > 0:
        eta = elapsed * (total - done) / done
    else:
        eta = None
    return {"partitions_done": done, "partitions_total": total, "rows_read": rows,
            "bytes_read": int(p.get("bytes_read", 0)), "rows_per_second": rate,
            "elapsed_s": elapsed, "eta_s": eta}


def _summary_to_proto(s: Mapping | None) -> jobs_pb2.FitSummary | None:
    if not s:
        return None
    return jobs_pb2.FitSummary(
        groups=int(s.get("groups", 0)), groups_ok=int(s.get("groups_ok", 0)),
        partitions=int(s.get("partitions", 0)), rows_read=int(s.get("rows_read", 0)),
        bytes_read=int(s.get("bytes_read", 0)), fit_duration=_duration(s.get("seconds")))


def job_to_proto(job: JobRecord, *, progress: Mapping | None = None,
                 cancel_requested: bool | None = None) -> jobs_pb2.FitJob:
    """Message of a stored job; ``progress`` overrides the stored one (live jobs)."""
    f = progress_figures(progress if progress is not None else job.progress)
    msg = jobs_pb2.FitJob(
        name=job.name, spec=spec_to_proto(job.spec), state=STATES[job.state], done=job.done,
        progress=jobs_pb2.FitProgress(
            partitions_done=f["partitions_done"], partitions_total=f["partitions_total"],
            rows_read=f["rows_read"], bytes_read=f["bytes_read"],
            rows_per_second=f["rows_per_second"], elapsed=_duration(f["elapsed_s"]),
            eta=_duration(f["eta_s"])),
        create_time=_timestamp(job.create_time), start_time=_timestamp(job.start_time),
        end_time=_timestamp(job.end_time),
        model=f"models/{job.model}" if job.model else "",
        model_version=(f"models/{job.model}/versions/{job.version}"
                       if job.model and job.version else ""),
        summary=_summary_to_proto(job.summary),
        cancel_requested=job.cancel_requested if cancel_requested is None else cancel_requested,
        attempts=job.attempts,
    )
    if job.error:
        e = job.error
        msg.error.CopyFrom(jobs_pb2.JobError(
            code=e.get("code", ""), reason=e.get("reason", ""), message=e.get("message", ""),
            field=e.get("field", ""), metadata={k: str(v) for k, v in e.get("metadata", {}).items()}))
    return msg


# -- models -------------------------------------------------------------------
def model_to_proto(m: ModelRecord) -> models_pb2.Model:
    return models_pb2.Model(
        name=m.name, spec=spec_to_proto(m.spec), version_count=m.latest_version,
        latest_version=f"{m.name}/versions/{m.latest_version}",
        create_time=_timestamp(m.create_time), update_time=_timestamp(m.update_time))


def version_to_proto(v: VersionRecord) -> models_pb2.ModelVersion:
    spec = FitSpec.from_dict(v.spec)
    return models_pb2.ModelVersion(
        name=v.name, spec=spec_to_proto(spec), fit_job=f"fitJobs/{v.job_id}",
        summary=_summary_to_proto(v.summary), create_time=_timestamp(v.create_time),
        key_columns=[models_pb2.KeyColumn(name=n, type=t) for n, t in v.key_columns],
        terms=list(spec.terms))


# -- result values ------------------------------------------------------------
def _key_value(v: results_pb2.Value, typ: pa.DataType, column: str, i: int):
    """Python value of one key message for a key column of Arrow type ``typ``."""
    field = f"key[{i}]"
    kind = v.WhichOneof("kind")
    if kind is None:
        return None
    raw = getattr(v, kind)
    try:
        if pa.types.is_boolean(typ):
            if kind == "bool_value":
                return raw
            if kind == "string_value" and raw.lower() in ("true", "false"):
                return raw.lower() == "true"
        elif pa.types.is_integer(typ):
            if kind == "int_value":
                return raw
            if kind == "string_value":
                return int(raw)
        elif pa.types.is_string(typ) or pa.types.is_large_string(typ):
            if kind == "string_value":
                return raw
        elif pa.types.is_date(typ):
            if kind in ("date_value", "string_value"):
                return dt.date.fromisoformat(raw)
        elif pa.types.is_timestamp(typ):
            if kind == "timestamp_value":
                out = raw.ToDatetime(tzinfo=dt.timezone.utc)
                return out if typ.tz else out.replace(tzinfo=None)
            if kind == "string_value":
                out = dt.datetime.fromisoformat(raw)
                if typ.tz and out.tzinfo is None:
                    out = out.replace(tzinfo=dt.timezone.utc)
                return out
        elif pa.types.is_floating(typ):
            if kind in ("double_value", "int_value"):
                return float(raw)
            if kind == "string_value":
                return float(raw)
    except ValueError:
        raise SpecError(field, f"{raw!r} is not a valid {typ} value for key column {column!r}") from None
    raise SpecError(field, f"a {kind} does not fit key column {column!r} of type {typ}")


def key_from_proto(values: Sequence[results_pb2.Value],
                   key_columns: Sequence[tuple[str, pa.DataType]]) -> tuple:
    """Key tuple of a lookup request, typed like the result's key columns.

    Raises
    ------
    SpecError
        ``key`` has the wrong length, or ``key[i]`` does not fit its column.
    """
    if len(values) != len(key_columns):
        names = ", ".join(n for n, _ in key_columns) or "none"
        raise SpecError("key", f"{len(values)} value(s) given, the result has "
                               f"{len(key_columns)} key column(s) ({names})")
    return tuple(_key_value(v, t, n, i) for i, (v, (n, t)) in enumerate(zip(values, key_columns)))


def group_fit_to_proto(key: Sequence[tuple[str, object]], row: Mapping,
                       terms: Sequence[str]) -> results_pb2.GroupFit:
    """Message of one result row (``row`` maps result column names to values)."""
    def num(name):
        v = row.get(name)
        return float("nan") if v is None else float(v)

    def count(name):
        v = row.get(name)
        return 0 if v is None else int(v)

    cov = row.get("covariance")
    return results_pb2.GroupFit(
        key=[results_pb2.KeyValue(column=c, value=value_to_proto(v)) for c, v in key],
        n_rows=count("n_rows"), status=row.get("status") or "",
        terms=[results_pb2.TermFit(
            term=t, estimate=num(f"{t}_estimate"), std_error=num(f"{t}_std_error"),
            t_value=num(f"{t}_t_value"), p_value=num(f"{t}_p_value"),
            ci_low=num(f"{t}_ci_low"), ci_high=num(f"{t}_ci_high")) for t in terms],
        r_squared=num("r_squared"), adj_r_squared=num("adj_r_squared"),
        residual_std_error=num("residual_std_error"), df_residual=count("df_residual"),
        f_statistic=num("f_statistic"), f_p_value=num("f_p_value"),
        condition_number=num("condition_number"), n_skipped=count("n_skipped"),
        covariance=[] if cov is None else [float("nan") if c is None else float(c) for c in cov],
    )
