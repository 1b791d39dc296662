"""The exception -> status table, the rich details, and the client's decoding of them."""

from __future__ import annotations

import inspect

import grpc
import pytest
from google.protobuf import any_pb2
from google.rpc import error_details_pb2, status_pb2

from trendmill.engine import errors as E
from trendmill.service import _errors
from trendmill_client._status import parse_status_details


def _classes():
    return [getattr(E, n) for n in E.__all__ if inspect.isclass(getattr(E, n))]


def test_every_exception_class_has_its_own_row():
    missing = [c.__name__ for c in _classes() if c not in _errors.STATUS_CODES]
    assert missing == []


@pytest.mark.parametrize("exc, code", [
    (E.SpecError("x", "bad"), grpc.StatusCode.INVALID_ARGUMENT),
    (E.FilterError("unexpected end", expression="a <"), grpc.StatusCode.INVALID_ARGUMENT),
    (E.SchemaError("x: column 'q' not in schema", column="q", field="x"),
     grpc.StatusCode.INVALID_ARGUMENT),
    (E.SourceNotFound("nothing there", path="/d"), grpc.StatusCode.NOT_FOUND),
    (E.CorruptSource("not parquet", path="/d/f"), grpc.StatusCode.FAILED_PRECONDITION),
    (E.DataError("negative weight", column="w"), grpc.StatusCode.FAILED_PRECONDITION),
    (E.LimitError("too many"), grpc.StatusCode.RESOURCE_EXHAUSTED),
    (E.AccessError("outside"), grpc.StatusCode.PERMISSION_DENIED),
    (E.NotFound("no job"), grpc.StatusCode.NOT_FOUND),
    (E.Conflict("already done"), grpc.StatusCode.FAILED_PRECONDITION),
    (E.Cancelled("stop"), grpc.StatusCode.CANCELLED),
    (E.TrendmillError("?"), grpc.StatusCode.INTERNAL),
    (KeyError("bug"), grpc.StatusCode.INTERNAL),
])
def test_status_codes(exc, code):
    assert _errors.status_code(exc) == code


def test_rich_status_carries_error_info_and_field_violation():
    exc = E.SchemaError("x: column 'q' not in schema (have: a, b)", column="q", field="x")
    st = _errors.rich_status(exc)
    assert st.code == grpc.StatusCode.INVALID_ARGUMENT.value[0]
    assert st.message == exc.message
    info, bad = error_details_pb2.ErrorInfo(), error_details_pb2.BadRequest()
    assert st.details[0].Unpack(info) and st.details[1].Unpack(bad)
    assert (info.domain, info.reason) == ("trendmill", "BAD_COLUMN")
    assert dict(info.metadata) == {"column": "q", "field": "x"}
    assert bad.field_violations[0].field == "x"
    # Internal errors say nothing about the bug.
    st = _errors.rich_status(ZeroDivisionError("secret detail"))
    assert st.code == grpc.StatusCode.INTERNAL.value[0] and "secret" not in st.message


def test_client_decoder_matches_googleapis_classes():
    # Reference: the status built with googleapis' generated classes.
    st = status_pb2.Status(code=3, message="m")
    for d in (error_details_pb2.ErrorInfo(reason="BAD_COLUMN", domain="trendmill",
                                          metadata={"column": "q", "field": "x", "é": "ü"}),
              error_details_pb2.BadRequest(field_violations=[
                  error_details_pb2.BadRequest.FieldViolation(field="x", description="d"),
                  error_details_pb2.BadRequest.FieldViolation(field="y", description="e")])):
        a = any_pb2.Any()
        a.Pack(d)
        st.details.append(a)
    got = parse_status_details(st.SerializeToString())
    assert got.reason == "BAD_COLUMN" and got.domain == "trendmill"
    assert got.metadata == {"column": "q", "field": "x", "é": "ü"}
    assert got.field_violations == [("x", "d"), ("y", "e")]
    assert parse_status_details(b"\x1a\xff").reason is None  # truncated: no crash


def test_job_error_record():
    err = _errors.job_error(E.DataError("weight: -1 in column 'w'", column="w"))
    assert err == {"code": "FAILED_PRECONDITION", "reason": "BAD_DATA",
                   "message": "weight: -1 in column 'w'", "field": "", "metadata": {"column": "w"}}
