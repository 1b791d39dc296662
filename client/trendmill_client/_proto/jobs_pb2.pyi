import datetime

from google.protobuf import duration_pb2 as _duration_pb2
from google.protobuf import timestamp_pb2 as _timestamp_pb2
from . import spec_pb2 as _spec_pb2
from google.protobuf.internal import containers as _containers
from google.protobuf.internal import enum_type_wrapper as _enum_type_wrapper
from google.protobuf import descriptor as _descriptor
from google.protobuf import message as _message
from collections.abc import Iterable as _Iterable, Mapping as _Mapping
from typing import ClassVar as _ClassVar, Optional as _Optional, Union as _Union

DESCRIPTOR: _descriptor.FileDescriptor

class FitJob(_message.Message):
    __slots__ = ("name", "spec", "state", "done", "progress", "create_time", "start_time", "end_time", "model", "model_version", "error", "summary", "cancel_requested", "attempts")
    class State(int, metaclass=_enum_type_wrapper.EnumTypeWrapper):
        __slots__ = ()
        STATE_UNSPECIFIED: _ClassVar[FitJob.State]
        QUEUED: _ClassVar[FitJob.State]
        RUNNING: _ClassVar[FitJob.State]
        SUCCEEDED: _ClassVar[FitJob.State]
        FAILED: _ClassVar[FitJob.State]
        CANCELLED: _ClassVar[FitJob.State]
    STATE_UNSPECIFIED: FitJob.State
    QUEUED: FitJob.State
    RUNNING: FitJob.State
    SUCCEEDED: FitJob.State
    FAILED: FitJob.State
    CANCELLED: FitJob.State
    NAME_FIELD_NUMBER: _ClassVar[int]
    SPEC_FIELD_NUMBER: _ClassVar[int]
    STATE_FIELD_NUMBER: _ClassVar[int]
    DONE_FIELD_NUMBER: _ClassVar[int]
    PROGRESS_FIELD_NUMBER: _ClassVar[int]
    CREATE_TIME_FIELD_NUMBER: _ClassVar[int]
    START_TIME_FIELD_NUMBER: _ClassVar[int]
    END_TIME_FIELD_NUMBER: _ClassVar[int]
    MODEL_FIELD_NUMBER: _ClassVar[int]
    MODEL_VERSION_FIELD_NUMBER: _ClassVar[int]
    ERROR_FIELD_NUMBER: _ClassVar[int]
    SUMMARY_FIELD_NUMBER: _ClassVar[int]
    CANCEL_REQUESTED_FIELD_NUMBER: _ClassVar[int]
    ATTEMPTS_FIELD_NUMBER: _ClassVar[int]
    name: str
    spec: _spec_pb2.FitSpec
    state: FitJob.State
    done: bool
    progress: FitProgress
    create_time: _timestamp_pb2.Timestamp
    start_time: _timestamp_pb2.Timestamp
    end_time: _timestamp_pb2.Timestamp
    model: str
    model_version: str
    error: JobError
    summary: FitSummary
    cancel_requested: bool
    attempts: int
    def __init__(self, name: _Optional[str] = ..., spec: _Optional[_Union[_spec_pb2.FitSpec, _Mapping]] = ..., state: _Optional[_Union[FitJob.State, str]] = ..., done: _Optional[bool] = ..., progress: _Optional[_Union[FitProgress, _Mapping]] = ..., create_time: _Optional[_Union[datetime.datetime, _timestamp_pb2.Timestamp, _Mapping]] = ..., start_time: _Optional[_Union[datetime.datetime, _timestamp_pb2.Timestamp, _Mapping]] = ..., end_time: _Optional[_Union[datetime.datetime, _timestamp_pb2.Timestamp, _Mapping]] = ..., model: _Optional[str] = ..., model_version: _Optional[str] = ..., error: _Optional[_Union[JobError, _Mapping]] = ..., summary: _Optional[_Union[FitSummary, _Mapping]] = ..., cancel_requested: _Optional[bool] = ..., attempts: _Optional[int] = ...) -> None: ...

class FitProgress(_message.Message):
    __slots__ = ("partitions_done", "partitions_total", "rows_read", "bytes_read", "rows_per_second", "elapsed", "eta")
    PARTITIONS_DONE_FIELD_NUMBER: _ClassVar[int]
    PARTITIONS_TOTAL_FIELD_NUMBER: _ClassVar[int]
    ROWS_READ_FIELD_NUMBER: _ClassVar[int]
    BYTES_READ_FIELD_NUMBER: _ClassVar[int]
    ROWS_PER_SECOND_FIELD_NUMBER: _ClassVar[int]
    ELAPSED_FIELD_NUMBER: _ClassVar[int]
    ETA_FIELD_NUMBER: _ClassVar[int]
    partitions_done: int
    partitions_total: int
    rows_read: int
    bytes_read: int
    rows_per_second: float
    elapsed: _duration_pb2.Duration
    eta: _duration_pb2.Duration
    def __init__(self, partitions_done: _Optional[int] = ..., partitions_total: _Optional[int] = ..., rows_read: _Optional[int] = ..., bytes_read: _Optional[int] = ..., rows_per_second: _Optional[float] = ..., elapsed: _Optional[_Union[datetime.timedelta, _duration_pb2.Duration, _Mapping]] = ..., eta: _Optional[_Union[datetime.timedelta, _duration_pb2.Duration, _Mapping]] = ...) -> None: ...

class JobError(_message.Message):
    __slots__ = ("code", "reason", "message", "field", "metadata")
    class MetadataEntry(_message.Message):
        __slots__ = ("key", "value")
        KEY_FIELD_NUMBER: _ClassVar[int]
        VALUE_FIELD_NUMBER: _ClassVar[int]
        key: str
        value: str
        def __init__(self, key: _Optional[str] = ..., value: _Optional[str] = ...) -> None: ...
    CODE_FIELD_NUMBER: _ClassVar[int]
    REASON_FIELD_NUMBER: _ClassVar[int]
    MESSAGE_FIELD_NUMBER: _ClassVar[int]
    FIELD_FIELD_NUMBER: _ClassVar[int]
    METADATA_FIELD_NUMBER: _ClassVar[int]
    code: str
    reason: str
    message: str
    field: str
    metadata: _containers.ScalarMap[str, str]
    def __init__(self, code: _Optional[str] = ..., reason: _Optional[str] = ..., message: _Optional[str] = ..., field: _Optional[str] = ..., metadata: _Optional[_Mapping[str, str]] = ...) -> None: ...

class FitSummary(_message.Message):
    __slots__ = ("groups", "groups_ok", "partitions", "rows_read", "bytes_read", "fit_duration")
    GROUPS_FIELD_NUMBER: _ClassVar[int]
    GROUPS_OK_FIELD_NUMBER: _ClassVar[int]
    PARTITIONS_FIELD_NUMBER: _ClassVar[int]
    ROWS_READ_FIELD_NUMBER: _ClassVar[int]
    BYTES_READ_FIELD_NUMBER: _ClassVar[int]
    FIT_DURATION_FIELD_NUMBER: _ClassVar[int]
    groups: int
    groups_ok: int
    partitions: int
    rows_read: int
    bytes_read: int
    fit_duration: _duration_pb2.Duration
    def __init__(self, groups: _Optional[int] = ..., groups_ok: _Optional[int] = ..., partitions: _Optional[int] = ..., rows_read: _Optional[int] = ..., bytes_read: _Optional[int] = ..., fit_duration: _Optional[_Union[datetime.timedelta, _duration_pb2.Duration, _Mapping]] = ...) -> None: ...

class CreateFitJobRequest(_message.Message):
    __slots__ = ("spec", "model", "request_id")
    SPEC_FIELD_NUMBER: _ClassVar[int]
    MODEL_FIELD_NUMBER: _ClassVar[int]
    REQUEST_ID_FIELD_NUMBER: _ClassVar[int]
    spec: _spec_pb2.FitSpec
    model: str
    request_id: str
    def __init__(self, spec: _Optional[_Union[_spec_pb2.FitSpec, _Mapping]] = ..., model: _Optional[str] = ..., request_id: _Optional[str] = ...) -> None: ...

class GetFitJobRequest(_message.Message):
    __slots__ = ("name",)
    NAME_FIELD_NUMBER: _ClassVar[int]
    name: str
    def __init__(self, name: _Optional[str] = ...) -> None: ...

class ListFitJobsRequest(_message.Message):
    __slots__ = ("page_size", "page_token", "state", "model")
    PAGE_SIZE_FIELD_NUMBER: _ClassVar[int]
    PAGE_TOKEN_FIELD_NUMBER: _ClassVar[int]
    STATE_FIELD_NUMBER: _ClassVar[int]
    MODEL_FIELD_NUMBER: _ClassVar[int]
    page_size: int
    page_token: str
    state: FitJob.State
    model: str
    def __init__(self, page_size: _Optional[int] = ..., page_token: _Optional[str] = ..., state: _Optional[_Union[FitJob.State, str]] = ..., model: _Optional[str] = ...) -> None: ...

class ListFitJobsResponse(_message.Message):
    __slots__ = ("fit_jobs", "next_page_token")
    FIT_JOBS_FIELD_NUMBER: _ClassVar[int]
    NEXT_PAGE_TOKEN_FIELD_NUMBER: _ClassVar[int]
    fit_jobs: _containers.RepeatedCompositeFieldContainer[FitJob]
    next_page_token: str
    def __init__(self, fit_jobs: _Optional[_Iterable[_Union[FitJob, _Mapping]]] = ..., next_page_token: _Optional[str] = ...) -> None: ...

class CancelFitJobRequest(_message.Message):
    __slots__ = ("name",)
    NAME_FIELD_NUMBER: _ClassVar[int]
    name: str
    def __init__(self, name: _Optional[str] = ...) -> None: ...

class WatchFitJobRequest(_message.Message):
    __slots__ = ("name",)
    NAME_FIELD_NUMBER: _ClassVar[int]
    name: str
    def __init__(self, name: _Optional[str] = ...) -> None: ...

class FitJobEvent(_message.Message):
    __slots__ = ("job", "event_time")
    JOB_FIELD_NUMBER: _ClassVar[int]
    EVENT_TIME_FIELD_NUMBER: _ClassVar[int]
    job: FitJob
    event_time: _timestamp_pb2.Timestamp
    def __init__(self, job: _Optional[_Union[FitJob, _Mapping]] = ..., event_time: _Optional[_Union[datetime.datetime, _timestamp_pb2.Timestamp, _Mapping]] = ...) -> None: ...
