"""Bearer-token authentication: ``authorization: Bearer <token>`` on every call.

The token file holds one token per line (blank lines and ``#`` comments are
ignored), so a token can be rotated by listing old and new for a while. The
health service stays open: load balancers and orchestrators probe it without
credentials, and it reveals nothing but SERVING / NOT_SERVING.
"""

from __future__ import annotations

import hmac
import json
import logging
import os

import grpc
from google.rpc import error_details_pb2, status_pb2
from google.protobuf import any_pb2
from grpc_status import rpc_status

from ..engine.errors import SpecError

__all__ = ["load_tokens", "TokenAuth"]

_OPEN_PREFIXES = ("/grpc.health.v1.Health/",)


def load_tokens(path: str) -> tuple[bytes, ...]:
    """Tokens listed in ``path``.

    Raises
    ------
    SpecError
        The file is missing, unreadable or lists no token.
    """
    try:
        with open(path, encoding="utf-8") as f:
            lines = f.read().splitlines()
    except OSError as exc:
        raise SpecError("token_file", f"cannot read {path!r}: {exc.strerror}") from None
    tokens = tuple(line.strip().encode() for line in lines
                   if line.strip() and not line.lstrip().startswith("#"))
    if not tokens:
        raise SpecError("token_file", f"{path!r} lists no token")
    if os.name == "posix" and os.stat(path).st_mode & 0o077:
        # Not fatal (tests and containers often run as one user), but worth saying.
        logging.getLogger("trendmill.service").warning(json.dumps(
            {"event": "warning", "message": f"token file {path} is readable by other users"}))
    return tokens


def _unauthenticated(message: str) -> grpc.Status:
    info = any_pb2.Any()
    info.Pack(error_details_pb2.ErrorInfo(reason="UNAUTHENTICATED", domain="trendmill"))
    return rpc_status.to_status(status_pb2.Status(
        code=grpc.StatusCode.UNAUTHENTICATED.value[0], message=message, details=[info]))


class TokenAuth(grpc.ServerInterceptor):
    """Refuses calls without one of the configured bearer tokens (UNAUTHENTICATED)."""

    def __init__(self, tokens: tuple[bytes, ...]) -> None:
        self._tokens = tokens

    def _allowed(self, metadata) -> str | None:
        """None when allowed, else why not."""
        value = None
        for key, v in metadata or ():
            if key == "authorization":
                value = v if isinstance(v, str) else v.decode("latin-1")
                break
        if value is None:
            return "authorization: missing; send 'authorization: Bearer <token>'"
        scheme, _, token = value.partition(" ")
        if scheme.lower() != "bearer" or not token.strip():
            return "authorization: expected 'Bearer <token>'"
        given = token.strip().encode()
        # Compare with every token so the time taken does not say which matched.
        ok = False
        for t in self._tokens:
            ok |= hmac.compare_digest(given, t)
        return None if ok else "authorization: token not accepted"

    def intercept_service(self, continuation, handler_call_details):
        if handler_call_details.method.startswith(_OPEN_PREFIXES):
            return continuation(handler_call_details)
        why = self._allowed(handler_call_details.invocation_metadata)
        if why is None:
            return continuation(handler_call_details)
        handler = continuation(handler_call_details)
        status = _unauthenticated(why)

        def refuse(request_or_iterator, context):
            context.abort_with_status(status)

        if handler is None:
            return None
        if handler.unary_unary:
            return grpc.unary_unary_rpc_method_handler(
                refuse, handler.request_deserializer, handler.response_serializer)
        if handler.unary_stream:
            return grpc.unary_stream_rpc_method_handler(
                refuse, handler.request_deserializer, handler.response_serializer)
        if handler.stream_unary:
            return grpc.stream_unary_rpc_method_handler(
                refuse, handler.request_deserializer, handler.response_serializer)
        return grpc.stream_stream_rpc_method_handler(
            refuse, handler.request_deserializer, handler.response_serializer)
