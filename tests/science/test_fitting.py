"""The fit_model dispatcher, JSON serialisation of FitResult, and model suggestion.

References: data generated from known models (the generating family is the right answer when the
noise is small and the samples many); AICc preference margin of 2 units (Burnham & Anderson 2002,
from memory).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fitting import FAMILIES, fit_model, suggest_model


def _json_round_trip(payload: object) -> object:
    return json.loads(json.dumps(payload, allow_nan=False))


@pytest.mark.parametrize(
    ("family", "options", "x", "y"),
    [
        ("polynomial", {"degree": 3}, np.linspace(0, 5, 30), np.linspace(0, 5, 30) ** 3 + np.sin(np.arange(30))),
        ("fourier", {"degree": 2, "period": 24}, np.linspace(0, 48, 60), np.cos(np.linspace(0, 48, 60))),
        ("exponential", {}, np.linspace(0, 3, 20), np.exp(np.linspace(0, 3, 20)) + 0.01 * np.sin(np.arange(20))),
        ("power", {}, np.linspace(1, 3, 20), np.linspace(1, 3, 20) ** 1.5 + 0.01 * np.sin(np.arange(20))),
        ("logarithmic", {}, np.linspace(1, 3, 20), np.log(np.linspace(1, 3, 20)) + 0.01 * np.sin(np.arange(20))),
        ("spline", {}, np.linspace(0, 3, 20), np.sin(np.linspace(0, 3, 20)) + 0.01 * np.cos(9 * np.arange(20))),
        ("interpolation", {}, np.arange(4.0), np.array([1.0, 3.0, 2.0, 5.0])),
    ],
)
def test_every_family_fits_and_serialises(
    family: str, options: dict[str, object], x: np.ndarray, y: np.ndarray
) -> None:
    """Each family through the dispatcher gives a JSON-ready result with the documented shapes."""
    fit = fit_model(x, y, family=family, **options)
    payload = _json_round_trip(fit.to_dict())
    assert isinstance(payload, dict)
    assert payload["family"] == family
    assert set(payload["stats"]) >= {
        "n",
        "dof",
        "residual_sd",
        "r_squared",
        "aicc",
        "bic",
        "cv_rmse",
        "condition_number",
    }
    assert payload["domain"] == [float(x.min()), float(x.max())]
    assert_allclose(fit.predict(x[:3]), fit.predict(x)[:3])
    if family == "polynomial":
        assert isinstance(payload["parameters"], list)
        assert len(payload["parameters"]) == len(payload["standard_errors"]) == 4
    elif family == "fourier":
        assert list(payload["parameters"]) == ["a0", "a1", "b1", "a2", "b2", "period"]
    elif family in ("exponential", "power"):
        assert list(payload["parameters"]) == ["a", "b", "c"]
    elif family == "logarithmic":
        assert list(payload["parameters"]) == ["a", "b"]
    elif family == "spline":
        assert {"knots", "coefficients", "degree", "smoothing"} <= set(payload["parameters"])


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"family": "cubic"}, "unknown model family 'cubic'"),
        ({"family": "polynomial"}, "needs the option 'degree'"),
        ({"family": "polynomial", "degree": 2, "period": 3}, "unknown option 'period'"),
        ({"family": "polynomial", "degree": 12}, "at least 14 samples"),
        ({"family": "fourier", "degree": 1, "period": -24}, "period must be positive"),
        ({"family": "fourier", "degree": 1, "period_bounds": "wide"}, "period_bounds must be two numbers"),
        ({"family": "logarithmic"}, "needs x > 0"),
        ({"family": "exponential", "absolute_sigma": "yes"}, "absolute_sigma must be true or false"),
        ({"family": "interpolation", "sigma": [-1.0] * 10}, "sigma must be positive"),
    ],
)
def test_dispatcher_refuses_bad_requests(kwargs: dict[str, object], message: str) -> None:
    """Bad family, options or data raise ScienceInputError naming the problem (HTTP 422 upstream)."""
    x = np.linspace(-1.0, 1.0, 10)
    with pytest.raises(ScienceInputError, match=message):
        fit_model(x, x**2, **kwargs)  # type: ignore[arg-type]


def test_nan_data_is_refused() -> None:
    """NaN in y is named with its index."""
    with pytest.raises(ScienceInputError, match="y contains NaN or infinity at index 2"):
        fit_model([0, 1, 2, 3, 4], [0, 1, math.nan, 3, 4], family="polynomial", degree=1)


def test_families_constant_lists_every_family() -> None:
    """The API can offer exactly these families."""
    assert set(FAMILIES) == {"polynomial", "fourier", "exponential", "power", "logarithmic", "spline", "interpolation"}


@pytest.mark.parametrize(
    ("truth", "expected"),
    [
        (lambda x: 1.0 + 0.5 * x - 0.2 * x**2, "polynomial"),
        (lambda x: 2.0 * np.exp(0.35 * x) + 1.0, "exponential"),
        (lambda x: 2.0 + 3.0 * np.log(x), "logarithmic"),
        (lambda x: 5.0 + 2.0 * np.sin(2 * np.pi * x / 4.0), "fourier"),
    ],
)
def test_suggestion_recovers_the_generating_family(truth: object, expected: str) -> None:
    """Low-noise samples of a known model: the suggestion names that family, with ranked reasons."""
    rng = np.random.default_rng(12)
    x = np.linspace(1.0, 10.0, 120)
    y = truth(x) + rng.normal(0.0, 0.02, x.size)  # type: ignore[operator]
    suggestion = suggest_model(x, y, period=4.0 if expected == "fourier" else None, fourier_degrees=(1, 2))
    assert suggestion.recommended is not None
    assert suggestion.recommended.family == expected
    assert suggestion.recommended.reason.startswith("recommended")
    ranked = [c for c in suggestion.candidates if c.rank is not None]
    aicc = [c.aicc for c in ranked]
    assert aicc == sorted(aicc)  # type: ignore[type-var]
    assert all(c.reason for c in suggestion.candidates)


def test_suggestion_prefers_the_simpler_model_within_the_margin() -> None:
    """A straight line: higher degrees fit as well, yet the recommendation is degree 1."""
    rng = np.random.default_rng(21)
    x = np.linspace(0.0, 10.0, 60)
    suggestion = suggest_model(x, 3.0 - 0.4 * x + rng.normal(0.0, 0.3, x.size), fourier_degrees=())
    assert suggestion.recommended is not None
    assert suggestion.recommended.label == "polynomial, degree 1"
    assert any(c.family == "exponential" for c in suggestion.candidates)
    assert not any(c.family in ("power", "logarithmic") for c in suggestion.candidates)  # x = 0 present
