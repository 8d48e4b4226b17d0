"""Aged paper, ink and the scanner: tint, mottling, stains, foxing, blur and noise, in numpy and scipy.

Images are float32 arrays (H, W, 3) of reflectance in [0, 1] (sRGB-encoded values, as the scan will hold).
Ink is applied by multiplication, as dye on paper absorbs light: a pen line on yellowed paper comes out a
little yellower than the ink itself, as on a real scan.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import NDArray
from scipy import ndimage

Image = NDArray[np.float32]
Layer = NDArray[np.float32]
Colour = tuple[float, float, float]

COFFEE: Colour = (0.62, 0.42, 0.22)
FOXING: Colour = (0.70, 0.52, 0.32)


def hex_colour(text: str) -> Colour:
    """'#rrggbb' -> (r, g, b) on 0-1."""
    value = text.lstrip("#")
    return (int(value[0:2], 16) / 255.0, int(value[2:4], 16) / 255.0, int(value[4:6], 16) / 255.0)


def smooth_noise(shape: tuple[int, int], *, rng: np.random.Generator, scale_px: float) -> Layer:
    """Zero-mean, unit-spread noise with features about ``scale_px`` across (computed at a coarse size)."""
    step = max(1, int(scale_px / 4))
    coarse = rng.standard_normal((shape[0] // step + 2, shape[1] // step + 2))
    coarse = ndimage.gaussian_filter(coarse, sigma=max(scale_px / step / 2.0, 0.5))
    zoomed = ndimage.zoom(coarse, step, order=1)[: shape[0], : shape[1]]
    spread = float(zoomed.std()) or 1.0
    return np.asarray((zoomed - zoomed.mean()) / spread, dtype=np.float32)


def paper_background(shape: tuple[int, int], *, tint: Colour, rng: np.random.Generator, mottle: float = 0.02) -> Image:
    """Paper of colour ``tint`` with large, faint mottling and a fine fibre grain."""
    large = smooth_noise(shape, rng=rng, scale_px=max(shape) / 8)
    grain = rng.standard_normal(shape).astype(np.float32) * 0.006
    shade = 1.0 + mottle * large + grain
    return np.clip(np.asarray(tint, dtype=np.float32)[None, None, :] * shade[..., None], 0.0, 1.0)


def apply_ink(image: Image, coverage: Layer, colour: Colour, *, opacity: float | Layer = 1.0) -> None:
    """Lay ink of ``colour`` where ``coverage`` > 0 (multiplicative, in place)."""
    alpha = (coverage * opacity)[..., None]
    ink = np.asarray(colour, dtype=np.float32)[None, None, :]
    image *= 1.0 - alpha + alpha * ink


def ink_flow(shape: tuple[int, int], *, rng: np.random.Generator, variation: float = 0.08) -> Layer:
    """Opacity of a pen along its line: mostly full, fading a little where the ink ran thin."""
    return np.asarray(
        np.clip(0.95 + variation * smooth_noise(shape, rng=rng, scale_px=60.0), 0.6, 1.0), dtype=np.float32
    )


def add_stain(
    image: Image,
    *,
    centre_uv: tuple[float, float],
    radius_px: float,
    rng: np.random.Generator,
    strength: float = 0.35,
    colour: Colour = COFFEE,
) -> None:
    """A cup ring: a faint wash inside and a darker, ragged rim where the liquid dried (in place)."""
    height, width = image.shape[:2]
    reach = radius_px * 1.3
    u0, v0 = max(0, int(centre_uv[0] - reach)), max(0, int(centre_uv[1] - reach))
    u1, v1 = min(width, int(centre_uv[0] + reach)), min(height, int(centre_uv[1] + reach))
    if u1 <= u0 or v1 <= v0:
        return
    vv, uu = np.mgrid[v0:v1, u0:u1].astype(np.float64)
    du, dv = uu + 0.5 - centre_uv[0], vv + 0.5 - centre_uv[1]
    angle = np.arctan2(dv, du)
    wobble = sum(rng.normal(0.0, 0.03) * np.cos(k * angle + rng.uniform(0, 2 * math.pi)) for k in range(2, 7))
    relative = np.hypot(du, dv) / (radius_px * (1.0 + wobble))
    rim = np.exp(-(((relative - 1.0) / 0.025) ** 2))
    wash = 0.25 * np.clip(1.0 - relative, 0.0, 1.0) ** 0.3
    alpha = (strength * np.clip(rim + wash, 0.0, 1.0)).astype(np.float32)
    window = image[v0:v1, u0:u1]
    apply_ink(window, alpha, colour)


def add_foxing(image: Image, *, rng: np.random.Generator, count: int, size_px: float) -> None:
    """Small brown age spots scattered over the sheet (in place)."""
    height, width = image.shape[:2]
    for _ in range(count):
        centre = (rng.uniform(0, width), rng.uniform(0, height))
        radius = size_px * rng.uniform(0.4, 1.2)
        add_stain(image, centre_uv=centre, radius_px=radius, rng=rng, strength=0.12, colour=FOXING)


def darken_edges(image: Image, paper: Layer, *, band_px: float, amount: float = 0.06) -> None:
    """Paper yellows and greys towards its edges, where light and handling reached it (in place)."""
    distance = ndimage.distance_transform_edt(paper > 0.5).astype(np.float32)
    fade = amount * np.exp(-distance / band_px)
    image *= (1.0 - fade[..., None] * np.array([1.0, 1.3, 2.2], dtype=np.float32)).clip(0.0, 1.0)


def on_scanner_bed(image: Image, paper: Layer, *, bed: Colour, shadow_px: float) -> None:
    """Show the scanner lid where there is no paper, with a soft shadow along the paper's edge (in place)."""
    shadow = ndimage.gaussian_filter(paper, sigma=shadow_px)
    bed_image = np.asarray(bed, dtype=np.float32)[None, None, :] * (1.0 - 0.25 * shadow[..., None])
    alpha = paper[..., None]
    image[...] = image * alpha + bed_image * (1.0 - alpha)


def scanner_finish(image: Image, *, rng: np.random.Generator, blur_px: float, noise: float) -> NDArray[np.uint8]:
    """The scanner's optics and sensor: a slight blur and per-pixel noise, then 8-bit values."""
    blurred = ndimage.gaussian_filter(image, sigma=(blur_px, blur_px, 0.0)) if blur_px > 0 else image
    noisy = blurred + rng.normal(0.0, noise, size=image.shape).astype(np.float32)
    return np.asarray(np.clip(np.rint(noisy * 255.0), 0, 255), dtype=np.uint8)
