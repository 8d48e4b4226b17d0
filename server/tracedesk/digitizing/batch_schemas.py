"""Request and response bodies of batch runs (issue 9)."""

from __future__ import annotations

from datetime import datetime
from typing import Annotated, Any, Literal

from pydantic import AfterValidator, BaseModel, ConfigDict, Field


def _names_a_family(fit: dict[str, Any]) -> dict[str, Any]:
    if not isinstance(fit.get("family"), str) or not fit["family"]:
        raise ValueError('a fit names its model family, e.g. {"family": "fourier", "degree": 2}')
    return fit


# The model fitted to each trace: the family and that family's options (the fits API's body).
BatchFit = Annotated[dict[str, Any], AfterValidator(_names_a_family)]


class BatchPen(BaseModel):
    model_config = ConfigDict(extra="forbid")
    name: str = Field(min_length=1, max_length=120)
    pen_color: str = Field(pattern=r"^#[0-9a-fA-F]{6}$")
    unit: str = Field(default="", max_length=60)
    tolerance: float | None = Field(default=None, gt=0, le=100)


class BatchThresholds(BaseModel):
    """A sheet goes to review only when every figure is on the right side of its threshold."""

    model_config = ConfigDict(extra="forbid")
    min_confidence: float = Field(default=0.6, ge=0, le=1, description="registration confidence")
    max_registration_rms_px: float = Field(default=1.0, gt=0, description="calibration RMS at the grid points")
    min_coverage: float = Field(default=0.9, ge=0, le=1, description="fraction of the traced span with pen")
    max_gaps: int = Field(default=5, ge=0, description="gaps per pen longer than min_gap_fraction of the chart")
    min_gap_fraction: float = Field(
        default=0.01, ge=0, le=1, description="shorter gaps (a pen crossing a grid line) are counted apart"
    )
    min_r_squared: float | None = Field(default=None, ge=0, le=1, description="fit quality, when a fit is asked")


class BatchRunCreate(BaseModel):
    """``fit`` and ``thresholds`` default to the collection's batch settings; sent (``fit: null``: no fit), they
    override them for this run."""

    model_config = ConfigDict(extra="forbid")
    chart_spec_id: int
    pens: list[BatchPen] = Field(min_length=1, max_length=8)
    fit: BatchFit | None = Field(default=None, description='e.g. {"family": "fourier", "degree": 2}')
    thresholds: BatchThresholds = BatchThresholds()
    sheet_ids: list[int] | None = Field(default=None, max_length=100_000, description="a selection; default all")


class BatchRunSettings(BatchRunCreate):
    """What a run uses, as stored on the run: the request with the collection's settings filled in, and where
    ``fit`` and ``thresholds`` came from (``"collection"`` or ``"request"``)."""

    settings_from: dict[str, str] = Field(default_factory=dict)


# What a run shows: its stored status, or "interrupted" when its job stopped before the run finished.
BatchRunStatus = Literal["queued", "running", "finished", "interrupted"]


class BatchItemRead(BaseModel):
    """One sheet's verdict: ``pending``, ``ready_for_review`` (its task is submitted for review),
    ``needs_person`` (its task waits, open, with ``reason``) or ``skipped`` (people hold the sheet; ``reason``
    says how)."""

    sheet_id: int
    status: str
    score: dict[str, Any]
    reason: str
    finished_at: datetime | None
    task_id: int | None = Field(description="the sheet's task, whoever made it")
    task_state: str | None


class BatchRunRead(BaseModel):
    """A run: ``queued``, ``running``, ``finished``, or ``interrupted`` (its job stopped; resume it)."""

    id: int
    collection_id: int
    chart_spec_id: int
    status: str
    job_id: int | None
    counts: dict[str, int]
    settings: dict[str, Any] = Field(description="what the run uses; settings_from: where fit and thresholds came from")
    started_by: str | None = Field(description="who started the run: an author of its work (four eyes)")
    items: list[BatchItemRead]
    created_at: datetime
    finished_at: datetime | None


class BatchRunSummary(BaseModel):
    """A run in a collection's list of runs: its counts, not its items (those are at /api/v1/batch-runs/{id})."""

    id: int
    chart_spec_id: int
    status: str = Field(description="queued, running, finished, or interrupted (its job stopped; resume it)")
    job_id: int | None = Field(description="the run's latest job (progress at /api/v1/jobs/{job_id})")
    counts: dict[str, int]
    started_by: str | None
    created_at: datetime
    finished_at: datetime | None


class BatchRunPage(BaseModel):
    """A page of a collection's runs, newest first; ask again with ``cursor=next_cursor`` for the next one."""

    items: list[BatchRunSummary]
    next_cursor: str | None
