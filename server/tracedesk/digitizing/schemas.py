"""Request and response bodies of the digitizing API (the contract of issue 3; keep it stable)."""

from __future__ import annotations

from datetime import datetime
from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, JsonValue, model_validator

Pixel = Annotated[list[float], Field(min_length=2, max_length=2)]
Finite = Annotated[float, Field(allow_inf_nan=False)]


CALIBRATION_EXAMPLE: dict[str, JsonValue] = {
    "kind": "cartesian",
    "x_axis": {"scale": "time"},
    "y_axis": {"scale": "linear"},
    "control_points": [
        {"pixel": [100.5, 900.5], "value": [0, 0]},
        {"pixel": [1900.5, 900.5], "value": [24, 0]},
        {"pixel": [1900.5, 100.5], "value": [24, 10]},
        {"pixel": [100.5, 100.5], "value": [0, 10]},
    ],
    "transform": "auto",
}


class CalibrationIn(BaseModel):
    """A sheet's calibration. Kinds and their fields (pixels ``[u, v]`` from the top-left corner of the image):

    - ``cartesian``: ``x_axis``/``y_axis`` ``{"scale": "linear"|"log10"|"sqrt"|"time", "start"?: ISO 8601}``,
      ``control_points`` ``[{"pixel": [u, v], "value": [x, y]}, ...]`` (2 or more), ``transform``
      ``"auto"|"similarity"|"affine"|"projective"|"polynomial2"``.
    - ``circular``: ``centre``, ``value_axis`` ``{"scale", "min", "max", "radius_min_px", "radius_max_px"}``,
      ``period_hours``, ``time_zero_pixel``, ``time_direction`` ``"clockwise"|"counterclockwise"``,
      ``pen_arc``? (below), ``start``? ISO 8601.
    - ``curvilinear``: the cartesian fields plus ``pen_arc`` with ``pivot_side`` ``"later"|"earlier"``.
    - ``pen_arc``: the pen arm, either typed ``{"pivot_pixel": [u, v], "length_px": L}`` (e.g. from an instrument
      drawing; taken as exact) or clicked ``{"time_line_points": [[u, v], ...]}`` (3 or more pixels along one
      printed time line; the circle through them gives pivot and length, and their click uncertainty is
      propagated); exactly one of the two.
    - ``strip_speed``: ``y_axis``, value ``control_points`` ``[{"pixel", "value": y}]``, ``time_zero_pixel``,
      ``time_direction`` ``"right"|"left"|"down"|"up"``, ``chart_speed_mm_per_hour``, ``scan_dpi``.

    The science core validates every field; a bad one is refused with 422 naming its path.
    """

    model_config = ConfigDict(extra="allow", json_schema_extra={"examples": [CALIBRATION_EXAMPLE]})
    kind: Literal["cartesian", "circular", "curvilinear", "strip_speed"]
    reason: str | None = Field(default=None, max_length=2000, description="why an existing calibration changes")


class PointResidual(BaseModel):
    pixel: list[float]
    value: list[float]
    residual_px: float
    residual_units: list[float]
    outlier: bool


class CalibrationRead(BaseModel):
    sheet_id: int
    kind: str
    version: int
    spec: dict[str, Any]
    transform: str | None
    residuals: list[PointResidual]
    rms_px: float | None
    rms_units: list[float | None] | None  # None per axis when no point has a value on it (circular charts)
    loo_rms_px: float | None
    warnings: list[str]
    updated_at: datetime
    origin: str
    report: dict[str, Any]


class TraceCreate(BaseModel):
    model_config = ConfigDict(extra="forbid")
    name: str = Field(min_length=1, max_length=120)
    unit: str = Field(default="", max_length=60)
    pen_color: str = Field(default="", pattern=r"^(#[0-9a-fA-F]{6})?$")
    vertices: list[Annotated[list[Finite], Field(min_length=2, max_length=2)]] = Field(max_length=200_000)
    line_width_px: Finite = Field(default=2.0, gt=0, le=100)


class TraceUpdate(BaseModel):
    model_config = ConfigDict(extra="forbid")
    name: str | None = Field(default=None, min_length=1, max_length=120)
    unit: str | None = Field(default=None, max_length=60)
    pen_color: str | None = Field(default=None, pattern=r"^(#[0-9a-fA-F]{6})?$")
    vertices: list[Annotated[list[Finite], Field(min_length=2, max_length=2)]] | None = Field(
        default=None, max_length=200_000
    )
    reason: str | None = Field(default=None, max_length=2000)


class AutoRegion(BaseModel):
    model_config = ConfigDict(extra="forbid")
    box: Annotated[list[Finite], Field(min_length=4, max_length=4)] | None = None
    polygon: list[Annotated[list[Finite], Field(min_length=2, max_length=2)]] | None = Field(
        default=None, min_length=3, max_length=1000
    )
    calibrated_area: bool | None = None

    @model_validator(mode="after")
    def _exactly_one(self) -> AutoRegion:
        chosen = [self.box is not None, self.polygon is not None, bool(self.calibrated_area)]
        if sum(chosen) != 1:
            raise ValueError("give exactly one of box, polygon or calibrated_area: true")
        return self


class AutoTraceRequest(BaseModel):
    model_config = ConfigDict(extra="forbid")
    name: str = Field(min_length=1, max_length=120)
    unit: str = Field(default="", max_length=60)
    pen_color: str = Field(pattern=r"^#[0-9a-fA-F]{6}$")
    region: AutoRegion
    tolerance: Finite | None = Field(default=None, gt=0, le=100)
    start: Annotated[list[Finite], Field(min_length=2, max_length=2)] | None = None
    end: Annotated[list[Finite], Field(min_length=2, max_length=2)] | None = None


class TraceRead(BaseModel):
    id: int
    sheet_id: int
    name: str
    unit: str
    pen_color: str
    origin: str
    version: int
    vertices: list[list[float]]
    confidence: list[float]
    gaps: list[list[float]]
    line_width_px: float
    samples: list[list[float | None]] | None
    uncertainty: list[list[float]] | None
    calibration_version: int | None
    x_unit: str
    y_unit: str
    created_at: datetime
    updated_at: datetime


class FitRequest(BaseModel):
    model_config = ConfigDict(extra="allow")
    family: str = Field(min_length=1, max_length=40)


class FitRead(BaseModel):
    id: int
    trace_id: int
    family: str
    version: int
    trace_version: int
    calibration_version: int
    stale: bool
    options: dict[str, Any]
    coefficients: Any
    standard_errors: Any
    covariance: list[list[float]] | None
    stats: dict[str, Any]
    equation: dict[str, str]
    domain: list[float]
    warnings: list[str]
    created_at: datetime


class ChartSpecCreate(BaseModel):
    """A chart spec: ``geometry`` is the printed grid for automatic registration (see science/grid_spec.py), and
    ``calibration_template`` a calibration to start from (e.g. saved from a sheet); at least one of them."""

    model_config = ConfigDict(extra="forbid")
    name: str = Field(min_length=1, max_length=200)
    collection_id: int | None = None
    geometry: dict[str, Any] | None = None
    calibration_template: dict[str, Any] | None = None
    notes: str = Field(default="", max_length=10_000)

    @model_validator(mode="after")
    def _something_to_reuse(self) -> ChartSpecCreate:
        if self.geometry is None and self.calibration_template is None:
            raise ValueError("give geometry (the printed grid) or calibration_template, or both")
        return self


class ChartSpecUpdate(BaseModel):
    model_config = ConfigDict(extra="forbid")
    name: str | None = Field(default=None, min_length=1, max_length=200)
    geometry: dict[str, Any] | None = None
    calibration_template: dict[str, Any] | None = None
    notes: str | None = Field(default=None, max_length=10_000)


class ChartSpecRead(BaseModel):
    id: int
    name: str
    kind: str
    collection_id: int | None
    geometry: dict[str, Any] | None
    calibration_template: dict[str, Any] | None
    notes: str
    version: int
    created_at: datetime


class DetectRequest(BaseModel):
    model_config = ConfigDict(extra="forbid")
    chart_spec_id: int | None = None
    spec: dict[str, Any] | None = Field(default=None, description="printed grid geometry (science/grid_spec.py)")
    accept: bool = Field(default=False, description="store the proposed calibration when confident enough")
    min_confidence: float = Field(default=0.5, ge=0, le=1)

    @model_validator(mode="after")
    def _one_source(self) -> DetectRequest:
        if (self.chart_spec_id is None) == (self.spec is None):
            raise ValueError("give exactly one of chart_spec_id or spec")
        return self
