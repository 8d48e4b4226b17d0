"""SQLAlchemy models, one module per table. Importing this package registers every table on ``Base.metadata``."""

from tracedesk.models.api_token import ApiToken
from tracedesk.models.audit_event import AuditChainHead, AuditEvent
from tracedesk.models.base import Base
from tracedesk.models.batch_run import BatchRun, BatchRunItem
from tracedesk.models.calibration import Calibration
from tracedesk.models.chart_spec import ChartSpec
from tracedesk.models.collection import Collection
from tracedesk.models.collection_workflow import CollectionWorkflow
from tracedesk.models.fit import Fit
from tracedesk.models.job import Job
from tracedesk.models.login_attempt import LoginAttempt
from tracedesk.models.notice import Notice
from tracedesk.models.review_comment import ReviewComment
from tracedesk.models.sheet import Sheet
from tracedesk.models.signature import Signature
from tracedesk.models.source_file import SourceFile
from tracedesk.models.task import Task
from tracedesk.models.trace import Trace
from tracedesk.models.user import User
from tracedesk.models.web_session import WebSession

__all__ = [
    "ApiToken",
    "AuditChainHead",
    "AuditEvent",
    "Base",
    "BatchRun",
    "BatchRunItem",
    "Calibration",
    "ChartSpec",
    "Collection",
    "CollectionWorkflow",
    "Fit",
    "Job",
    "LoginAttempt",
    "Notice",
    "ReviewComment",
    "Sheet",
    "Signature",
    "SourceFile",
    "Task",
    "Trace",
    "User",
    "WebSession",
]
