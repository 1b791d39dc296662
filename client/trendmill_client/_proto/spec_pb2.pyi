from google.protobuf.internal import containers as _containers
from google.protobuf.internal import enum_type_wrapper as _enum_type_wrapper
from google.protobuf import descriptor as _descriptor
from google.protobuf import message as _message
from collections.abc import Iterable as _Iterable
from typing import ClassVar as _ClassVar, Optional as _Optional, Union as _Union

DESCRIPTOR: _descriptor.FileDescriptor

class Solver(int, metaclass=_enum_type_wrapper.EnumTypeWrapper):
    __slots__ = ()
    SOLVER_UNSPECIFIED: _ClassVar[Solver]
    SOLVER_NORMAL: _ClassVar[Solver]
    SOLVER_QR: _ClassVar[Solver]
SOLVER_UNSPECIFIED: Solver
SOLVER_NORMAL: Solver
SOLVER_QR: Solver

class FitSpec(_message.Message):
    __slots__ = ("source", "y", "x", "by", "weight", "intercept", "filter", "solver", "confidence")
    SOURCE_FIELD_NUMBER: _ClassVar[int]
    Y_FIELD_NUMBER: _ClassVar[int]
    X_FIELD_NUMBER: _ClassVar[int]
    BY_FIELD_NUMBER: _ClassVar[int]
    WEIGHT_FIELD_NUMBER: _ClassVar[int]
    INTERCEPT_FIELD_NUMBER: _ClassVar[int]
    FILTER_FIELD_NUMBER: _ClassVar[int]
    SOLVER_FIELD_NUMBER: _ClassVar[int]
    CONFIDENCE_FIELD_NUMBER: _ClassVar[int]
    source: str
    y: str
    x: _containers.RepeatedScalarFieldContainer[str]
    by: _containers.RepeatedScalarFieldContainer[str]
    weight: str
    intercept: bool
    filter: str
    solver: Solver
    confidence: float
    def __init__(self, source: _Optional[str] = ..., y: _Optional[str] = ..., x: _Optional[_Iterable[str]] = ..., by: _Optional[_Iterable[str]] = ..., weight: _Optional[str] = ..., intercept: _Optional[bool] = ..., filter: _Optional[str] = ..., solver: _Optional[_Union[Solver, str]] = ..., confidence: _Optional[float] = ...) -> None: ...
