"""Identify printed grid lines on a profile: the spec's lines as a template, matched by scale and offset.

A spec axis prints its lines at known chart coordinates; across the sheet they land at
``x_k = offset + span * p_k`` profile bins, where ``p_k`` in [0, 1] is line k's fraction of the frame
(chart coordinates are linear on paper for every scale) and ``span`` the frame's length in bins. On a
sheet turned by 180 degrees (or a mirrored axis) the fractions run backwards: ``1 - p_k``.

The match score of (span, offset) on a normalised profile P (lines as peaks in [0, 1]) is the weighted
mean of P at the lines minus the mean of P half-way between neighbouring lines, where no line should
be: 1 for a perfect print, about 0 for noise. A template that is too fine puts its midpoints on lines,
one that is too coarse misses lines; major lines (weight 2) fix which line is which when they are
printed heavier. The search is exhaustive: every span from ``min_span`` to ``max_span`` in half-bin
steps, every offset, as one batch of FFT correlations on a profile decimated to <= 512 bins; the best
candidates are refined at full resolution.

:func:`check_match` then counts how many of the spec's lines have a peak, how many peaks are not the
spec's lines, whether the lines go on past either end of the frame, and whether the heavier printed
lines are the spec's major lines: the evidence for refusing a sheet that is not the spec's chart.
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

MAJOR_WEIGHT: Final = 2.0
BEYOND_WEIGHT: Final = 2.0
DECIMATED_BINS: Final = 512
CANDIDATES: Final = 6
BENT_CANDIDATES: Final = CANDIDATES
SPAN_CHUNK: Final = 256
# Uneven spacing tried: the middle of the frame moves by up to 2 % of its length.
BENDS: Final = np.linspace(-0.08, 0.08, 17)
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
        """Weight of each line in the match score: :data:`MAJOR_WEIGHT` for major lines, else 1."""
        if self.major.any() and not self.major.all():
            return np.where(self.major, MAJOR_WEIGHT, 1.0)
        return np.ones(self.major.shape)

    def comb(self) -> tuple[FloatArray, FloatArray]:
        """Fractions and amounts of the match score's comb: lines (+weight / total weight), midpoints
        (-1 / number of midpoints) and the would-be lines past the frame (-2 / total weight each: a
        template ending where the print does not end loses more than for a missing line, since the ends
        are what tell a sheet from itself turned)."""
        total = float(self.weights.sum())
        mid = 1.0 / self.midpoints.size if self.midpoints.size else 0.0
        fractions = np.concatenate([self.fraction, self.midpoints, self.beyond_lines])
        beyond = np.full(self.beyond_lines.size, -BEYOND_WEIGHT / total)
        amounts = np.concatenate([self.weights / total, np.full(self.midpoints.size, -mid), beyond])
        return fractions, amounts


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
    bend : float
        Uneven spacing along the profile: fraction f lands at ``f + bend * f * (f - 1)`` of the span (the
        frame lines stay put; paper shrinking unevenly, or a sheet tilted towards the scanner lens).
    """

    span: float
    offset: float
    flipped: bool
    score: float
    bend: float = 0.0

    def bins_of(self, fraction: FloatArray) -> FloatArray:
        """Profile bins of template fractions."""
        along = np.asarray(fraction, dtype=np.float64)
        along = 1.0 - along if self.flipped else along
        return self.offset + self.span * (along + self.bend * along * (along - 1.0))


def _interpolate(profile: FloatArray, x: FloatArray) -> FloatArray:
    """Linear interpolation of the profile at bins x (any shape); 0 outside [0, size - 1]."""
    x = np.asarray(x, dtype=np.float64)
    inside = (x >= 0.0) & (x <= profile.size - 1)
    position = np.where(inside, x, 0.0)
    low = np.minimum(position.astype(np.intp), profile.size - 2) if profile.size > 1 else np.zeros(x.shape, np.intp)
    upper = position - low
    padded = np.append(profile, 0.0)
    values = padded[low] * (1.0 - upper) + padded[low + 1] * upper
    return np.where(inside, values, 0.0)


def match_score(profile: FloatArray, template: LineTemplate, match: TemplateMatch) -> float:
    """Score of ``match`` on a normalised profile (module docstring)."""
    fractions, amounts = template.comb()
    return float(amounts @ _interpolate(profile, match.bins_of(fractions)))


def _decimate(profile: FloatArray, factor: int) -> FloatArray:
    padded = np.pad(profile, (0, -profile.size % factor))
    return np.asarray(padded.reshape(-1, factor).mean(axis=1), dtype=np.float64)


def _combs(spans: FloatArray, template: LineTemplate, flipped: bool, size: int) -> FloatArray:
    """One row per span: the template's comb (:meth:`LineTemplate.comb`), split linearly between bins."""
    fractions, amounts = template.comb()
    if flipped:
        fractions = 1.0 - fractions
    position = spans[:, None] * fractions[None, :]
    low = np.floor(position).astype(np.intp)
    upper = position - low
    combs = np.zeros(spans.size * size)
    rows = np.arange(spans.size)[:, None] * size
    for index, weight in ((low, amounts * (1.0 - upper)), (low + 1, amounts * upper)):
        # Circular: a tooth before bin 0 wraps to the zero padding past the profile, where it reads 0.
        combs += np.bincount((rows + np.mod(index, size)).ravel(), weights=weight.ravel(), minlength=combs.size)
    return combs.reshape(spans.size, size)


def _coarse_candidates(
    profile: FloatArray, template: LineTemplate, flipped: bool, spans_bins: FloatArray, factor: int
) -> list[TemplateMatch]:
    """Best (span, offset) pairs on the profile decimated by ``factor``, by FFT correlation over the given
    spans (full-resolution bins), with non-maximum suppression."""
    small = _decimate(profile, factor)
    spans = np.unique(spans_bins / factor)
    spans = spans[spans <= small.size - 2.0]
    if spans.size == 0:
        return []
    size = 1 << math.ceil(math.log2(2 * small.size + 2))
    spectrum = np.fft.rfft(small, size)
    found: list[TemplateMatch] = []
    for first in range(0, spans.size, SPAN_CHUNK):
        chunk = spans[first : first + SPAN_CHUNK]
        combs = np.fft.rfft(_combs(chunk, template, flipped, size), axis=1)
        scores = np.fft.irfft(np.conj(combs) * spectrum, size, axis=1)
        valid = np.arange(size)[None, :] <= (small.size - 2.0 - chunk)[:, None]
        found += _best_peaks(np.where(valid, scores, -np.inf), chunk, flipped, factor)
    return sorted(found, key=lambda match: -match.score)[:CANDIDATES]


def _best_peaks(scores: FloatArray, spans: FloatArray, flipped: bool, factor: int) -> list[TemplateMatch]:
    """The best (span, offset) cells of a score table, suppressing each pick's neighbours."""
    found: list[TemplateMatch] = []
    for _ in range(CANDIDATES):
        i, b = np.unravel_index(int(np.argmax(scores)), scores.shape)
        if not math.isfinite(float(scores[i, b])):
            break
        found.append(TemplateMatch(float(spans[i]) * factor, float(b) * factor, flipped, float(scores[i, b])))
        scores[max(0, i - 2) : i + 3, max(0, b - 1) : b + 2] = -np.inf
    return found


def refine_match(
    profile: FloatArray,
    template: LineTemplate,
    start: TemplateMatch,
    *,
    span_bins: float,
    offset_bins: float,
    step_bins: float = 0.25,
    bends: FloatArray | None = None,
) -> TemplateMatch:
    """Best score near ``start``: spans and offsets within +-the given bins in steps of ``step_bins``, and
    each of ``bends`` (default: the start's bend)."""
    span_steps = start.span + np.arange(-span_bins, span_bins + 1e-9, step_bins)
    offset_steps = start.offset + np.arange(-offset_bins, offset_bins + 1e-9, step_bins)
    bend_steps = np.array([start.bend]) if bends is None else np.asarray(bends, dtype=np.float64)
    spans, offsets, bend = (grid.ravel() for grid in np.meshgrid(span_steps, offset_steps, bend_steps, indexing="ij"))
    fractions, amounts = template.comb()
    along = 1.0 - fractions if start.flipped else fractions
    shape = along[None, :] + bend[:, None] * (along * (along - 1.0))[None, :]
    score = _interpolate(profile, offsets[:, None] + spans[:, None] * shape) @ amounts
    best = int(np.argmax(score))
    return TemplateMatch(float(spans[best]), float(offsets[best]), start.flipped, float(score[best]), float(bend[best]))


def search_template(
    profile: FloatArray,
    template: LineTemplate,
    *,
    flipped: bool,
    span_range: tuple[float, float],
    span_windows: list[tuple[float, float]] | None = None,
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
    span_windows : list of (float, float), optional
        Narrower ranges of frame lengths (bins) to try instead, e.g. from the profile's periodicity;
        these are searched at full resolution. Without them every span is tried on a profile decimated
        to at most :data:`DECIMATED_BINS` bins, but no further than keeps the closest lines >= 2 bins
        apart at a middling span.
    """
    if span_windows:
        steps = [np.arange(max(low, span_range[0]), min(high, span_range[1]) + 1e-9, 0.5) for low, high in span_windows]
        spans, factor = np.concatenate(steps), 1
    else:
        typical_span = 0.5 * (span_range[0] + span_range[1])
        gap = float(np.min(np.diff(template.fraction))) * typical_span if template.fraction.size > 1 else 8.0
        factor = max(1, min(math.ceil(profile.size / DECIMATED_BINS), int(gap // 2)))
        spans = np.arange(span_range[0], span_range[1] + 1e-9, 0.5 * factor)
    coarse = _coarse_candidates(profile, template, flipped, spans, factor)
    reach = 1.5 * factor
    refined = []
    for candidate in coarse:
        whole_bins = refine_match(profile, template, candidate, span_bins=reach, offset_bins=reach, step_bins=1.0)
        refined.append(refine_match(profile, template, whole_bins, span_bins=1.0, offset_bins=1.0))
    best = sorted(refined, key=lambda match: -match.score)
    # Uneven spacing is tried on the leading candidates only: it refines a placement, it does not find one.
    for index, match in enumerate(best[:BENT_CANDIDATES]):
        bent = refine_match(profile, template, match, span_bins=1.0, offset_bins=1.0, step_bins=1.0, bends=BENDS)
        best[index] = refine_match(profile, template, bent, span_bins=0.5, offset_bins=0.5)
    return sorted(best, key=lambda match: -match.score)


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
        Match score of the would-be lines past the frame relative to the score inside it (worse end).
    major_agreement : float
        Correlation of the line heights with the spec's major flags (1 when no line stands out).
    """

    found_fraction: float
    extra_fraction: float
    beyond_ratio: float
    major_agreement: float = 1.0


def _nearest_distance(positions: FloatArray, targets: FloatArray) -> FloatArray:
    order = np.sort(targets)
    index = np.clip(np.searchsorted(order, positions), 1, max(1, order.size - 1))
    low, high = order[np.maximum(index - 1, 0)], order[np.minimum(index, order.size - 1)]
    return np.minimum(np.abs(positions - low), np.abs(positions - high))


def _local_spacing(lines: FloatArray) -> FloatArray:
    gaps = np.abs(np.diff(lines))
    if gaps.size == 0:
        return np.full(lines.shape, np.inf)
    return np.asarray(np.minimum(np.append(gaps, gaps[-1]), np.insert(gaps, 0, gaps[0])), dtype=np.float64)


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
    agreement = _major_agreement(_interpolate(profile, lines), template.major)
    return MatchCheck(float(found.mean()), extra, _beyond_ratio(profile, template, match), agreement)


def _nearest_spacing(positions: FloatArray, lines: FloatArray, spacing: FloatArray) -> FloatArray:
    order = np.argsort(lines)
    index = np.clip(np.searchsorted(lines[order], positions), 0, lines.size - 1)
    return spacing[order][index]


def _beyond_ratio(profile: FloatArray, template: LineTemplate, match: TemplateMatch) -> float:
    """Score of the would-be lines past each end of the frame (inside the profile) over the score inside
    it; the larger of the two ends."""
    lines = match.bins_of(template.beyond_lines)
    mids = match.bins_of(template.beyond_midpoints)
    usable = (lines >= 0) & (lines <= profile.size - 1) & (mids >= 0) & (mids <= profile.size - 1)
    if match.score <= 0:
        return 0.0
    # The would-be lines are extrapolated: look for each within a fifth of a spacing (at least a bin).
    reach = np.maximum(1.0, 0.2 * np.abs(lines - mids)[:, None] * 2.0) * np.linspace(-1.0, 1.0, 5)[None, :]
    nearby = _interpolate(profile, lines[:, None] + reach).max(axis=1)
    worst = 0.0
    for side in (template.beyond_lines < 0, template.beyond_lines > 1):
        chosen = usable & side
        if chosen.any():
            outside = float(np.mean(nearby[chosen] - _interpolate(profile, mids[chosen])))
            worst = max(worst, outside / match.score)
    return worst


def _major_agreement(heights: FloatArray, major: BoolArray) -> float:
    """Correlation of the printed lines' heights with the spec's major flags (1 when no line stands out).

    Lines stand out when the median line is below 0.6 times the 95th percentile: then the heavier
    printed lines should be the spec's major ones (correlation near 1; a different pattern gives about 0).
    """
    if not major.any() or major.all() or heights.size < 4:
        return 1.0
    top = float(np.quantile(heights, 0.95))
    if top <= 0 or float(np.median(heights)) >= 0.6 * top or float(np.std(heights)) == 0.0:
        return 1.0
    return float(np.corrcoef(heights, major.astype(np.float64))[0, 1])
