"""Request and response bodies of the workflow API: tasks, signatures, comments, notices, boards, agreement."""

from __future__ import annotations

from datetime import date, datetime
from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

from tracedesk.digitizing.batch_schemas import BatchFit, BatchThresholds

Priority = Literal["low", "normal", "high", "urgent"]
TaskState = Literal["open", "in_progress", "submitted", "returned", "approved", "withdrawn"]
Meaning = Literal["reviewed", "approved"]
# Ids sent in bodies stay within the database's integer range (a larger one is a 422, not a database error).
Id = Annotated[int, Field(ge=1, le=2_147_483_647)]


class TaskBulkCreate(BaseModel):
    """Tasks for a collection's sheets: the listed ones, or every sheet that has no task yet."""

    model_config = ConfigDict(extra="forbid")
    sheet_ids: list[Id] | None = Field(default=None, max_length=10_000)
    technician_id: Id | None = None
    second_technician_id: Id | None = Field(
        default=None, description="double digitization only: the technician who digitizes the sheet a second time"
    )
    reviewer_id: Id | None = None
    priority: Priority = "normal"
    due_date: date | None = None


class TaskUpdate(BaseModel):
    """Reassignment and planning (reviewers and admins). A field sent as null clears it; a field left out stays."""

    model_config = ConfigDict(extra="forbid")
    technician_id: Id | None = None
    second_technician_id: Id | None = None
    reviewer_id: Id | None = None
    priority: Priority | None = None
    due_date: date | None = None
    double_digitization: bool | None = None
    reason: str | None = Field(default=None, max_length=2000)


class PersonRef(BaseModel):
    id: int
    display_name: str


class TaskRead(BaseModel):
    id: int
    sheet_id: int
    collection_id: int
    sheet_filename: str
    state: TaskState
    technician: PersonRef | None
    second_technician: PersonRef | None
    reviewer: PersonRef | None
    priority: Priority
    due_date: date | None
    overdue: bool
    double_digitization: bool
    technician_submitted: bool
    second_submitted: bool
    reason: str | None
    submitted_at: datetime | None
    approved_at: datetime | None
    created_at: datetime
    updated_at: datetime
    version: int
    allowed_actions: list[str] = Field(description="what the caller may do with this task now")


class SkippedSheet(BaseModel):
    sheet_id: int
    reason: str


class TaskBulkResult(BaseModel):
    created: list[TaskRead]
    skipped: list[SkippedSheet]


class ActionIn(BaseModel):
    model_config = ConfigDict(extra="forbid")
    reason: str | None = Field(default=None, max_length=2000)


class ReasonIn(BaseModel):
    model_config = ConfigDict(extra="forbid")
    reason: str = Field(min_length=1, max_length=2000)


class SignIn(BaseModel):
    """An electronic signature: re-enter your password; ``approved`` also moves the task to approved."""

    model_config = ConfigDict(extra="forbid")
    password: str = Field(min_length=1, max_length=1024)
    meaning: Meaning = "approved"


class SignatureRead(BaseModel):
    id: int
    task_id: int
    sheet_id: int
    signer_id: int
    printed_name: str
    meaning: Meaning
    signed_at: datetime
    record_sha256: str
    valid: bool = Field(description="false once the record changed after signing, or the task was reopened")
    void_reason: str | None
    withdrawn_at: datetime | None


class CommentCreate(BaseModel):
    """A review comment, pinned to a sheet position (pixels, origin at the image's top-left corner) or not."""

    model_config = ConfigDict(extra="forbid")
    body: str = Field(min_length=1, max_length=5000)
    u: float | None = Field(default=None, allow_inf_nan=False)
    v: float | None = Field(default=None, allow_inf_nan=False)
    trace_id: Id | None = None

    @model_validator(mode="after")
    def _both_or_neither(self) -> CommentCreate:
        if (self.u is None) != (self.v is None):
            raise ValueError("give both u and v for a pinned comment, or neither")
        return self


class CommentUpdate(BaseModel):
    model_config = ConfigDict(extra="forbid")
    resolved: bool


class CommentRead(BaseModel):
    id: int
    task_id: int
    sheet_id: int
    author: PersonRef
    body: str
    u: float | None
    v: float | None
    trace_id: int | None
    created_at: datetime
    resolved_at: datetime | None
    resolved_by: PersonRef | None
    version: int


class NoticeRead(BaseModel):
    model_config = ConfigDict(from_attributes=True)
    id: int
    kind: str
    task_id: int | None
    message: str
    created_at: datetime
    read_at: datetime | None


class PersonLoad(BaseModel):
    person: PersonRef
    to_digitize: int
    to_review: int


class BoardRead(BaseModel):
    collection_id: int
    total_sheets: int
    without_task: int
    counts: dict[str, int]
    approved_fraction: float = Field(description="approved tasks / tasks that are not withdrawn (0 when none)")
    overdue: list[TaskRead]
    load: list[PersonLoad]


class WorkQueueRead(BaseModel):
    to_digitize: list[TaskRead]
    to_review: list[TaskRead]
    unread_notices: int


class WorkflowSettingsRead(BaseModel):
    collection_id: int
    double_digitization: bool
    tolerance: float | None = Field(description="largest accepted difference between two technicians' traces")
    batch_thresholds: BatchThresholds = Field(description="what a batch run's sheet must pass to go to review")
    batch_fit: dict[str, Any] | None = Field(description="the model batch runs fit to each trace; null: no fit")
    version: int


class WorkflowSettingsUpdate(BaseModel):
    """Only the fields sent change; ``batch_fit: null`` stops batch runs fitting, ``batch_thresholds: null``
    restores the default thresholds."""

    model_config = ConfigDict(extra="forbid")
    double_digitization: bool | None = None
    tolerance: float | None = Field(default=None, gt=0, allow_inf_nan=False)
    batch_thresholds: BatchThresholds | None = None
    batch_fit: BatchFit | None = None
    reason: str | None = Field(default=None, max_length=2000)


class AgreementPairRead(BaseModel):
    name: str
    unit: str
    first_trace_id: int
    second_trace_id: int
    start: float | None = Field(description="common x range of the two traces (x units)")
    stop: float | None
    points: int
    max_difference: float | None = Field(description="largest |difference| of the values over the common range")
    max_at: float | None = Field(description="x where the largest difference occurs")
    rms_difference: float | None = Field(description="root-mean-square difference over the common range")
    agrees: bool | None = Field(description="max_difference <= tolerance; null without a tolerance or overlap")


class AgreementRead(BaseModel):
    task_id: int
    tolerance: float | None
    status: Literal["agree", "disagree", "incomplete", "no_tolerance"]
    pairs: list[AgreementPairRead]
    only_first: list[str]
    only_second: list[str]


class KeepIn(BaseModel):
    model_config = ConfigDict(extra="forbid")
    keep: Literal["first", "second"]
    reason: str = Field(min_length=1, max_length=2000)


class RecordRead(BaseModel):
    sheet_id: int
    sha256: str
    canonical_json: str = Field(description="the exact bytes (UTF-8) whose SHA-256 a signature is bound to")
