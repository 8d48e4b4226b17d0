"""Colour science: sRGB -> CIE XYZ -> CIELAB (D65) and colour differences (CIE76, CIEDE2000).

All conversions are vectorised over leading axes: the last axis holds the three components.

References
----------
IEC 61966-2-1:1999 (sRGB transfer function, primaries and D65 white).
CIE 15:2004 Colorimetry (CIELAB, CIE76 colour difference).
G. Sharma, W. Wu, E. N. Dalal, "The CIEDE2000 colour-difference formula: implementation notes,
supplementary test data, and mathematical observations", Color Res. Appl. 30(1):21-30, 2005.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

from tracedesk.science.errors import ScienceInputError

FloatArray = NDArray[np.float64]

# Chromaticities of the sRGB primaries and of the D65 white point (IEC 61966-2-1).
_PRIMARIES_XY = np.array([[0.64, 0.33], [0.30, 0.60], [0.15, 0.06]])
_D65_XY = np.array([0.3127, 0.3290])

_HEX_COLOUR = re.compile(r"^#([0-9a-fA-F]{2})([0-9a-fA-F]{2})([0-9a-fA-F]{2})$")


def _xy_to_xyz(xy: FloatArray) -> FloatArray:
    """Chromaticity (x, y) -> tristimulus (X, Y=1, Z)."""
    x, y = xy[..., 0], xy[..., 1]
    return np.stack([x / y, np.ones_like(x), (1.0 - x - y) / y], axis=-1)


def _srgb_matrix() -> tuple[FloatArray, FloatArray]:
    """Linear-sRGB -> XYZ matrix and the D65 white (Y = 1), derived from the chromaticities."""
    primaries = _xy_to_xyz(_PRIMARIES_XY).T  # columns are the primaries
    white = _xy_to_xyz(_D65_XY)
    # Scale each primary so that R = G = B = 1 gives the white point exactly.
    scale = np.linalg.solve(primaries, white)
    return primaries * scale, white


SRGB_TO_XYZ, D65_WHITE_XYZ = _srgb_matrix()


def parse_hex_colour(text: str) -> NDArray[np.uint8]:
    """Parse ``"#rrggbb"`` (case-insensitive) into an 8-bit sRGB triple.

    Parameters
    ----------
    text : str
        Colour written as ``#`` and six hexadecimal digits.

    Returns
    -------
    numpy.ndarray of uint8, shape (3,)
        Red, green, blue in 8-bit code values (0-255).
    """
    match = _HEX_COLOUR.match(text.strip())
    if match is None:
        raise ScienceInputError(f"colour {text!r} is not of the form '#rrggbb'")
    return np.array([int(group, 16) for group in match.groups()], dtype=np.uint8)


def srgb_to_unit_float(rgb: ArrayLike) -> FloatArray:
    """Read sRGB code values as floats in [0, 1].

    Integer input (any integer dtype) is taken as 8-bit code values 0-255; floating input is taken
    as already scaled to [0, 1].
    """
    values = np.asarray(rgb)
    if np.issubdtype(values.dtype, np.integer):
        if values.size and (values.min() < 0 or values.max() > 255):
            raise ScienceInputError("integer sRGB values must be 8-bit code values in 0..255")
        return values.astype(np.float64) / 255.0
    if np.issubdtype(values.dtype, np.floating):
        if not np.all(np.isfinite(values)):
            raise ScienceInputError("sRGB values must be finite")
        return values.astype(np.float64)
    raise ScienceInputError(f"sRGB values must be 8-bit integers or floats in [0, 1], got {values.dtype}")


def srgb_to_linear(rgb: ArrayLike) -> FloatArray:
    """Undo the sRGB transfer function (IEC 61966-2-1): code values -> linear light in [0, 1].

    Elementwise, any shape; integers are 8-bit code values, floats are in [0, 1].
    """
    encoded = srgb_to_unit_float(rgb)
    return np.where(
        encoded <= 0.04045,
        encoded / 12.92,
        ((np.maximum(encoded, 0.04045) + 0.055) / 1.055) ** 2.4,
    )


def srgb_to_xyz(rgb: ArrayLike) -> FloatArray:
    """sRGB -> CIE XYZ (D65 white, Y of white = 1).

    Parameters
    ----------
    rgb : array_like, shape (..., 3)
        uint8 (or other integer) code values 0-255, or floats in [0, 1].

    Returns
    -------
    numpy.ndarray, shape (..., 3)
        Tristimulus values X, Y, Z (relative, white Y = 1).
    """
    linear = srgb_to_linear(rgb)
    if linear.ndim == 0 or linear.shape[-1] != 3:
        raise ScienceInputError(f"sRGB colours need a last axis of length 3, got shape {linear.shape}")
    return linear @ SRGB_TO_XYZ.T


def _lab_f(t: FloatArray) -> FloatArray:
    """CIELAB companding function with its linear segment near black (CIE 15:2004)."""
    delta = 6.0 / 29.0
    return np.where(t > delta**3, np.cbrt(t), t / (3.0 * delta**2) + 4.0 / 29.0)


def xyz_to_lab(xyz: ArrayLike, *, white_xyz: ArrayLike = D65_WHITE_XYZ) -> FloatArray:
    """CIE XYZ -> CIELAB (L* 0-100, a*, b*) relative to ``white_xyz`` (default D65, Y = 1)."""
    ratios = np.asarray(xyz, dtype=np.float64) / np.asarray(white_xyz, dtype=np.float64)
    fx, fy, fz = (_lab_f(ratios[..., k]) for k in range(3))
    return np.stack([116.0 * fy - 16.0, 500.0 * (fx - fy), 200.0 * (fy - fz)], axis=-1)


def srgb_to_lab(rgb: ArrayLike) -> FloatArray:
    """sRGB -> CIELAB (D65).

    Parameters
    ----------
    rgb : array_like, shape (..., 3)
        uint8 (or other integer) code values 0-255, or floats in [0, 1].

    Returns
    -------
    numpy.ndarray, shape (..., 3)
        L* (0-100), a*, b* (CIELAB units).
    """
    return xyz_to_lab(srgb_to_xyz(rgb))


def colour_to_lab(colour: str | Sequence[float] | ArrayLike, *, space: Literal["srgb", "lab"] = "srgb") -> FloatArray:
    """Read one colour given as ``"#rrggbb"``, an sRGB triple or a CIELAB triple.

    Parameters
    ----------
    colour : str or sequence of 3 floats
        ``"#rrggbb"``; or three numbers: sRGB on the 8-bit scale 0-255 (fractions allowed, e.g. the
        mean of pixels sampled from a scan) when ``space="srgb"``, or L*, a*, b* when ``space="lab"``.
    space : {"srgb", "lab"}
        How to read a numeric triple (ignored for strings).

    Returns
    -------
    numpy.ndarray, shape (3,)
        The colour in CIELAB (D65).
    """
    if isinstance(colour, str):
        return srgb_to_lab(parse_hex_colour(colour))
    triple = np.asarray(colour, dtype=np.float64)
    if triple.shape != (3,) or not np.all(np.isfinite(triple)):
        raise ScienceInputError(f"a colour triple needs three finite numbers, got {colour!r}")
    if space == "lab":
        if not 0.0 <= triple[0] <= 100.0:
            raise ScienceInputError(f"L* must lie in 0..100, got {triple[0]:g}")
        return triple
    if space != "srgb":
        raise ScienceInputError(f"colour space must be 'srgb' or 'lab', got {space!r}")
    if triple.min() < 0.0 or triple.max() > 255.0:
        raise ScienceInputError("an sRGB triple must be on the 8-bit scale 0..255")
    return srgb_to_lab(triple / 255.0)


def delta_e_cie76(lab1: ArrayLike, lab2: ArrayLike) -> FloatArray:
    """CIE76 colour difference: Euclidean distance in CIELAB (CIE 15:2004).

    Parameters
    ----------
    lab1, lab2 : array_like, shape (..., 3)
        CIELAB colours; broadcast against each other.

    Returns
    -------
    numpy.ndarray, shape (...)
        Delta E*ab (CIELAB units).
    """
    difference = np.asarray(lab1, dtype=np.float64) - np.asarray(lab2, dtype=np.float64)
    return np.asarray(np.sqrt(np.sum(difference**2, axis=-1)), dtype=np.float64)


def _primed_chroma_hue(lab: FloatArray, g_factor: FloatArray) -> tuple[FloatArray, FloatArray]:
    """Chroma C' and hue angle h' (degrees in [0, 360)) after the a* rescaling of CIEDE2000."""
    a_primed = (1.0 + g_factor) * lab[..., 1]
    chroma = np.hypot(a_primed, lab[..., 2])
    # atan2(0, 0) is 0 in numpy, which is the convention Sharma et al. (2005) ask for.
    hue = np.degrees(np.arctan2(lab[..., 2], a_primed)) % 360.0
    return chroma, hue


def _hue_difference_and_mean(
    hue1: FloatArray, hue2: FloatArray, chroma_product: FloatArray
) -> tuple[FloatArray, FloatArray]:
    """Hue difference dh' and mean hue, both in degrees, with the 180-degree wrap rules."""
    difference = hue2 - hue1
    difference = np.where(difference > 180.0, difference - 360.0, difference)
    difference = np.where(difference < -180.0, difference + 360.0, difference)
    total = hue1 + hue2
    far_apart = np.abs(hue1 - hue2) > 180.0
    mean = np.where(far_apart, np.where(total < 360.0, total + 360.0, total - 360.0), total) / 2.0
    achromatic = chroma_product == 0.0
    # With a zero chroma the hue is undefined: no hue difference, mean is the sum (Sharma et al.).
    return np.where(achromatic, 0.0, difference), np.where(achromatic, total, mean)


def delta_e_ciede2000(
    lab1: ArrayLike,
    lab2: ArrayLike,
    *,
    k_lightness: float = 1.0,
    k_chroma: float = 1.0,
    k_hue: float = 1.0,
) -> FloatArray:
    """CIEDE2000 colour difference, following the implementation notes of Sharma, Wu & Dalal (2005).

    Parameters
    ----------
    lab1, lab2 : array_like, shape (..., 3)
        CIELAB colours; broadcast against each other.
    k_lightness, k_chroma, k_hue : float
        Parametric weighting factors (1 for the reference conditions).

    Returns
    -------
    numpy.ndarray, shape (...)
        Delta E00 (CIELAB-like units; about 1 is a just-noticeable difference).
    """
    first, second = np.broadcast_arrays(np.asarray(lab1, np.float64), np.asarray(lab2, np.float64))
    mean_chroma = (np.hypot(first[..., 1], first[..., 2]) + np.hypot(second[..., 1], second[..., 2])) / 2
    seventh = mean_chroma**7
    g_factor = 0.5 * (1.0 - np.sqrt(seventh / (seventh + 25.0**7)))
    chroma1, hue1 = _primed_chroma_hue(first, g_factor)
    chroma2, hue2 = _primed_chroma_hue(second, g_factor)
    hue_step, hue_mean = _hue_difference_and_mean(hue1, hue2, chroma1 * chroma2)
    delta_hue = 2.0 * np.sqrt(chroma1 * chroma2) * np.sin(np.radians(hue_step) / 2.0)
    return _ciede2000_weighted(
        delta_lightness=second[..., 0] - first[..., 0],
        delta_chroma=chroma2 - chroma1,
        delta_hue=delta_hue,
        mean_lightness=(first[..., 0] + second[..., 0]) / 2.0,
        mean_chroma=(chroma1 + chroma2) / 2.0,
        hue_mean=hue_mean,
        k_factors=(k_lightness, k_chroma, k_hue),
    )


def _ciede2000_weighted(
    *,
    delta_lightness: FloatArray,
    delta_chroma: FloatArray,
    delta_hue: FloatArray,
    mean_lightness: FloatArray,
    mean_chroma: FloatArray,
    hue_mean: FloatArray,
    k_factors: tuple[float, float, float],
) -> FloatArray:
    """Weighting functions and rotation term of CIEDE2000 applied to the primed differences."""
    hue_rad = np.radians(hue_mean)
    t_term = (
        1.0
        - 0.17 * np.cos(hue_rad - np.radians(30.0))
        + 0.24 * np.cos(2.0 * hue_rad)
        + 0.32 * np.cos(3.0 * hue_rad + np.radians(6.0))
        - 0.20 * np.cos(4.0 * hue_rad - np.radians(63.0))
    )
    lightness_offset = (mean_lightness - 50.0) ** 2
    weight_l = 1.0 + 0.015 * lightness_offset / np.sqrt(20.0 + lightness_offset)
    weight_c = 1.0 + 0.045 * mean_chroma
    weight_h = 1.0 + 0.015 * mean_chroma * t_term
    seventh = mean_chroma**7
    rotation_angle = np.radians(60.0) * np.exp(-(((hue_mean - 275.0) / 25.0) ** 2))
    rotation = -np.sin(rotation_angle) * 2.0 * np.sqrt(seventh / (seventh + 25.0**7))
    term_l = delta_lightness / (k_factors[0] * weight_l)
    term_c = delta_chroma / (k_factors[1] * weight_c)
    term_h = delta_hue / (k_factors[2] * weight_h)
    squared = term_l**2 + term_c**2 + term_h**2 + rotation * term_c * term_h
    return np.asarray(np.sqrt(np.maximum(squared, 0.0)), dtype=np.float64)
