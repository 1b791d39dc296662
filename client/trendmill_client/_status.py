"""Reading the rich error details of a failed call with protobuf alone.

The server packs a ``google.rpc.Status`` into the ``grpc-status-details-bin``
trailer, with ``google.rpc.ErrorInfo`` and ``google.rpc.BadRequest`` details.
Their generated classes live in googleapis-common-protos, which this client
does not require; the few fields needed are read here from the protobuf wire
format (tags, varints and length-delimited fields only).
"""

from __future__ import annotations

__all__ = ["ErrorDetails", "parse_status_details"]

_ERROR_INFO = "type.googleapis.com/google.rpc.ErrorInfo"
_BAD_REQUEST = "type.googleapis.com/google.rpc.BadRequest"


class ErrorDetails:
    """What the status details say: reason, domain, metadata and field violations."""

    __slots__ = ("reason", "domain", "metadata", "field_violations")

    def __init__(self) -> None:
        self.reason: str | None = None
        self.domain: str | None = None
        self.metadata: dict[str, str] = {}
        self.field_violations: list[tuple[str, str]] = []


def _varint(buf: bytes, i: int) -> tuple[int, int]:
    shift = result = 0
    while True:
        if i >= len(buf):
            raise ValueError("truncated varint")
        b = buf[i]
        i += 1
        result |= (b & 0x7F) << shift
        if not b & 0x80:
            return result, i
        shift += 7
        if shift > 63:
            raise ValueError("varint too long")


def _fields(buf: bytes):
    """(field number, wire type, value) of a message; value is int or bytes."""
    i = 0
    while i < len(buf):
        key, i = _varint(buf, i)
        number, wire = key >> 3, key & 7
        if wire == 0:
            value, i = _varint(buf, i)
        elif wire == 2:
            size, i = _varint(buf, i)
            if i + size > len(buf):
                raise ValueError("truncated field")
            value, i = buf[i:i + size], i + size
        elif wire == 1:
            value, i = buf[i:i + 8], i + 8
        elif wire == 5:
            value, i = buf[i:i + 4], i + 4
        else:
            raise ValueError(f"unsupported wire type {wire}")
        yield number, wire, value


def _text(value) -> str:
    return value.decode("utf-8", "replace") if isinstance(value, bytes) else ""


def parse_status_details(data: bytes) -> ErrorDetails:
    """Details of a serialised ``google.rpc.Status``; malformed input gives empty details."""
    out = ErrorDetails()
    try:
        for number, wire, value in _fields(data):
            if number != 3 or wire != 2:  # 3: repeated google.protobuf.Any details
                continue
            type_url, payload = "", b""
            for n, w, v in _fields(value):
                if n == 1 and w == 2:
                    type_url = _text(v)
                elif n == 2 and w == 2:
                    payload = v
            if type_url == _ERROR_INFO:
                for n, w, v in _fields(payload):
                    if n == 1 and w == 2:
                        out.reason = _text(v)
                    elif n == 2 and w == 2:
                        out.domain = _text(v)
                    elif n == 3 and w == 2:  # map<string, string> entry
                        entry = {en: _text(ev) for en, ew, ev in _fields(v) if ew == 2}
                        out.metadata[entry.get(1, "")] = entry.get(2, "")
            elif type_url == _BAD_REQUEST:
                for n, w, v in _fields(payload):
                    if n == 1 and w == 2:  # FieldViolation
                        fv = {fn: _text(fv_) for fn, fw, fv_ in _fields(v) if fw == 2}
                        out.field_violations.append((fv.get(1, ""), fv.get(2, "")))
    except ValueError:
        return ErrorDetails()
    return out
