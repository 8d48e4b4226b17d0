"""Request bodies of the exports API: a background bundle of a collection or a selection of its sheets."""

from __future__ import annotations

from typing import Annotated

from pydantic import BaseModel, ConfigDict, Field

from tracedesk.exports.bundle import BundleOptions
from tracedesk.exports.selection import MAX_ID, MAX_SELECTED

SheetId = Annotated[int, Field(ge=1, le=MAX_ID)]


class BundleCreate(BaseModel):
    """What to bundle and how: the sheets (null: every sheet of the collection) and the options of the files."""

    model_config = ConfigDict(extra="forbid")
    sheet_ids: list[SheetId] | None = Field(default=None, max_length=MAX_SELECTED)
    step: float | None = Field(
        default=None, gt=0, allow_inf_nan=False, description="resampling step (x units); null: one point per vertex"
    )
    period_hours: float = Field(default=24.0, gt=0, allow_inf_nan=False, description="summary period (hours)")
    image_side: int = Field(default=4000, ge=200, le=8000, description="longer side of each PNG (px)")

    def options(self) -> BundleOptions:
        return BundleOptions(step=self.step, period_hours=self.period_hours, max_image_side=self.image_side)
