"""FitSpec: the validated, immutable description of one per-group fit."""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import asdict, dataclass, field

from .errors import SpecError

__all__ = ["FitSpec", "SOLVERS", "MAX_FEATURES", "RESULT_COLUMNS"]

SOLVERS = ("normal", "qr")
#: columns every result file has; a group key of the same name would be shadowed
RESULT_COLUMNS = frozenset({
    "n_rows", "status", "r_squared", "adj_r_squared", "residual_std_error", "df_residual",
    "f_statistic", "f_p_value", "condition_number", "n_skipped", "n_infinite", "covariance",
    "weight_sum"})
_TERM_FIELDS = ("estimate", "std_error", "t_value", "p_value", "ci_low", "ci_high", "mean")
#: more features than this is almost always a mistake (one-hot gone wrong) and
#: makes the per-group state (features^2) large; the service can lower it.
MAX_FEATURES = 64


def _check_name(field_name: str, value: object) -> str:
    if not isinstance(value, str) or not value.strip():
        raise SpecError(field_name, f"expected a column name, got {value!r}")
    return value


@dataclass(frozen=True, slots=True)
class FitSpec:
    """What to fit: ``y ~ x...`` for every group of ``by`` over ``source``.

    Parameters
    ----------
    source : str
        Parquet file, directory (hive ``key=value/`` partitions allowed) or glob.
    y : str
        Response column.
    x : tuple of str
        Feature columns, at least one, no repeats, not ``y``.
    by : tuple of str
        Group key columns (integer, string, date or boolean); empty = one group.
    weight : str or None
        Precision weight column (>= 0, finite); rows with weight 0 carry no
        information and are not counted in ``n_rows``.
    intercept : bool
        Fit an intercept (default True).
    filter : str or None
        Row filter in trendmill's filter language (see ``trendmill.io.filter``).
    solver : {"normal", "qr"}
        ``normal``: equilibrated Cholesky of the co-moment matrix;
        ``qr``: R-factor state and triangular solves (never squares the data).
    confidence : float
        Confidence level of the intervals, in (0, 1).
    """

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
        if not isinstance(self.source, str) or not self.source:
            raise SpecError("source", f"expected a path, got {self.source!r}")
        _check_name("y", self.y)
        x = self.x
        if isinstance(x, str):
            x = (x,)
        x = tuple(x)
        object.__setattr__(self, "x", x)
        object.__setattr__(self, "by", tuple((self.by,) if isinstance(self.by, str) else self.by))
        if not x:
            raise SpecError("x", "at least one feature column is required")
        if len(x) > MAX_FEATURES:
            raise SpecError("x", f"{len(x)} features, at most {MAX_FEATURES} allowed")
        for name in x:
            _check_name("x", name)
        for name in self.by:
            _check_name("by", name)
        if self.weight is not None:
            _check_name("weight", self.weight)
        dup = sorted({c for c in x if x.count(c) > 1})
        if dup:
            raise SpecError("x", f"column {dup[0]!r} is listed twice")
        if self.y in x:
            raise SpecError("x", f"column {self.y!r} is the response y and cannot be a feature")
        used = set(x) | {self.y} | ({self.weight} if self.weight else set())
        for name in self.by:
            if name in used:
                raise SpecError("by", f"column {name!r} is also used as y, x or weight")
        if len(set(self.by)) != len(self.by):
            raise SpecError("by", "a group key column is listed twice")
        if "intercept" in x:
            raise SpecError("x", "a feature cannot be called 'intercept' (the name of the "
                                 "intercept term in results)")
        per_term = {f"{t}_{f}" for t in ("intercept",) + x for f in _TERM_FIELDS}
        for name in self.by:
            if name in RESULT_COLUMNS or name in per_term:
                raise SpecError("by", f"column {name!r} has the name of a result column")
        if self.weight is not None and (self.weight == self.y or self.weight in x):
            raise SpecError("weight", f"column {self.weight!r} is also y or a feature")
        if not isinstance(self.intercept, bool):
            raise SpecError("intercept", f"expected true or false, got {self.intercept!r}")
        if self.solver not in SOLVERS:
            raise SpecError("solver", f"{self.solver!r} is not one of {', '.join(SOLVERS)}")
        c = self.confidence
        if isinstance(c, bool) or not isinstance(c, (int, float)) or not math.isfinite(c) or not 0 < c < 1:
            raise SpecError("confidence", f"{c!r} must lie strictly between 0 and 1")
        object.__setattr__(self, "confidence", float(c))
        if self.filter is not None and not isinstance(self.filter, str):
            raise SpecError("filter", f"expected text, got {self.filter!r}")
        if self.filter is not None and not self.filter.strip():
            object.__setattr__(self, "filter", None)

    @property
    def terms(self) -> tuple[str, ...]:
        """Output term names: ``intercept`` first when fitted, then the features."""
        return (("intercept",) if self.intercept else ()) + self.x

    @property
    def columns(self) -> tuple[str, ...]:
        """Columns the scan must read besides the group keys: x..., y, [weight]."""
        return self.x + (self.y,) + ((self.weight,) if self.weight else ())

    def to_dict(self) -> dict:
        d = asdict(self)
        d["x"] = list(self.x)
        d["by"] = list(self.by)
        return d

    @classmethod
    def from_dict(cls, d: dict) -> "FitSpec":
        d = dict(d)
        d["x"] = tuple(d.get("x", ()))
        d["by"] = tuple(d.get("by", ()))
        return cls(**d)

    def moments_key(self) -> str:
        """Hash of what determines a partition's moments (not solver or confidence)."""
        d = self.to_dict()
        for k in ("solver", "confidence", "source"):
            d.pop(k)
        d["state"] = "qr" if self.solver == "qr" else "comoment"
        return hashlib.sha256(json.dumps(d, sort_keys=True).encode()).hexdigest()[:16]
