"""One table from trendmill's exceptions to gRPC status codes.

Every class of :mod:`trendmill.engine.errors` has its own row (a test checks
it), so a new exception cannot silently fall back to another code. A status
carries the one-line message and, packed in ``grpc-status-details-bin``:

- ``google.rpc.ErrorInfo``: domain ``trendmill``, ``reason = exc.reason``,
  ``metadata = exc.details`` (values as text);
- ``google.rpc.BadRequest`` with one ``FieldViolation`` when the exception
  names a spec/request field.

Anything that is not a :class:`TrendmillError` is a bug: the caller gets
INTERNAL with a fixed message and no traceback; the server logs the traceback.
"""

from __future__ import annotations

import logging

import grpc
from google.protobuf import any_pb2
from google.rpc import error_details_pb2, status_pb2
from grpc_status import rpc_status

from ..engine import errors as E

__all__ = ["STATUS_CODES", "DOMAIN", "status_code", "error_field", "rich_status",
           "to_status", "abort", "job_error"]

DOMAIN = "trendmill"
_log = logging.getLogger("trendmill.service")

#: exception class -> status code; looked up along the MRO, most specific first
STATUS_CODES: dict[type[E.TrendmillError], grpc.StatusCode] = {
    E.TrendmillError: grpc.StatusCode.INTERNAL,
    E.SpecError: grpc.StatusCode.INVALID_ARGUMENT,
    E.FilterError: grpc.StatusCode.INVALID_ARGUMENT,
    # An unknown or mistyped column is an error in the request, not in the data.
    E.SchemaError: grpc.StatusCode.INVALID_ARGUMENT,
    E.SourceError: grpc.StatusCode.FAILED_PRECONDITION,
    E.SourceNotFound: grpc.StatusCode.NOT_FOUND,
    # The request is fine; the file at the path is not Parquet.
    E.CorruptSource: grpc.StatusCode.FAILED_PRECONDITION,
    E.DataError: grpc.StatusCode.FAILED_PRECONDITION,
    E.LimitError: grpc.StatusCode.RESOURCE_EXHAUSTED,
    E.AccessError: grpc.StatusCode.PERMISSION_DENIED,
    E.NotFound: grpc.StatusCode.NOT_FOUND,
    E.Conflict: grpc.StatusCode.FAILED_PRECONDITION,
    E.Cancelled: grpc.StatusCode.CANCELLED,
}


def status_code(exc: BaseException) -> grpc.StatusCode:
    """Status code of an exception (INTERNAL for anything unexpected)."""
    for cls in type(exc).__mro__:
        code = STATUS_CODES.get(cls)
        if code is not None:
            return code
    return grpc.StatusCode.INTERNAL


def error_field(exc: BaseException) -> str | None:
    """The request field an exception names, if any."""
    field = getattr(exc, "field", None)
    if field:
        return str(field)
    if isinstance(exc, E.SourceError):
        return "source"
    details = getattr(exc, "details", None) or {}
    return str(details["field"]) if details.get("field") else None


def _message(exc: BaseException) -> str:
    if isinstance(exc, E.TrendmillError):
        return exc.message
    return "internal error (the server log has the details)"


def rich_status(exc: BaseException) -> status_pb2.Status:
    """``google.rpc.Status`` with ErrorInfo (and BadRequest when a field is known)."""
    code = status_code(exc)
    if isinstance(exc, E.TrendmillError):
        reason = exc.reason
        metadata = {k: str(v) for k, v in exc.details.items()}
    else:
        reason, metadata = "INTERNAL", {}
    info = error_details_pb2.ErrorInfo(reason=reason, domain=DOMAIN, metadata=metadata)
    details = [info]
    field = error_field(exc) if isinstance(exc, E.TrendmillError) else None
    if field:
        details.append(error_details_pb2.BadRequest(field_violations=[
            error_details_pb2.BadRequest.FieldViolation(
                field=field, description=_message(exc), reason=reason)]))
    packed = []
    for d in details:
        a = any_pb2.Any()
        a.Pack(d)
        packed.append(a)
    return status_pb2.Status(code=code.value[0], message=_message(exc), details=packed)


def to_status(exc: BaseException) -> grpc.Status:
    """The exception as a ``grpc.Status`` for ``context.abort_with_status``."""
    return rpc_status.to_status(rich_status(exc))


def abort(context: grpc.ServicerContext, exc: BaseException):
    """End the RPC with the status of ``exc`` (raises, as ``context.abort`` does)."""
    if not isinstance(exc, E.TrendmillError):
        _log.error("internal error in %s", type(exc).__name__, exc_info=exc)
    context.abort_with_status(to_status(exc))


def job_error(exc: BaseException) -> dict:
    """Why a job stopped, as stored with the job (and sent as ``JobError``)."""
    if isinstance(exc, E.TrendmillError):
        metadata = {k: str(v) for k, v in exc.details.items()}
        reason = exc.reason
    else:
        metadata, reason = {}, "INTERNAL"
    return {
        "code": status_code(exc).name,
        "reason": reason,
        "message": _message(exc),
        "field": error_field(exc) or "",
        "metadata": metadata,
    }
