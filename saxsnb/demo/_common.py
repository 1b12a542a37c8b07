"""Shared pieces of the demo scenarios: noise, option checks, closed-form shapes."""

from __future__ import annotations

import json
from collections.abc import Mapping
from typing import Any

import numpy as np

from .._jsonsafe import to_json_safe
from ..errors import SaxsInputError

__all__ = [
    "counting_noise",
    "check_options",
    "sphere_form_factor",
    "debye_chain",
    "truth_json",
]


def counting_noise(
    rng: np.random.Generator, intensity: np.ndarray, counts_scale: float, noise: bool = True
) -> tuple[np.ndarray, np.ndarray]:
    """Counting-statistics noise: sigma = sqrt(I * c) / c, Gaussian draw of that size.

    ``counts_scale`` (c) is the number of detected counts per unit of intensity, so
    ``I * c`` is a count and its Poisson standard deviation is ``sqrt(I * c)``
    (common practice: the Gaussian limit of Poisson statistics). With ``noise=False``
    the curve is returned unchanged with the sigma it would have.

    Returns
    -------
    (noisy_intensity, sigma), both of the shape of ``intensity``.
    """
    I = np.asarray(intensity, dtype=float)
    sigma = np.sqrt(np.maximum(I, 0.0) * counts_scale) / counts_scale
    # a floor of one count keeps sigma positive where the model intensity is ~0
    sigma = np.maximum(sigma, 1.0 / counts_scale)
    if not noise:
        return I.copy(), sigma
    return I + rng.standard_normal(I.shape) * sigma, sigma


def check_options(scenario: str, options: Mapping[str, Any], allowed: Mapping[str, Any]) -> dict:
    """Merge ``options`` into the defaults ``allowed``; unknown names are an error."""
    unknown = sorted(set(options) - set(allowed))
    if unknown:
        raise SaxsInputError(
            f"scenario {scenario!r} has no option {unknown[0]!r}; options: {sorted(allowed)}",
            parameter=unknown[0],
        )
    out = dict(allowed)
    out.update(options)
    return out


def sphere_form_factor(x: np.ndarray) -> np.ndarray:
    """Normalised sphere form factor P(x) = [3 (sin x - x cos x) / x^3]^2, x = qR.

    Notes
    -----
    Rayleigh (1911); Guinier & Fournet (1955). Near x = 0 the series
    1 - x^2/5 + 3 x^4/175 is used to avoid cancellation.
    """
    x = np.asarray(x, dtype=float)
    small = np.abs(x) < 1e-2
    any_small = bool(small.any())
    xs = np.where(small, 1.0, x) if any_small else x
    amp = np.sin(xs)
    amp -= xs * np.cos(xs)
    amp *= 3.0
    amp /= xs * xs * xs
    if any_small:
        x2 = x * x
        amp = np.where(small, 1.0 - x2 / 10.0 + x2 * x2 / 280.0, amp)
    amp *= amp
    return amp


def debye_chain(x: np.ndarray) -> np.ndarray:
    """Debye (1947) Gaussian chain P(x) = 2 (exp(-x) + x - 1) / x^2 with x = (q Rg)^2.

    Near x = 0 the series 1 - x/3 + x^2/12 is used.
    """
    x = np.asarray(x, dtype=float)
    small = x < 1e-3
    xs = np.where(small, 1.0, x)
    p = 2.0 * (np.expm1(-xs) + xs) / xs**2
    return np.where(small, 1.0 - x / 3.0 + x * x / 12.0, p)


def truth_json(truth: Mapping[str, Any]) -> str:
    """The truth dict as a JSON string (arrays become lists, non-finite become null)."""
    return json.dumps(to_json_safe(truth, nonfinite="null"), sort_keys=True, allow_nan=False)
