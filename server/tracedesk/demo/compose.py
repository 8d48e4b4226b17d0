"""Putting a rendered chart together: paper, printed grid, pens, age marks, then the scanner."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from tracedesk.demo.paper import (
    Colour,
    Layer,
    add_foxing,
    add_stain,
    apply_ink,
    darken_edges,
    hex_colour,
    ink_flow,
    on_scanner_bed,
    paper_background,
    scanner_finish,
)


@dataclass(frozen=True)
class InkLayer:
    """Coverage (H, W) in [0, 1] of one ink, its colour ``#rrggbb`` and how it was laid down."""

    coverage: Layer
    colour: str
    opacity: float = 1.0
    uneven: bool = False  # pens: the ink flow varies along the line


@dataclass(frozen=True)
class Stain:
    """A cup ring at a fraction (0-1) of the sheet's width and height, radius in mm."""

    at: tuple[float, float]
    radius_mm: float
    strength: float = 0.3


@dataclass(frozen=True)
class Ageing:
    """How the sheet aged and how it was scanned."""

    tint: Colour = (0.955, 0.925, 0.835)
    mottle: float = 0.025
    stains: tuple[Stain, ...] = field(default=())
    foxing_spots: int = 12
    bed: Colour = (0.80, 0.80, 0.78)
    blur_px_at_200dpi: float = 0.55
    noise: float = 0.012


def compose_scan(
    *,
    paper: Layer,
    inks: list[InkLayer],
    ageing: Ageing,
    dpi: float,
    rng: np.random.Generator,
) -> NDArray[np.uint8]:
    """The scan (H, W, 3 uint8 sRGB) of paper (coverage of the sheet in the scan frame) with its inks."""
    shape = (paper.shape[0], paper.shape[1])
    mm = dpi / 25.4
    image = paper_background(shape, tint=ageing.tint, rng=rng, mottle=ageing.mottle)
    darken_edges(image, paper, band_px=6.0 * mm)
    add_foxing(image, rng=rng, count=ageing.foxing_spots, size_px=0.8 * mm)
    for ink in inks:
        opacity = ink_flow(shape, rng=rng) * ink.opacity if ink.uneven else ink.opacity
        apply_ink(image, ink.coverage, hex_colour(ink.colour), opacity=opacity)
    for stain in ageing.stains:
        centre = (stain.at[0] * shape[1], stain.at[1] * shape[0])
        add_stain(image, centre_uv=centre, radius_px=stain.radius_mm * mm, rng=rng, strength=stain.strength)
    on_scanner_bed(image, paper, bed=ageing.bed, shadow_px=1.5 * mm)
    return scanner_finish(image, rng=rng, blur_px=ageing.blur_px_at_200dpi * dpi / 200.0, noise=ageing.noise)
