"""Typed, immutable views of the service's messages (no protobuf in user code)."""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass, field as _field
from typing import Any, Mapping, Sequence

from ._proto import jobs_pb2, models_pb2, results_pb2, spec_pb2

__all__ = [
    "FitSpec", "FitProgress", "JobError", "FitSummary", "FitJob", "Model", "KeyColumn",
    "ModelVersion", "TermFit", "GroupFit", "Prediction", "PredictResult", "TERMINAL_STATES",
]

TERMINAL_STATES = frozenset({"SUCCEEDED", "FAILED", "CANCELLED"})
_SOLVERS = {"normal": spec_pb2.SOLVER_NORMAL, "qr": spec_pb2.SOLVER_QR}
_SOLVER_NAMES = {spec_pb2.SOLVER_UNSPECIFIED: "normal", spec_pb2.SOLVER_NORMAL: "normal",
                 spec_pb2.SOLVER_QR: "qr"}


def _time(ts) -> dt.datetime | None:
    if ts is None or (ts.seconds == 0 and ts.nanos == 0):
        return None
    return ts.ToDatetime(tzinfo=dt.timezone.utc)


def _seconds(d) -> float:
    return d.seconds + d.nanos * 1e-9


@dataclass(frozen=True, slots=True)
class FitSpec:
    """What to fit (the server validates it; see ``trendmill.v1.FitSpec``)."""

    source: str
    y: str
    x: tuple[str, ...]
    by: tuple[str, ...] = ()
    weight: str | None = None
    intercept: bool = True
    filter: str | None = None
    solver: str = "normal"
    confidence: float = 0.95

    def __post_init__(self) -> None:
        for name in ("x", "by"):
            value = getattr(self, name)
            object.__setattr__(self, name, (value,) if isinstance(value, str) else tuple(value))

    def to_proto(self) -> spec_pb2.FitSpec:
        if self.solver not in _SOLVERS:
            from ._errors import InvalidArgument
            raise InvalidArgument(f"solver: {self.solver!r} is not one of normal, qr",
                                  field="solver")
        msg = spec_pb2.FitSpec(source=self.source, y=self.y, x=list(self.x), by=list(self.by),
                               intercept=self.intercept, filter=self.filter or "",
                               solver=_SOLVERS[self.solver], confidence=self.confidence)
        if self.weight is not None:
            msg.weight = self.weight
        return msg

    @classmethod
    def from_proto(cls, msg: spec_pb2.FitSpec) -> "FitSpec":
        return cls(source=msg.source, y=msg.y, x=tuple(msg.x), by=tuple(msg.by),
                   weight=msg.weight if msg.HasField("weight") else None,
                   intercept=msg.intercept if msg.HasField("intercept") else True,
                   filter=msg.filter or None, solver=_SOLVER_NAMES.get(msg.solver, "normal"),
                   confidence=msg.confidence if msg.HasField("confidence") else 0.95)

    @property
    def terms(self) -> tuple[str, ...]:
        return (("intercept",) if self.intercept else ()) + self.x


@dataclass(frozen=True, slots=True)
class FitProgress:
    partitions_done: int = 0
    partitions_total: int = 0
    rows_read: int = 0
    bytes_read: int = 0
    rows_per_second: float = 0.0
    elapsed_s: float = 0.0
    #: seconds left, None while unknown
    eta_s: float | None = None

    @classmethod
    def from_proto(cls, m: jobs_pb2.FitProgress) -> "FitProgress":
        return cls(m.partitions_done, m.partitions_total, m.rows_read, m.bytes_read,
                   m.rows_per_second, _seconds(m.elapsed),
                   _seconds(m.eta) if m.HasField("eta") else None)


@dataclass(frozen=True, slots=True)
class JobError:
    code: str
    reason: str
    message: str
    field: str | None = None
    metadata: Mapping[str, str] = _field(default_factory=dict)


@dataclass(frozen=True, slots=True)
class FitSummary:
    groups: int
    groups_ok: int
    partitions: int
    rows_read: int
    bytes_read: int
    fit_seconds: float

    @classmethod
    def from_proto(cls, m: jobs_pb2.FitSummary) -> "FitSummary":
        return cls(m.groups, m.groups_ok, m.partitions, m.rows_read, m.bytes_read,
                   _seconds(m.fit_duration))


@dataclass(frozen=True, slots=True)
class FitJob:
    """A fit job; ``state`` is one of QUEUED, RUNNING, SUCCEEDED, FAILED, CANCELLED."""

    name: str
    spec: FitSpec
    state: str
    done: bool
    progress: FitProgress
    create_time: dt.datetime | None
    start_time: dt.datetime | None
    end_time: dt.datetime | None
    model: str | None
    model_version: str | None
    error: JobError | None
    summary: FitSummary | None
    cancel_requested: bool
    attempts: int

    @classmethod
    def from_proto(cls, m: jobs_pb2.FitJob) -> "FitJob":
        err = None
        if m.HasField("error"):
            e = m.error
            err = JobError(e.code, e.reason, e.message, e.field or None, dict(e.metadata))
        return cls(
            name=m.name, spec=FitSpec.from_proto(m.spec),
            state=jobs_pb2.FitJob.State.Name(m.state), done=m.done,
            progress=FitProgress.from_proto(m.progress),
            create_time=_time(m.create_time), start_time=_time(m.start_time),
            end_time=_time(m.end_time), model=m.model or None,
            model_version=m.model_version or None, error=err,
            summary=FitSummary.from_proto(m.summary) if m.HasField("summary") else None,
            cancel_requested=m.cancel_requested, attempts=m.attempts)

    @property
    def result(self) -> str:
        """Name to read this job's results by (its model version when saved)."""
        return self.model_version or self.name


@dataclass(frozen=True, slots=True)
class Model:
    name: str
    spec: FitSpec
    version_count: int
    latest_version: str
    create_time: dt.datetime | None
    update_time: dt.datetime | None

    @classmethod
    def from_proto(cls, m: models_pb2.Model) -> "Model":
        return cls(m.name, FitSpec.from_proto(m.spec), m.version_count, m.latest_version,
                   _time(m.create_time), _time(m.update_time))


@dataclass(frozen=True, slots=True)
class KeyColumn:
    name: str
    type: str


@dataclass(frozen=True, slots=True)
class ModelVersion:
    name: str
    spec: FitSpec
    fit_job: str
    summary: FitSummary | None
    create_time: dt.datetime | None
    key_columns: tuple[KeyColumn, ...]
    terms: tuple[str, ...]

    @classmethod
    def from_proto(cls, m: models_pb2.ModelVersion) -> "ModelVersion":
        return cls(m.name, FitSpec.from_proto(m.spec), m.fit_job,
                   FitSummary.from_proto(m.summary) if m.HasField("summary") else None,
                   _time(m.create_time), tuple(KeyColumn(k.name, k.type) for k in m.key_columns),
                   tuple(m.terms))


# -- values ---------------------------------------------------------------------
def value_from_proto(v: results_pb2.Value) -> Any:
    kind = v.WhichOneof("kind")
    if kind is None:
        return None
    if kind == "date_value":
        return dt.date.fromisoformat(v.date_value)
    if kind == "timestamp_value":
        return v.timestamp_value.ToDatetime(tzinfo=dt.timezone.utc)
    return getattr(v, kind)


def value_to_proto(value: Any) -> results_pb2.Value:
    if value is None:
        return results_pb2.Value()
    if isinstance(value, bool):
        return results_pb2.Value(bool_value=value)
    if isinstance(value, int):
        return results_pb2.Value(int_value=value)
    if isinstance(value, float):
        return results_pb2.Value(double_value=value)
    if isinstance(value, str):
        return results_pb2.Value(string_value=value)
    if isinstance(value, dt.datetime):
        out = results_pb2.Value()
        out.timestamp_value.FromDatetime(
            value if value.tzinfo else value.replace(tzinfo=dt.timezone.utc))
        return out
    if isinstance(value, dt.date):
        return results_pb2.Value(date_value=value.isoformat())
    if hasattr(value, "item"):  # numpy scalars, without importing numpy
        return value_to_proto(value.item())
    raise TypeError(f"key value {value!r} of type {type(value).__name__} is not supported")


@dataclass(frozen=True, slots=True)
class TermFit:
    term: str
    estimate: float
    std_error: float
    t_value: float
    p_value: float
    ci_low: float
    ci_high: float


@dataclass(frozen=True, slots=True)
class GroupFit:
    """One group's fit. ``key`` holds the key values in ``by`` order."""

    key: tuple
    key_columns: tuple[str, ...]
    n_rows: int
    status: str
    terms: tuple[TermFit, ...]
    r_squared: float
    adj_r_squared: float
    residual_std_error: float
    df_residual: int
    f_statistic: float
    f_p_value: float
    condition_number: float
    n_skipped: int
    covariance: tuple[float, ...]

    @classmethod
    def from_proto(cls, m: results_pb2.GroupFit) -> "GroupFit":
        return cls(
            key=tuple(value_from_proto(kv.value) for kv in m.key),
            key_columns=tuple(kv.column for kv in m.key), n_rows=m.n_rows, status=m.status,
            terms=tuple(TermFit(t.term, t.estimate, t.std_error, t.t_value, t.p_value,
                                t.ci_low, t.ci_high) for t in m.terms),
            r_squared=m.r_squared, adj_r_squared=m.adj_r_squared,
            residual_std_error=m.residual_std_error, df_residual=m.df_residual,
            f_statistic=m.f_statistic, f_p_value=m.f_p_value,
            condition_number=m.condition_number, n_skipped=m.n_skipped,
            covariance=tuple(m.covariance))

    def term(self, name: str) -> TermFit:
        for t in self.terms:
            if t.term == name:
                return t
        raise KeyError(name)

    def covariance_matrix(self) -> list[list[float]]:
        k = int(round(math.sqrt(len(self.covariance))))
        return [list(self.covariance[i * k:(i + 1) * k]) for i in range(k)]

    def as_row(self) -> dict:
        """The group as a flat row with the result file's column names."""
        row: dict = dict(zip(self.key_columns, self.key))
        row["n_rows"] = self.n_rows
        row["status"] = self.status
        for t in self.terms:
            for f in ("estimate", "std_error", "t_value", "p_value", "ci_low", "ci_high"):
                row[f"{t.term}_{f}"] = getattr(t, f)
        for f in ("r_squared", "adj_r_squared", "residual_std_error", "df_residual",
                  "f_statistic", "f_p_value", "condition_number", "n_skipped"):
            row[f] = getattr(self, f)
        row["covariance"] = list(self.covariance)
        return row


@dataclass(frozen=True, slots=True)
class Prediction:
    x: tuple[float, ...]
    mean: float
    mean_std_error: float
    mean_ci_low: float
    mean_ci_high: float
    prediction_std_error: float
    prediction_low: float
    prediction_high: float


@dataclass(frozen=True, slots=True)
class PredictResult:
    predictions: tuple[Prediction, ...]
    confidence: float
    df_residual: int
    result: str
    key: tuple

    @classmethod
    def from_proto(cls, m: results_pb2.PredictResponse,
                   points: Sequence[Sequence[float]]) -> "PredictResult":
        preds = tuple(Prediction(tuple(float(v) for v in pt), p.mean, p.mean_std_error,
                                 p.mean_ci_low, p.mean_ci_high, p.prediction_std_error,
                                 p.prediction_low, p.prediction_high)
                      for pt, p in zip(points, m.predictions))
        return cls(preds, m.confidence, m.df_residual, m.result,
                   tuple(value_from_proto(kv.value) for kv in m.key))
