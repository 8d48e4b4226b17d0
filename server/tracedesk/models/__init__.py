"""SQLAlchemy models, one module per table. Importing this package registers every table on ``Base.metadata``."""

from tracedesk.models.api_token import ApiToken
from tracedesk.models.audit_event import AuditChainHead, AuditEvent
from tracedesk.models.base import Base
from tracedesk.models.calibration import Calibration
from tracedesk.models.collection import Collection
from tracedesk.models.fit import Fit
from tracedesk.models.login_attempt import LoginAttempt
from tracedesk.models.sheet import Sheet
from tracedesk.models.source_file import SourceFile
from tracedesk.models.trace import Trace
from tracedesk.models.user import User
from tracedesk.models.web_session import WebSession

__all__ = [
    "ApiToken",
    "AuditChainHead",
    "AuditEvent",
    "Base",
    "Calibration",
    "Collection",
    "Fit",
    "LoginAttempt",
    "Sheet",
    "SourceFile",
    "Trace",
    "User",
    "WebSession",
]
