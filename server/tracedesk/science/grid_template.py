"""Identify printed grid lines on a profile: the spec's lines as a template, matched by scale and offset.

A spec axis prints its lines at known chart coordinates; across the sheet they land at
``x_k = offset + span * p_k`` profile bins, where ``p_k`` in [0, 1] is line k's fraction of the frame
(chart coordinates are linear on paper for every scale) and ``span`` the frame's length in bins. On a
sheet turned by 180 degrees (or a mirrored axis) the fractions run backwards: ``1 - p_k``.

The match score of (span, offset) on a normalised profile P (lines as peaks in [0, 1]) is the weighted
mean of P at the lines minus the mean of P half-way between neighbouring lines, where no line should
be: 1 for a perfect print, about 0 for noise. A template that is too fine puts its midpoints on lines,
one that is too coarse misses lines; major lines (weight 1.5) fix which line is which when they are
printed heavier. The search is exhaustive: every span from ``min_span`` to ``max_span`` in half-bin
steps, every offset, as one batch of FFT correlations on a profile decimated to <= 512 bins; the best
candidates are refined at full resolution.

:func:`check_match` then counts how many of the spec's lines have a peak, how many peaks are not the
spec's lines, and whether the lines go on past the frame: the evidence for refusing a sheet that is not
the spec's chart.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Final

import numpy as np
from numpy.typing import NDArray

from tracedesk.science.grid_lines import profile_peaks
from tracedesk.science.grid_spec import AxisGridSpec

FloatArray = NDArray[np.float64]
BoolArray = NDArray[np.bool_]

MAJOR_WEIGHT: Final = 1.5
DECIMATED_BINS: Final = 512
CANDIDATES: Final = 6
EXTENSION_LINES: Final = 3
PEAK_HEIGHT: Final = 0.2


@dataclass(frozen=True)
class LineTemplate:
    """The printed lines of one axis as fractions of the frame.

    Attributes
    ----------
    values : ndarray
        Axis values of the lines, ascending.
    major : ndarray of bool
        Which lines are major.
    fraction : ndarray
        Each line's position as a fraction of the frame (0 at frame[0], 1 at frame[1]).
    midpoints : ndarray
        Fractions half-way between neighbouring lines.
    beyond_lines, beyond_midpoints : ndarray
        Fractions (< 0 or > 1) where the spec's rule would put up to three more lines past each end of
        the frame, and their midpoints: grid seen there means the sheet is not this chart.
    """

    values: FloatArray
    major: BoolArray
    fraction: FloatArray
    midpoints: FloatArray
    beyond_lines: FloatArray
    beyond_midpoints: FloatArray

    @property
    def weights(self) -> FloatArray:
        """Weight of each line in the match score: 1.5 for major lines (when some are major), else 1."""
        return np.where(self.major, MAJOR_WEIGHT, 1.0) if self.major.any() and not self.major.all() else np.ones(
            self.major.shape
        )


def _extended_axis(axis: AxisGridSpec) -> AxisGridSpec:
    """The axis with its frame widened by three lines on each side (as far as the scale allows)."""
    if axis.scale == "log10":
        return replace(axis, frame=(axis.frame[0] / 10.0, axis.frame[1] * 10.0))
    assert axis.minor_step is not None
    low = axis.frame[0] - EXTENSION_LINES * axis.minor_step
    if axis.scale == "sqrt":
        low = max(low, axis.frame[0] - axis.minor_step * math.floor(axis.frame[0] / axis.minor_step + 1e-9))
    return replace(axis, frame=(low, axis.frame[1] + EXTENSION_LINES * axis.minor_step))


def line_template(axis: AxisGridSpec) -> LineTemplate:
    """The template of an axis' printed lines (see :class:`LineTemplate`)."""
    chart, major = axis.line_chart_coordinates()
    scale = axis.axis_scale()
    ends = scale.values_to_chart(np.array(axis.frame))
    fraction = (chart - ends[0]) / (ends[1] - ends[0])
    values, _ = axis.line_values()
    extended_values, _ = _extended_axis(axis).line_values()
    extended = (scale.values_to_chart(extended_values) - ends[0]) / (ends[1] - ends[0])
    below = np.sort(extended[extended < -1e-9])[-EXTENSION_LINES:]
    above = np.sort(extended[extended > 1 + 1e-9])[:EXTENSION_LINES]
    below_mid = 0.5 * (np.append(below, 0.0)[1:] + below) if below.size else below
    above_mid = 0.5 * (np.insert(above, 0, 1.0)[:-1] + above) if above.size else above
    return LineTemplate(
        values=values,
        major=major,
        fraction=fraction,
        midpoints=0.5 * (fraction[1:] + fraction[:-1]),
        beyond_lines=np.concatenate([below, above]),
        beyond_midpoints=np.concatenate([below_mid, above_mid]),
    )


@dataclass(frozen=True)
class TemplateMatch:
    """Where a template sits on a profile.

    Attributes
    ----------
    span : float
        Length of the frame (bins) from the first to the last line.
    offset : float
        Bin of fraction 0 (frame[0]) when upright, of fraction 1 when ``flipped``.
    flipped : bool
        Lines in reverse order along the profile (frame[1] at the low end).
    score : float
        Match score (module docstring).
    """

    span: float
    offset: float
    flipped: bool
    score: float

    def bins_of(self, fraction: FloatArray) -> FloatArray:
        """Profile bins of template fractions."""
        fraction = np.asarray(fraction, dtype=np.float64)
        return self.offset + self.span * (1.0 - fraction if self.flipped else fraction)


def _interpolate(profile: FloatArray, x: FloatArray) -> FloatArray:
    """Linear interpolation of the profile at bins x; 0 outside."""
    return np.interp(x, np.arange(profile.size, dtype=np.float64), profile, left=0.0, right=0.0)


def match_score(profile: FloatArray, template: LineTemplate, match: TemplateMatch) -> float:
    """Score of ``match`` on a normalised profile (module docstring)."""
    weights = template.weights
    on_lines = float(weights @ _interpolate(profile, match.bins_of(template.fraction))) / float(weights.sum())
    if template.midpoints.size == 0:
        return on_lines
    return on_lines - float(np.mean(_interpolate(profile, match.bins_of(template.midpoints))))


def _decimate(profile: FloatArray, factor: int) -> FloatArray:
    padded = np.pad(profile, (0, -profile.size % factor))
    return np.asarray(padded.reshape(-1, factor).mean(axis=1), dtype=np.float64)


def _combs(spans: FloatArray, template: LineTemplate, flipped: bool, size: int) -> FloatArray:
    """One row per span: +weights at the lines, -1/n at the midpoints, split linearly between bins."""
    weights = template.weights / template.weights.sum()
    fractions = np.concatenate([template.fraction, template.midpoints])
    if flipped:
        fractions = 1.0 - fractions
    mid_weight = 1.0 / template.midpoints.size if template.midpoints.size else 0.0
    amounts = np.concatenate([weights, np.full(template.midpoints.size, -mid_weight)])
    position = spans[:, None] * fractions[None, :]
    low = np.floor(position).astype(np.intp)
    upper = position - low
    rows = np.arange(spans.size)[:, None] * size
    combs = np.bincount((rows + low).ravel(), weights=(amounts * (1.0 - upper)).ravel(), minlength=spans.size * size)
    combs += np.bincount((rows + low + 1).ravel(), weights=(amounts * upper).ravel(), minlength=spans.size * size)
    return combs.reshape(spans.size, size)


def _coarse_candidates(
    profile: FloatArray, template: LineTemplate, flipped: bool, span_range: tuple[float, float], factor: int
) -> list[TemplateMatch]:
    """Best (span, offset) pairs on the decimated profile, by FFT correlation, with non-maximum suppression."""
    small = _decimate(profile, factor)
    spans = np.arange(span_range[0] / factor, min(span_range[1] / factor, small.size - 2.0) + 1e-9, 0.5)
    if spans.size == 0:
        return []
    size = 1 << int(math.ceil(math.log2(2 * small.size + 2)))
    spectrum = np.fft.rfft(small, size)
    scores = np.fft.irfft(np.conj(np.fft.rfft(_combs(spans, template, flipped, size), axis=1)) * spectrum, size, axis=1)
    valid = np.arange(size)[None, :] <= (small.size - 2.0 - spans)[:, None]
    scores = np.where(valid, scores, -np.inf)
    found: list[TemplateMatch] = []
    for _ in range(CANDIDATES):
        i, b = np.unravel_index(int(np.argmax(scores)), scores.shape)
        if not math.isfinite(float(scores[i, b])):
            break
        found.append(TemplateMatch(float(spans[i]) * factor, float(b) * factor, flipped, float(scores[i, b])))
        scores[max(0, i - 2) : i + 3, max(0, b - 1) : b + 2] = -np.inf
    return found


def refine_match(
    profile: FloatArray, template: LineTemplate, start: TemplateMatch, *, span_bins: float, offset_bins: float
) -> TemplateMatch:
    """Best score near ``start`` on the full profile: spans and offsets within +-the given bins, 0.25-bin steps."""
    span_steps = start.span + np.arange(-span_bins, span_bins + 1e-9, 0.25)
    offset_steps = start.offset + np.arange(-offset_bins, offset_bins + 1e-9, 0.25)
    spans, offsets = np.meshgrid(span_steps, offset_steps, indexing="ij")
    spans, offsets = spans.ravel(), offsets.ravel()
    weights = template.weights / template.weights.sum()
    line_fraction = 1.0 - template.fraction if start.flipped else template.fraction
    mid_fraction = 1.0 - template.midpoints if start.flipped else template.midpoints
    on_lines = _interpolate(profile, offsets[:, None] + spans[:, None] * line_fraction[None, :]) @ weights
    score = on_lines
    if mid_fraction.size:
        score = score - _interpolate(profile, offsets[:, None] + spans[:, None] * mid_fraction[None, :]).mean(axis=1)
    best = int(np.argmax(score))
    return TemplateMatch(float(spans[best]), float(offsets[best]), start.flipped, float(score[best]))


def search_template(
    profile: FloatArray, template: LineTemplate, *, flipped: bool, span_range: tuple[float, float]
) -> list[TemplateMatch]:
    """Candidate placements of the template on a normalised profile, best first.

    Parameters
    ----------
    profile : ndarray
        Normalised profile (lines as peaks in [0, 1]).
    template : LineTemplate
        The spec axis' lines.
    flipped : bool
        Try the lines in reverse order (a sheet turned by 180 degrees).
    span_range : (float, float)
        Smallest and largest frame length (bins) to try.
    """
    factor = max(1, int(math.ceil(profile.size / DECIMATED_BINS)))
    coarse = _coarse_candidates(profile, template, flipped, span_range, factor)
    reach = 1.5 * factor
    refined = [refine_match(profile, template, c, span_bins=reach, offset_bins=reach) for c in coarse]
    return sorted(refined, key=lambda match: -match.score)


@dataclass(frozen=True)
class MatchCheck:
    """Evidence that a matched profile shows the spec's lines and nothing else.

    Attributes
    ----------
    found_fraction : float
        Fraction of the spec's lines with a peak near their place.
    extra_fraction : float
        Fraction of the clear peaks inside the frame that are not near any spec line.
    beyond_ratio : float
        Match score of the would-be lines past the frame relative to the score inside it.
    """

    found_fraction: float
    extra_fraction: float
    beyond_ratio: float


def _nearest_distance(positions: FloatArray, targets: FloatArray) -> FloatArray:
    order = np.sort(targets)
    index = np.clip(np.searchsorted(order, positions), 1, max(1, order.size - 1))
    low, high = order[np.maximum(index - 1, 0)], order[np.minimum(index, order.size - 1)]
    return np.minimum(np.abs(positions - low), np.abs(positions - high))


def _local_spacing(lines: FloatArray) -> FloatArray:
    gaps = np.abs(np.diff(lines))
    if gaps.size == 0:
        return np.full(lines.shape, np.inf)
    return np.minimum(np.append(gaps, gaps[-1]), np.insert(gaps, 0, gaps[0]))


def check_match(profile: FloatArray, template: LineTemplate, match: TemplateMatch) -> MatchCheck:
    """Found, extra and beyond-the-frame evidence of ``match`` (see :class:`MatchCheck`)."""
    lines = match.bins_of(template.fraction)
    spacing = _local_spacing(lines)
    reach = np.maximum(1.0, 0.3 * spacing)
    peaks, heights = profile_peaks(profile, min_height=PEAK_HEIGHT)
    found = _nearest_distance(lines, peaks) <= reach if peaks.size else np.zeros(lines.shape, dtype=bool)
    typical = float(np.median(_interpolate(profile, lines[found]))) if found.any() else 1.0
    low, high = float(lines.min()), float(lines.max())
    inside = (peaks > low - 0.5 * spacing.min()) & (peaks < high + 0.5 * spacing.min()) & (heights >= 0.35 * typical)
    inner_peaks = peaks[inside]
    far = _nearest_distance(inner_peaks, lines) > np.maximum(1.0, 0.3 * _nearest_spacing(inner_peaks, lines, spacing))
    extra = float(far.mean()) if inner_peaks.size else 0.0
    return MatchCheck(float(found.mean()), extra, _beyond_ratio(profile, template, match))


def _nearest_spacing(positions: FloatArray, lines: FloatArray, spacing: FloatArray) -> FloatArray:
    order = np.argsort(lines)
    index = np.clip(np.searchsorted(lines[order], positions), 0, lines.size - 1)
    return spacing[order][index]


def _beyond_ratio(profile: FloatArray, template: LineTemplate, match: TemplateMatch) -> float:
    """Score of the would-be lines past the frame (inside the profile) over the score inside the frame."""
    lines = match.bins_of(template.beyond_lines)
    mids = match.bins_of(template.beyond_midpoints)
    usable = (lines >= 0) & (lines <= profile.size - 1) & (mids >= 0) & (mids <= profile.size - 1)
    if not usable.any() or match.score <= 0:
        return 0.0
    outside = float(np.mean(_interpolate(profile, lines[usable]) - _interpolate(profile, mids[usable])))
    return max(0.0, outside / match.score)
