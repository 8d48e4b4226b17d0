"""The invented quantities the demo's pens write: smooth functions of time with a known formula.

A :class:`Signal` is a sum of simple terms of x (hours, or minutes for the laboratory plot), so its value at
any x is exact and its formula can be printed beside the digitized numbers.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike, NDArray

FloatArray = NDArray[np.float64]


@dataclass(frozen=True)
class Wave:
    """``amplitude * sin(2 pi x / period + phase)``."""

    amplitude: float
    period: float
    phase: float


@dataclass(frozen=True)
class Bump:
    """A Gaussian bump: ``amplitude * exp(-((x - centre) / width)^2 / 2)``."""

    amplitude: float
    centre: float
    width: float


@dataclass(frozen=True)
class Step:
    """A smooth step of height ``amplitude`` at ``at``, rising over about ``width`` (logistic)."""

    amplitude: float
    at: float
    width: float


@dataclass(frozen=True)
class Decay:
    """``amplitude * exp(-x / time_constant)``."""

    amplitude: float
    time_constant: float


@dataclass(frozen=True)
class Signal:
    """``offset + slope * x`` plus waves, bumps, steps and decays; x in the chart's time unit."""

    offset: float
    slope: float = 0.0
    waves: tuple[Wave, ...] = ()
    bumps: tuple[Bump, ...] = ()
    steps: tuple[Step, ...] = ()
    decays: tuple[Decay, ...] = field(default=())

    def __call__(self, x: ArrayLike) -> FloatArray:
        """The value at each x."""
        t = np.asarray(x, dtype=np.float64)
        value = self.offset + self.slope * t
        for wave in self.waves:
            value = value + wave.amplitude * np.sin(2.0 * math.pi * t / wave.period + wave.phase)
        for bump in self.bumps:
            value = value + bump.amplitude * np.exp(-0.5 * ((t - bump.centre) / bump.width) ** 2)
        for step in self.steps:
            value = value + step.amplitude / (1.0 + np.exp(-(t - step.at) / step.width))
        for decay in self.decays:
            value = value + decay.amplitude * np.exp(-t / decay.time_constant)
        return np.asarray(value, dtype=np.float64)

    def formula(self, *, variable: str = "t") -> str:
        """The signal as plain text, e.g. ``7.1 + 1.2 sin(2π t/24 + 0.40) - 1.5 exp(-((t - 80)/3)²/2)``."""
        terms = [f"{self.offset:.4g}"]
        if self.slope:
            terms.append(f"{self.slope:+.4g} {variable}")
        terms += [f"{w.amplitude:+.4g} sin(2π {variable}/{w.period:g} {w.phase:+.3f})" for w in self.waves]
        terms += [f"{b.amplitude:+.4g} exp(-(({variable} - {b.centre:g})/{b.width:g})²/2)" for b in self.bumps]
        terms += [f"{s.amplitude:+.4g} / (1 + exp(-({variable} - {s.at:g})/{s.width:g}))" for s in self.steps]
        terms += [f"{d.amplitude:+.4g} exp(-{variable}/{d.time_constant:g})" for d in self.decays]
        return " ".join(terms).replace("+", "+ ").replace(" -", " - ").replace("  ", " ")
