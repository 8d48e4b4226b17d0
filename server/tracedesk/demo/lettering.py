"""Printed labels and handwriting-like notes on a chart, drawn with Pillow into a coverage layer.

Text is decoration (nothing is digitized from it), so it is drawn in the paper frame and carried into the
scan frame with the rest of the paper by resampling (see :mod:`tracedesk.demo.warp`).
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np
from numpy.typing import NDArray
from PIL import Image, ImageDraw, ImageFont

Layer = NDArray[np.float32]
# Slant of the handwriting (u shift per px of height) and the spread of its letters (fractions of the size).
HAND_SLANT = 0.28
HAND_JITTER = 0.06


@lru_cache(maxsize=64)
def _font(size_px: int) -> ImageFont.FreeTypeFont | ImageFont.ImageFont:
    return ImageFont.load_default(size=max(4, size_px))


def _text_patch(text: str, size_px: float, anchor: str) -> Image.Image:
    """The text drawn white on black, with its anchor point at the patch centre."""
    font = _font(round(size_px))
    left, top, right, bottom = font.getbbox(text)
    half = int(max(right - left, bottom - top, 1) + size_px) + 4
    patch = Image.new("L", (2 * half, 2 * half), 0)
    ImageDraw.Draw(patch).text((half, half), text, fill=255, font=font, anchor=anchor)
    return patch


def _paste_max(layer: Layer, patch: Image.Image, centre_uv: tuple[float, float], strength: float) -> None:
    values = np.asarray(patch, dtype=np.float32) * (strength / 255.0)
    height, width = values.shape
    u0 = round(centre_uv[0] - width / 2.0)
    v0 = round(centre_uv[1] - height / 2.0)
    lu, lv = max(0, u0), max(0, v0)
    hu, hv = min(layer.shape[1], u0 + width), min(layer.shape[0], v0 + height)
    if hu <= lu or hv <= lv:
        return
    part = values[lv - v0 : hv - v0, lu - u0 : hu - u0]
    np.maximum(layer[lv:hv, lu:hu], part, out=layer[lv:hv, lu:hu])


def draw_text(
    layer: Layer,
    text: str,
    *,
    at_uv: tuple[float, float],
    size_px: float,
    anchor: str = "mm",
    angle_deg: float = 0.0,
    slant: float = 0.0,
    strength: float = 1.0,
) -> None:
    """Draw ``text`` with its ``anchor`` (Pillow anchor codes) at ``at_uv`` (px), turned ``angle_deg``
    clockwise on the screen and slanted by ``slant`` (u shift per px of height)."""
    patch = _text_patch(text, size_px, anchor)
    if slant:
        half = patch.height / 2.0
        patch = patch.transform(
            patch.size, Image.Transform.AFFINE, (1.0, slant, -slant * half, 0.0, 1.0, 0.0), Image.Resampling.BILINEAR
        )
    if angle_deg:
        patch = patch.rotate(-angle_deg, resample=Image.Resampling.BILINEAR)
    _paste_max(layer, patch, at_uv, strength)


def draw_handwriting(
    layer: Layer,
    text: str,
    *,
    at_uv: tuple[float, float],
    size_px: float,
    rng: np.random.Generator,
    angle_deg: float = 0.0,
) -> None:
    """A hand-written note: slanted letters, each nudged a little off the line, left-aligned at ``at_uv``."""
    font = _font(round(size_px))
    advance = 0.0
    turn = math.radians(angle_deg)
    for letter in text:
        width = font.getlength(letter)
        if letter.strip():
            du, dv = rng.normal(0.0, HAND_JITTER * size_px, size=2)
            along = advance + width / 2.0 + du
            centre = (
                at_uv[0] + along * math.cos(turn) - dv * math.sin(turn),
                at_uv[1] + along * math.sin(turn) + dv * math.cos(turn),
            )
            wobble = angle_deg + float(rng.normal(0.0, 4.0))
            draw_text(layer, letter, at_uv=centre, size_px=size_px, angle_deg=wobble, slant=HAND_SLANT, strength=0.9)
        advance += width * 0.96
