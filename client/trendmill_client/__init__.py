"""trendmill_client: a thin client of the trendmill fit service.

Needs only grpcio and protobuf. Results come as typed objects or plain dicts;
``Client.read_table`` / ``read_dataframe`` return a pyarrow Table / pandas
DataFrame when those are installed.

>>> from trendmill_client import Client, FitSpec                # doctest: +SKIP
>>> with Client("127.0.0.1:7070", token_file="token") as c:     # doctest: +SKIP
...     job = c.fit(FitSpec("fleet", "cabinet_temp_c", ("ts",), by=("freezer_id",)),
...                 model="freezer-drift")
...     c.lookup_group(job.result, 17).term("ts").estimate
"""

from ._client import Client
from ._errors import (Cancelled, DeadlineExceeded, FailedPrecondition, InternalError,
                      InvalidArgument, NotFound, PermissionDenied, ResourceExhausted,
                      ServiceError, Unauthenticated, Unavailable)
from ._types import (FitJob, FitProgress, FitSpec, FitSummary, GroupFit, JobError, KeyColumn,
                     Model, ModelVersion, Prediction, PredictResult, TermFit)

__all__ = [
    "Client",
    "FitSpec", "FitJob", "FitProgress", "FitSummary", "JobError", "Model", "ModelVersion",
    "KeyColumn", "GroupFit", "TermFit", "Prediction", "PredictResult",
    "ServiceError", "InvalidArgument", "NotFound", "FailedPrecondition", "PermissionDenied",
    "Unauthenticated", "ResourceExhausted", "Cancelled", "DeadlineExceeded", "Unavailable",
    "InternalError",
]
