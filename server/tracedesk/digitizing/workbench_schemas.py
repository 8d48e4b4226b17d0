"""Request and response bodies of the routes that serve the digitizing workbench (previews, probes, overlays)."""

from __future__ import annotations

from datetime import datetime
from typing import Annotated, Any

from pydantic import BaseModel, ConfigDict, Field

Finite = Annotated[float, Field(allow_inf_nan=False)]
PixelIn = Annotated[list[Finite], Field(min_length=2, max_length=2)]
Point = list[float]


class ColourRead(BaseModel):
    """Colours (``#rrggbb``) under a point of the normalised sheet."""

    u: float
    v: float
    radius_px: float
    pen_color: str = Field(description="mean of the pixels near (u, v) that differ most from the paper")
    pixel_color: str = Field(description="the pixel that contains (u, v)")
    paper_color: str = Field(description="median of a window around (u, v)")
    ink_found: bool = Field(description="false when nothing near (u, v) stands out from the paper")
    difference: float = Field(description="CIE76 difference between the ink and the paper")


class PreviewResidual(BaseModel):
    index: int
    pixel: Point
    residual_px: list[float | None]
    distance_px: float | None
    residual_units: list[float | None]
    outlier: bool


class GridLine(BaseModel):
    axis: str
    value: float
    label: str
    points: list[Point]


class CalibrationPreview(BaseModel):
    """A calibration fitted but not stored: residuals, the chosen transform, warnings and its grid on the sheet."""

    kind: str
    transform: str | None
    residuals: list[PreviewResidual]
    rms_px: float | None
    rms_units: list[float | None] | None
    loo_rms_px: float | None
    loo_rms_by_transform: dict[str, float | None]
    warnings: list[str]
    grid: list[GridLine]


class MapRequest(BaseModel):
    model_config = ConfigDict(extra="forbid")
    pixels: list[PixelIn] = Field(min_length=1, max_length=1000)
    spec: dict[str, Any] | None = Field(default=None, description="a draft calibration; default: the saved one")


class MapRead(BaseModel):
    values: list[list[float | None]]
    x_unit: str
    y_unit: str


class CircleRequest(BaseModel):
    model_config = ConfigDict(extra="forbid")
    points: list[PixelIn] = Field(min_length=3, max_length=200)


class CircleRead(BaseModel):
    """A circle through points clicked on one ring or along one time line (px)."""

    centre: Point
    radius_px: float
    rms_px: float
    residuals_px: list[float]


class FitCurveResidual(BaseModel):
    x: float
    y: float
    residual: float
    pixel: list[float | None]


class FitCurve(BaseModel):
    """A fit evaluated for drawing: chart values and their pixels, bands, and residuals of the samples."""

    fit_id: int
    fit_version: int
    trace_id: int
    stale: bool
    domain: list[float]
    level: float
    x: list[float]
    fitted: list[float | None]
    outside: list[bool]
    confidence: list[list[float | None]] | None = Field(description="[lower, upper] per x, or null")
    prediction: list[list[float | None]] | None
    pixels: dict[str, list[list[float | None]]]
    residuals: list[FitCurveResidual]
    residual_sd: float | None = Field(
        description="standard deviation of the residuals in value units, sqrt(sum r^2 / (n - p)), weighted fit or not"
    )
    caution: str | None


class CalibrationTemplate(BaseModel):
    """The saved calibration of another sheet of the same collection, offered as a starting point."""

    sheet_id: int
    filename: str
    kind: str
    version: int
    spec: dict[str, Any]
    updated_at: datetime
