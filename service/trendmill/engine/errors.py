"""The one exception tree of trendmill.

::

    TrendmillError
    ├── SpecError          a field of a fit spec is invalid (names the field)
    │   └── FilterError    the filter text does not parse or names a bad column
    ├── SchemaError        a column is missing or of a type that cannot be used
    ├── SourceError        the source cannot be read
    │   ├── SourceNotFound     nothing at the path, or no Parquet files under it
    │   └── CorruptSource      a file is not valid Parquet (names the file)
    ├── DataError          values that make the fit meaningless (negative weight, ...)
    ├── LimitError         a configured limit was hit
    ├── AccessError        a path lies outside every data root
    ├── NotFound           a named resource (job, model, version, group) does not exist
    ├── Conflict           the resource is in a state that does not allow the call
    └── Cancelled          the work was cancelled

Messages are one line that names the input at fault, its value and what was
expected; they are shown to users as they are, without a traceback.
"""

from __future__ import annotations

__all__ = [
    "TrendmillError",
    "SpecError",
    "FilterError",
    "SchemaError",
    "SourceError",
    "SourceNotFound",
    "CorruptSource",
    "DataError",
    "LimitError",
    "AccessError",
    "NotFound",
    "Conflict",
    "Cancelled",
]


class TrendmillError(Exception):
    """Base of every error trendmill raises on purpose."""

    #: machine-readable reason (UPPER_SNAKE), carried in gRPC ErrorInfo
    reason = "TRENDMILL_ERROR"

    def __init__(self, message: str, **details: object) -> None:
        # one line whatever the user's text held (a path or literal with a newline)
        message = message.replace("\r", "\\r").replace("\n", "\\n")
        super().__init__(message)
        self.message = message
        self.details = {k: v for k, v in details.items() if v is not None}

    def __reduce__(self):
        # errors cross process boundaries (scan workers); subclasses' __init__
        # signatures differ, so rebuild from the message and attributes instead
        return (_rebuild, (type(self), self.message, self.__dict__))


def _rebuild(cls: type, message: str, state: dict) -> TrendmillError:
    err = cls.__new__(cls)
    Exception.__init__(err, message)
    err.__dict__.update(state)
    return err


class SpecError(TrendmillError):
    """A fit spec field is invalid. ``field`` names it (``x``, ``confidence``...)."""

    reason = "INVALID_SPEC"

    def __init__(self, field: str, message: str) -> None:
        super().__init__(f"{field}: {message}", field=field)
        self.field = field


class FilterError(SpecError):
    reason = "INVALID_FILTER"

    def __init__(self, message: str, expression: str | None = None) -> None:
        super().__init__("filter", message)
        if expression is not None:
            self.details["expression"] = expression


class SchemaError(TrendmillError):
    reason = "BAD_COLUMN"

    def __init__(self, message: str, *, column: str | None = None,
                 field: str | None = None, path: str | None = None) -> None:
        super().__init__(message, column=column, field=field, path=path)
        self.column = column
        self.field = field


class SourceError(TrendmillError):
    reason = "BAD_SOURCE"

    def __init__(self, message: str, *, path: str | None = None) -> None:
        super().__init__(message, path=path)
        self.path = path


class SourceNotFound(SourceError):
    reason = "SOURCE_NOT_FOUND"


class CorruptSource(SourceError):
    reason = "CORRUPT_SOURCE"


class DataError(TrendmillError):
    reason = "BAD_DATA"

    def __init__(self, message: str, *, column: str | None = None,
                 path: str | None = None) -> None:
        super().__init__(message, column=column, path=path)
        self.column = column
        self.path = path


class LimitError(TrendmillError):
    reason = "LIMIT_EXCEEDED"


class AccessError(TrendmillError):
    reason = "OUTSIDE_DATA_ROOTS"


class NotFound(TrendmillError):
    reason = "NOT_FOUND"


class Conflict(TrendmillError):
    reason = "FAILED_PRECONDITION"


class Cancelled(TrendmillError):
    reason = "CANCELLED"
