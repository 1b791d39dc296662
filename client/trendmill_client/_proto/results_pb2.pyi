import datetime

from google.protobuf import timestamp_pb2 as _timestamp_pb2
from google.protobuf.internal import containers as _containers
from google.protobuf.internal import enum_type_wrapper as _enum_type_wrapper
from google.protobuf import descriptor as _descriptor
from google.protobuf import message as _message
from collections.abc import Iterable as _Iterable, Mapping as _Mapping
from typing import ClassVar as _ClassVar, Optional as _Optional, Union as _Union

DESCRIPTOR: _descriptor.FileDescriptor

class ResultFormat(int, metaclass=_enum_type_wrapper.EnumTypeWrapper):
    __slots__ = ()
    RESULT_FORMAT_UNSPECIFIED: _ClassVar[ResultFormat]
    RESULT_FORMAT_ARROW_IPC: _ClassVar[ResultFormat]
    RESULT_FORMAT_ROWS: _ClassVar[ResultFormat]
RESULT_FORMAT_UNSPECIFIED: ResultFormat
RESULT_FORMAT_ARROW_IPC: ResultFormat
RESULT_FORMAT_ROWS: ResultFormat

class Value(_message.Message):
    __slots__ = ("int_value", "string_value", "bool_value", "double_value", "date_value", "timestamp_value")
    INT_VALUE_FIELD_NUMBER: _ClassVar[int]
    STRING_VALUE_FIELD_NUMBER: _ClassVar[int]
    BOOL_VALUE_FIELD_NUMBER: _ClassVar[int]
    DOUBLE_VALUE_FIELD_NUMBER: _ClassVar[int]
    DATE_VALUE_FIELD_NUMBER: _ClassVar[int]
    TIMESTAMP_VALUE_FIELD_NUMBER: _ClassVar[int]
    int_value: int
    string_value: str
    bool_value: bool
    double_value: float
    date_value: str
    timestamp_value: _timestamp_pb2.Timestamp
    def __init__(self, int_value: _Optional[int] = ..., string_value: _Optional[str] = ..., bool_value: _Optional[bool] = ..., double_value: _Optional[float] = ..., date_value: _Optional[str] = ..., timestamp_value: _Optional[_Union[datetime.datetime, _timestamp_pb2.Timestamp, _Mapping]] = ...) -> None: ...

class KeyValue(_message.Message):
    __slots__ = ("column", "value")
    COLUMN_FIELD_NUMBER: _ClassVar[int]
    VALUE_FIELD_NUMBER: _ClassVar[int]
    column: str
    value: Value
    def __init__(self, column: _Optional[str] = ..., value: _Optional[_Union[Value, _Mapping]] = ...) -> None: ...

class TermFit(_message.Message):
    __slots__ = ("term", "estimate", "std_error", "t_value", "p_value", "ci_low", "ci_high")
    TERM_FIELD_NUMBER: _ClassVar[int]
    ESTIMATE_FIELD_NUMBER: _ClassVar[int]
    STD_ERROR_FIELD_NUMBER: _ClassVar[int]
    T_VALUE_FIELD_NUMBER: _ClassVar[int]
    P_VALUE_FIELD_NUMBER: _ClassVar[int]
    CI_LOW_FIELD_NUMBER: _ClassVar[int]
    CI_HIGH_FIELD_NUMBER: _ClassVar[int]
    term: str
    estimate: float
    std_error: float
    t_value: float
    p_value: float
    ci_low: float
    ci_high: float
    def __init__(self, term: _Optional[str] = ..., estimate: _Optional[float] = ..., std_error: _Optional[float] = ..., t_value: _Optional[float] = ..., p_value: _Optional[float] = ..., ci_low: _Optional[float] = ..., ci_high: _Optional[float] = ...) -> None: ...

class GroupFit(_message.Message):
    __slots__ = ("key", "n_rows", "status", "terms", "r_squared", "adj_r_squared", "residual_std_error", "df_residual", "f_statistic", "f_p_value", "condition_number", "n_skipped", "covariance")
    KEY_FIELD_NUMBER: _ClassVar[int]
    N_ROWS_FIELD_NUMBER: _ClassVar[int]
    STATUS_FIELD_NUMBER: _ClassVar[int]
    TERMS_FIELD_NUMBER: _ClassVar[int]
    R_SQUARED_FIELD_NUMBER: _ClassVar[int]
    ADJ_R_SQUARED_FIELD_NUMBER: _ClassVar[int]
    RESIDUAL_STD_ERROR_FIELD_NUMBER: _ClassVar[int]
    DF_RESIDUAL_FIELD_NUMBER: _ClassVar[int]
    F_STATISTIC_FIELD_NUMBER: _ClassVar[int]
    F_P_VALUE_FIELD_NUMBER: _ClassVar[int]
    CONDITION_NUMBER_FIELD_NUMBER: _ClassVar[int]
    N_SKIPPED_FIELD_NUMBER: _ClassVar[int]
    COVARIANCE_FIELD_NUMBER: _ClassVar[int]
    key: _containers.RepeatedCompositeFieldContainer[KeyValue]
    n_rows: int
    status: str
    terms: _containers.RepeatedCompositeFieldContainer[TermFit]
    r_squared: float
    adj_r_squared: float
    residual_std_error: float
    df_residual: int
    f_statistic: float
    f_p_value: float
    condition_number: float
    n_skipped: int
    covariance: _containers.RepeatedScalarFieldContainer[float]
    def __init__(self, key: _Optional[_Iterable[_Union[KeyValue, _Mapping]]] = ..., n_rows: _Optional[int] = ..., status: _Optional[str] = ..., terms: _Optional[_Iterable[_Union[TermFit, _Mapping]]] = ..., r_squared: _Optional[float] = ..., adj_r_squared: _Optional[float] = ..., residual_std_error: _Optional[float] = ..., df_residual: _Optional[int] = ..., f_statistic: _Optional[float] = ..., f_p_value: _Optional[float] = ..., condition_number: _Optional[float] = ..., n_skipped: _Optional[int] = ..., covariance: _Optional[_Iterable[float]] = ...) -> None: ...

class ReadResultsRequest(_message.Message):
    __slots__ = ("parent", "page_size", "page_token", "format", "max_pages")
    PARENT_FIELD_NUMBER: _ClassVar[int]
    PAGE_SIZE_FIELD_NUMBER: _ClassVar[int]
    PAGE_TOKEN_FIELD_NUMBER: _ClassVar[int]
    FORMAT_FIELD_NUMBER: _ClassVar[int]
    MAX_PAGES_FIELD_NUMBER: _ClassVar[int]
    parent: str
    page_size: int
    page_token: str
    format: ResultFormat
    max_pages: int
    def __init__(self, parent: _Optional[str] = ..., page_size: _Optional[int] = ..., page_token: _Optional[str] = ..., format: _Optional[_Union[ResultFormat, str]] = ..., max_pages: _Optional[int] = ...) -> None: ...

class ResultPage(_message.Message):
    __slots__ = ("arrow_ipc", "rows", "row_offset", "row_count", "total_rows", "next_page_token", "result")
    ARROW_IPC_FIELD_NUMBER: _ClassVar[int]
    ROWS_FIELD_NUMBER: _ClassVar[int]
    ROW_OFFSET_FIELD_NUMBER: _ClassVar[int]
    ROW_COUNT_FIELD_NUMBER: _ClassVar[int]
    TOTAL_ROWS_FIELD_NUMBER: _ClassVar[int]
    NEXT_PAGE_TOKEN_FIELD_NUMBER: _ClassVar[int]
    RESULT_FIELD_NUMBER: _ClassVar[int]
    arrow_ipc: bytes
    rows: _containers.RepeatedCompositeFieldContainer[GroupFit]
    row_offset: int
    row_count: int
    total_rows: int
    next_page_token: str
    result: str
    def __init__(self, arrow_ipc: _Optional[bytes] = ..., rows: _Optional[_Iterable[_Union[GroupFit, _Mapping]]] = ..., row_offset: _Optional[int] = ..., row_count: _Optional[int] = ..., total_rows: _Optional[int] = ..., next_page_token: _Optional[str] = ..., result: _Optional[str] = ...) -> None: ...

class LookupGroupRequest(_message.Message):
    __slots__ = ("parent", "key")
    PARENT_FIELD_NUMBER: _ClassVar[int]
    KEY_FIELD_NUMBER: _ClassVar[int]
    parent: str
    key: _containers.RepeatedCompositeFieldContainer[Value]
    def __init__(self, parent: _Optional[str] = ..., key: _Optional[_Iterable[_Union[Value, _Mapping]]] = ...) -> None: ...

class PredictPoint(_message.Message):
    __slots__ = ("x",)
    X_FIELD_NUMBER: _ClassVar[int]
    x: _containers.RepeatedScalarFieldContainer[float]
    def __init__(self, x: _Optional[_Iterable[float]] = ...) -> None: ...

class PredictRequest(_message.Message):
    __slots__ = ("parent", "key", "points", "confidence")
    PARENT_FIELD_NUMBER: _ClassVar[int]
    KEY_FIELD_NUMBER: _ClassVar[int]
    POINTS_FIELD_NUMBER: _ClassVar[int]
    CONFIDENCE_FIELD_NUMBER: _ClassVar[int]
    parent: str
    key: _containers.RepeatedCompositeFieldContainer[Value]
    points: _containers.RepeatedCompositeFieldContainer[PredictPoint]
    confidence: float
    def __init__(self, parent: _Optional[str] = ..., key: _Optional[_Iterable[_Union[Value, _Mapping]]] = ..., points: _Optional[_Iterable[_Union[PredictPoint, _Mapping]]] = ..., confidence: _Optional[float] = ...) -> None: ...

class Prediction(_message.Message):
    __slots__ = ("mean", "mean_std_error", "mean_ci_low", "mean_ci_high", "prediction_std_error", "prediction_low", "prediction_high")
    MEAN_FIELD_NUMBER: _ClassVar[int]
    MEAN_STD_ERROR_FIELD_NUMBER: _ClassVar[int]
    MEAN_CI_LOW_FIELD_NUMBER: _ClassVar[int]
    MEAN_CI_HIGH_FIELD_NUMBER: _ClassVar[int]
    PREDICTION_STD_ERROR_FIELD_NUMBER: _ClassVar[int]
    PREDICTION_LOW_FIELD_NUMBER: _ClassVar[int]
    PREDICTION_HIGH_FIELD_NUMBER: _ClassVar[int]
    mean: float
    mean_std_error: float
    mean_ci_low: float
    mean_ci_high: float
    prediction_std_error: float
    prediction_low: float
    prediction_high: float
    def __init__(self, mean: _Optional[float] = ..., mean_std_error: _Optional[float] = ..., mean_ci_low: _Optional[float] = ..., mean_ci_high: _Optional[float] = ..., prediction_std_error: _Optional[float] = ..., prediction_low: _Optional[float] = ..., prediction_high: _Optional[float] = ...) -> None: ...

class PredictResponse(_message.Message):
    __slots__ = ("predictions", "confidence", "df_residual", "result", "key")
    PREDICTIONS_FIELD_NUMBER: _ClassVar[int]
    CONFIDENCE_FIELD_NUMBER: _ClassVar[int]
    DF_RESIDUAL_FIELD_NUMBER: _ClassVar[int]
    RESULT_FIELD_NUMBER: _ClassVar[int]
    KEY_FIELD_NUMBER: _ClassVar[int]
    predictions: _containers.RepeatedCompositeFieldContainer[Prediction]
    confidence: float
    df_residual: int
    result: str
    key: _containers.RepeatedCompositeFieldContainer[KeyValue]
    def __init__(self, predictions: _Optional[_Iterable[_Union[Prediction, _Mapping]]] = ..., confidence: _Optional[float] = ..., df_residual: _Optional[int] = ..., result: _Optional[str] = ..., key: _Optional[_Iterable[_Union[KeyValue, _Mapping]]] = ...) -> None: ...
