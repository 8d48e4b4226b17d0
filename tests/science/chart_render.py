"""Render synthetic chart sheets with matplotlib (Agg) into numpy arrays, with exactly known truth.

Everything is drawn in sheet pixel coordinates (the ARCHITECTURE.md convention: origin at the top-left
corner of the top-left pixel, u right, v down, pixel (i, j) centred at (i + 0.5, j + 0.5)). The trick:
one axes fills the whole figure, its limits are (0, width) and (height, 0), and the figure is exactly
width x height pixels, so a data point (u, v) is the sheet point (u, v). Matplotlib's y axis points up;
the inverted y limits turn that into v down. Lines are drawn unsnapped (snapping would move them to
pixel centres) and with butt caps (so pen gaps end where asked).

Typical use::

    mapping = LinearChartMapping(x_range=(0, 10), y_range=(-1, 1), box_px=(60, 40, 740, 460))
    pen = PenStroke.from_function(np.sin, mapping=mapping, x_range=(0, 10), colour="#1f3cc8")
    sheet = render_sheet(width_px=800, height_px=500, strokes=[pen], grid=GridLines(...))
    truth_uv = pen.points_uv  # dense polyline in pixel coordinates
"""

from __future__ import annotations

import io
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import matplotlib

matplotlib.use("Agg")

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.patches import Circle
from numpy.typing import NDArray
from PIL import Image
from scipy import ndimage
from scipy.spatial import cKDTree

FloatArray = NDArray[np.float64]
PAPER_WHITE = "#fbfaf5"


@dataclass(frozen=True)
class LinearChartMapping:
    """Linear chart data (x right, y up) <-> sheet pixels (u right, v down).

    ``box_px`` is (u_left, v_top, u_right, v_bottom): where x_range[0], y_range[1], x_range[1] and
    y_range[0] fall on the sheet.
    """

    x_range: tuple[float, float]
    y_range: tuple[float, float]
    box_px: tuple[float, float, float, float]

    def data_to_pixel(self, x: FloatArray, y: FloatArray) -> FloatArray:
        """Chart data -> (n, 2) array of (u, v) in pixels."""
        u_left, v_top, u_right, v_bottom = self.box_px
        fraction_x = (np.asarray(x, float) - self.x_range[0]) / (self.x_range[1] - self.x_range[0])
        fraction_y = (np.asarray(y, float) - self.y_range[0]) / (self.y_range[1] - self.y_range[0])
        return np.column_stack([u_left + fraction_x * (u_right - u_left), v_bottom - fraction_y * (v_bottom - v_top)])

    def pixel_to_data(self, uv: FloatArray) -> FloatArray:
        """(n, 2) pixel (u, v) -> (n, 2) chart data (x, y)."""
        u_left, v_top, u_right, v_bottom = self.box_px
        uv = np.asarray(uv, float)
        x = self.x_range[0] + (uv[:, 0] - u_left) / (u_right - u_left) * (self.x_range[1] - self.x_range[0])
        y = self.y_range[0] + (v_bottom - uv[:, 1]) / (v_bottom - v_top) * (self.y_range[1] - self.y_range[0])
        return np.column_stack([x, y])


@dataclass(frozen=True)
class PenStroke:
    """One pen line: a dense polyline in pixel coordinates, optionally with gaps (u ranges left blank)."""

    points_uv: FloatArray
    colour: str
    width_px: float = 2.0
    gaps_u: Sequence[tuple[float, float]] = ()

    @classmethod
    def from_function(
        cls,
        function: Callable[[FloatArray], FloatArray],
        *,
        mapping: LinearChartMapping,
        x_range: tuple[float, float],
        colour: str,
        width_px: float = 2.0,
        gaps_x: Sequence[tuple[float, float]] = (),
        samples: int = 4000,
    ) -> PenStroke:
        """Sample y = function(x) densely over ``x_range`` and map it to pixels."""
        x = np.linspace(x_range[0], x_range[1], samples)
        points = mapping.data_to_pixel(x, function(x))
        gaps_u = [tuple(mapping.data_to_pixel(np.array(g), np.zeros(2))[:, 0]) for g in gaps_x]
        return cls(points, colour, width_px, [(float(a), float(b)) for a, b in gaps_u])

    @classmethod
    def from_polar(
        cls,
        radius_of_angle: Callable[[FloatArray], FloatArray],
        *,
        centre_uv: tuple[float, float],
        angle_range_deg: tuple[float, float] = (0.0, 360.0),
        colour: str,
        width_px: float = 2.0,
        samples: int = 6000,
    ) -> PenStroke:
        """A pen on a circular chart: radius (px) as a function of the angle (degrees, clockwise on the
        screen from the +u axis)."""
        angle = np.linspace(angle_range_deg[0], angle_range_deg[1], samples)
        radius = radius_of_angle(angle)
        theta = np.radians(angle)
        points = np.column_stack([centre_uv[0] + radius * np.cos(theta), centre_uv[1] + radius * np.sin(theta)])
        return cls(points, colour, width_px)

    def drawn_points(self) -> FloatArray:
        """The polyline with NaN where a gap interrupts it (matplotlib breaks lines at NaN)."""
        points = self.points_uv.copy()
        for u_start, u_end in self.gaps_u:
            inside = (points[:, 0] > min(u_start, u_end)) & (points[:, 0] < max(u_start, u_end))
            points[inside] = np.nan
        return points

    def visible_points(self) -> FloatArray:
        """Truth polyline points not inside a gap."""
        points = self.drawn_points()
        return points[np.isfinite(points[:, 0])]


@dataclass(frozen=True)
class GridLines:
    """Printed grid: vertical lines at ``u_positions`` and horizontal lines at ``v_positions`` (pixels)."""

    u_positions: Sequence[float]
    v_positions: Sequence[float]
    colour: str = "#e8a48c"
    width_px: float = 1.0


@dataclass(frozen=True)
class CircleGrid:
    """Printed circular-chart grid: circles of the given radii and radial lines at the given angles."""

    centre_uv: tuple[float, float]
    radii_px: Sequence[float]
    angles_deg: Sequence[float]
    radius_range_px: tuple[float, float]
    colour: str = "#9cc59a"
    width_px: float = 1.0


@dataclass(frozen=True)
class InkBlot:
    """A filled disc of ink (pixels)."""

    centre_uv: tuple[float, float]
    radius_px: float
    colour: str


@dataclass
class _Canvas:
    figure: Figure
    canvas: FigureCanvasAgg
    axes: object = field(repr=False)


def _new_canvas(width_px: int, height_px: int, paper: str) -> _Canvas:
    dpi = 100
    figure = Figure(figsize=(width_px / dpi, height_px / dpi), dpi=dpi, facecolor=paper)
    canvas = FigureCanvasAgg(figure)
    axes = figure.add_axes((0.0, 0.0, 1.0, 1.0))
    axes.set_xlim(0, width_px)
    axes.set_ylim(height_px, 0)  # v down
    axes.set_axis_off()
    axes.set_facecolor(paper)
    return _Canvas(figure, canvas, axes)


def _points_per_pixel(dpi: float = 100.0) -> float:
    return 72.0 / dpi


def _draw_grid(axes: object, grid: GridLines, width_px: int, height_px: int) -> None:
    line_width = grid.width_px * _points_per_pixel()
    for u in grid.u_positions:
        axes.plot([u, u], [0, height_px], color=grid.colour, lw=line_width, snap=False)  # type: ignore[attr-defined]
    for v in grid.v_positions:
        axes.plot([0, width_px], [v, v], color=grid.colour, lw=line_width, snap=False)  # type: ignore[attr-defined]


def _draw_circle_grid(axes: object, grid: CircleGrid) -> None:
    line_width = grid.width_px * _points_per_pixel()
    cu, cv = grid.centre_uv
    theta = np.linspace(0.0, 2.0 * np.pi, 2000)
    for radius in grid.radii_px:
        axes.plot(
            cu + radius * np.cos(theta),
            cv + radius * np.sin(theta),
            color=grid.colour,  # type: ignore[attr-defined]
            lw=line_width,
            snap=False,
        )
    for angle in np.radians(np.asarray(grid.angles_deg, float)):
        radii = np.asarray(grid.radius_range_px, float)
        axes.plot(
            cu + radii * np.cos(angle),
            cv + radii * np.sin(angle),
            color=grid.colour,  # type: ignore[attr-defined]
            lw=line_width,
            snap=False,
        )


def render_sheet(
    *,
    width_px: int,
    height_px: int,
    strokes: Sequence[PenStroke],
    grid: GridLines | CircleGrid | None = None,
    blots: Sequence[InkBlot] = (),
    paper: str = PAPER_WHITE,
) -> NDArray[np.uint8]:
    """Render grid, pen strokes (in order: later ones on top) and ink blots into an (H, W, 3) uint8 array."""
    drawing = _new_canvas(width_px, height_px, paper)
    axes = drawing.axes
    if isinstance(grid, GridLines):
        _draw_grid(axes, grid, width_px, height_px)
    elif isinstance(grid, CircleGrid):
        _draw_circle_grid(axes, grid)
    for stroke in strokes:
        points = stroke.drawn_points()
        axes.plot(
            points[:, 0],
            points[:, 1],
            color=stroke.colour,  # type: ignore[attr-defined]
            lw=stroke.width_px * _points_per_pixel(),
            snap=False,
            solid_capstyle="butt",
            solid_joinstyle="round",
            antialiased=True,
        )
    for blot in blots:
        axes.add_patch(Circle(blot.centre_uv, blot.radius_px, color=blot.colour, lw=0, zorder=3))  # type: ignore[attr-defined]
    drawing.canvas.draw()
    rgba = np.asarray(drawing.canvas.buffer_rgba())
    assert rgba.shape == (height_px, width_px, 4)
    return np.ascontiguousarray(rgba[:, :, :3])


def jpeg_roundtrip(image: NDArray[np.uint8], *, quality: int = 75) -> NDArray[np.uint8]:
    """Compress and decompress with Pillow's JPEG codec (default 4:2:0 chroma subsampling)."""
    buffer = io.BytesIO()
    Image.fromarray(image).save(buffer, format="JPEG", quality=quality)
    buffer.seek(0)
    with Image.open(buffer) as decoded:
        return np.asarray(decoded.convert("RGB")).copy()


def rotation_about(angle_deg: float, centre_uv: tuple[float, float]) -> Callable[[FloatArray], FloatArray]:
    """Map (n, 2) pixel points by a rotation of ``angle_deg`` clockwise on the screen about ``centre_uv``."""
    theta = np.radians(angle_deg)
    matrix = np.array([[np.cos(theta), -np.sin(theta)], [np.sin(theta), np.cos(theta)]])
    centre = np.asarray(centre_uv, float)

    def apply(points_uv: FloatArray) -> FloatArray:
        return (np.asarray(points_uv, float) - centre) @ matrix.T + centre

    return apply


def rotate_image(
    image: NDArray[np.uint8], *, angle_deg: float, paper: str = PAPER_WHITE
) -> tuple[NDArray[np.uint8], Callable[[FloatArray], FloatArray]]:
    """Rotate a sheet about its centre (clockwise on the screen, bilinear) as a scanner skew would.

    Returns the rotated image and the function mapping truth points of the original to the rotated sheet.
    """
    height, width = image.shape[:2]
    forward = rotation_about(angle_deg, (width / 2.0, height / 2.0))
    theta = np.radians(angle_deg)
    inverse = np.array([[np.cos(theta), np.sin(theta)], [-np.sin(theta), np.cos(theta)]])
    # Output index (row, col) is the point (u, v) = (col + 0.5, row + 0.5); sample the input at the
    # inverse-rotated point, converted back to input (row, col) indices.
    centre_rc = np.array([height / 2.0 - 0.5, width / 2.0 - 0.5])
    matrix_rc = inverse[::-1, ::-1]
    offset = centre_rc - matrix_rc @ centre_rc
    paper_rgb = np.array([int(paper[k : k + 2], 16) for k in (1, 3, 5)])
    channels = [
        ndimage.affine_transform(
            image[:, :, k].astype(np.float64),
            matrix_rc,
            offset=offset,
            order=1,
            mode="constant",
            cval=float(paper_rgb[k]),
        )
        for k in range(3)
    ]
    rotated = np.clip(np.rint(np.stack(channels, axis=-1)), 0, 255).astype(np.uint8)
    return rotated, forward


def distance_to_polyline(points_uv: FloatArray, polyline_uv: FloatArray) -> FloatArray:
    """Perpendicular distance (px) from each point to a dense polyline (exact point-to-segment distance
    to the segments next to the nearest polyline vertex)."""
    polyline = np.asarray(polyline_uv, float)
    points = np.asarray(points_uv, float)
    nearest = cKDTree(polyline).query(points)[1]
    best = np.full(len(points), np.inf)
    for shift in (-1, 0):
        start = np.clip(nearest + shift, 0, len(polyline) - 2)
        a, b = polyline[start], polyline[start + 1]
        along = np.clip(np.sum((points - a) * (b - a), axis=1) / np.sum((b - a) ** 2, axis=1), 0.0, 1.0)
        foot = a + along[:, None] * (b - a)
        best = np.minimum(best, np.hypot(*(points - foot).T))
    return best


def rgb_of(colour: str) -> tuple[int, int, int]:
    """'#rrggbb' -> (r, g, b) 8-bit, for tests that need the numeric pen colour."""
    return int(colour[1:3], 16), int(colour[3:5], 16), int(colour[5:7], 16)
