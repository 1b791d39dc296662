"""Errors of the client: one class per status code the service uses.

::

    ServiceError             any failed call (``code``, ``message``, ``reason``, ``field``)
    ├── InvalidArgument      a request field is wrong (``field`` names it)
    ├── NotFound             no such job, model, version, group or source
    ├── FailedPrecondition   the resource's state does not allow the call
    ├── PermissionDenied     the source is outside the server's data roots
    ├── Unauthenticated      missing or wrong bearer token
    ├── ResourceExhausted    a server limit was hit
    ├── Cancelled            the call or the job was cancelled
    ├── DeadlineExceeded     the call's deadline passed
    ├── Unavailable          the server could not be reached (after the retries)
    └── InternalError        anything else the server reports
"""

from __future__ import annotations

import grpc

from ._status import parse_status_details

__all__ = [
    "ServiceError", "InvalidArgument", "NotFound", "FailedPrecondition", "PermissionDenied",
    "Unauthenticated", "ResourceExhausted", "Cancelled", "DeadlineExceeded", "Unavailable",
    "InternalError", "from_rpc_error",
]


class ServiceError(Exception):
    """A call to the service failed.

    Attributes
    ----------
    code : str
        gRPC status code name, e.g. ``"INVALID_ARGUMENT"``.
    message : str
        The server's one-line message.
    reason : str or None
        Machine-readable reason (``ErrorInfo.reason``), e.g. ``"BAD_COLUMN"``.
    field : str or None
        The request field at fault, when the server named one.
    metadata : dict
        Further details (``ErrorInfo.metadata``).
    """

    code = "UNKNOWN"

    def __init__(self, message: str, *, code: str | None = None, reason: str | None = None,
                 field: str | None = None, metadata: dict | None = None) -> None:
        super().__init__(message)
        self.message = message
        if code is not None:
            self.code = code
        self.reason = reason
        self.field = field
        self.metadata = dict(metadata or {})


class InvalidArgument(ServiceError):
    code = "INVALID_ARGUMENT"


class NotFound(ServiceError):
    code = "NOT_FOUND"


class FailedPrecondition(ServiceError):
    code = "FAILED_PRECONDITION"


class PermissionDenied(ServiceError):
    code = "PERMISSION_DENIED"


class Unauthenticated(ServiceError):
    code = "UNAUTHENTICATED"


class ResourceExhausted(ServiceError):
    code = "RESOURCE_EXHAUSTED"


class Cancelled(ServiceError):
    code = "CANCELLED"


class DeadlineExceeded(ServiceError):
    code = "DEADLINE_EXCEEDED"


class Unavailable(ServiceError):
    code = "UNAVAILABLE"


class InternalError(ServiceError):
    code = "INTERNAL"


_BY_CODE = {cls.code: cls for cls in (
    InvalidArgument, NotFound, FailedPrecondition, PermissionDenied, Unauthenticated,
    ResourceExhausted, Cancelled, DeadlineExceeded, Unavailable, InternalError)}


def from_rpc_error(exc: grpc.RpcError) -> ServiceError:
    """The typed error of a failed call (read the details the server attached)."""
    code = exc.code() if hasattr(exc, "code") else grpc.StatusCode.UNKNOWN
    name = code.name if code is not None else "UNKNOWN"
    message = (exc.details() if hasattr(exc, "details") else None) or name
    reason = field = None
    metadata: dict = {}
    trailers = exc.trailing_metadata() if hasattr(exc, "trailing_metadata") else None
    for key, value in trailers or ():
        if key == "grpc-status-details-bin" and isinstance(value, bytes):
            details = parse_status_details(value)
            reason, metadata = details.reason, details.metadata
            if details.field_violations:
                field = details.field_violations[0][0] or None
    if field is None:
        field = metadata.get("field")
    cls = _BY_CODE.get(name, ServiceError)
    if cls is ServiceError and name not in ("UNKNOWN",):
        cls = InternalError
    return cls(message, code=name, reason=reason, field=field, metadata=metadata)
