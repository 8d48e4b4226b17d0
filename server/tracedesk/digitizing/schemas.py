"""Request and response bodies of the digitizing API (the contract of issue 3; keep it stable)."""

from __future__ import annotations

from datetime import datetime
from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

Pixel = Annotated[list[float], Field(min_length=2, max_length=2)]
Finite = Annotated[float, Field(allow_inf_nan=False)]


class AxisSpec(BaseModel):
    """One axis of a cartesian chart: its scale and, for time axes, an optional start or chart speed."""

    model_config = ConfigDict(extra="forbid")
    scale: Literal["linear", "log10", "sqrt", "time"] = "linear"
    unit: str = Field(default="", max_length=60)
    start: str | None = Field(default=None, max_length=40, description="ISO 8601 date-time with offset (time axes)")


class ControlPoint(BaseModel):
    model_config = ConfigDict(extra="forbid")
    pixel: Annotated[list[Finite], Field(min_length=2, max_length=2)]
    value: Annotated[list[Finite], Field(min_length=2, max_length=2)]


class CartesianCalibrationIn(BaseModel):
    model_config = ConfigDict(extra="forbid")
    kind: Literal["cartesian"]
    x_axis: AxisSpec = AxisSpec()
    y_axis: AxisSpec = AxisSpec()
    control_points: list[ControlPoint] = Field(min_length=2, max_length=500)
    transform: Literal["auto", "similarity", "affine", "projective", "polynomial2"] = "auto"


class ValueAxisSpec(BaseModel):
    model_config = ConfigDict(extra="forbid")
    scale: Literal["linear", "sqrt", "log10"] = "linear"
    unit: str = Field(default="", max_length=60)
    min: Finite
    max: Finite
    radius_min_px: Finite = Field(ge=0)
    radius_max_px: Finite = Field(gt=0)


class PenArcSpec(BaseModel):
    model_config = ConfigDict(extra="forbid")
    pivot_pixel: Annotated[list[Finite], Field(min_length=2, max_length=2)]
    length_px: Finite = Field(gt=0)


class CircularCalibrationIn(BaseModel):
    model_config = ConfigDict(extra="forbid")
    kind: Literal["circular"]
    centre: Annotated[list[Finite], Field(min_length=2, max_length=2)]
    value_axis: ValueAxisSpec
    period_hours: Finite = Field(gt=0)
    time_zero_pixel: Annotated[list[Finite], Field(min_length=2, max_length=2)]
    time_direction: Literal["clockwise", "counterclockwise"] = "clockwise"
    pen_arc: PenArcSpec | None = None
    start: str | None = Field(default=None, max_length=40)


class CurvilinearCalibrationIn(BaseModel):
    """A strip or drum chart whose pen swings on an arm: cartesian control points plus the arm geometry."""

    model_config = ConfigDict(extra="allow")
    kind: Literal["curvilinear"]


CalibrationIn = Annotated[
    CartesianCalibrationIn | CircularCalibrationIn | CurvilinearCalibrationIn, Field(discriminator="kind")
]


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
    rms_units: list[float] | None
    loo_rms_px: float | None
    warnings: list[str]
    updated_at: datetime
    origin: str


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
