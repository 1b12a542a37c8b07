"""Synthetic Bragg patterns with known answers, shared by the peak and lattice tests.

Peak positions come from the reflection generator (checked against docs/REFERENCES.md in
tests/test_reflections.py); everything else is a closed form.
"""

from __future__ import annotations

import numpy as np

from saxsnb.analysis import q_positions

Q = np.linspace(0.3, 5.0, 1000)  # 1/nm, like the demo series


def gaussian(q, centre, fwhm, height):
    """Gaussian of given FWHM: h exp(-4 ln2 (q - c)^2 / w^2) (common practice)."""
    return height * np.exp(-4 * np.log(2) * ((q - centre) / fwhm) ** 2)


def pattern_positions(phase, lattice, *, n=12, q_max=5.0, q_min=0.3, drop=()):
    """Allowed-reflection positions of a phase inside (q_min, q_max), minus ranks in drop."""
    qs = q_positions(phase, lattice, n)
    keep = [i for i, v in enumerate(qs) if q_min < v < q_max and i not in drop]
    return qs[keep]


def curve(positions, heights, *, q=Q, fwhm=0.02, rng=None, counts=2000.0):
    """Diffuse power-law background plus Gaussian peaks, with counting noise.

    Returns (intensity, sigma) on q.
    """
    bg = 2.0 * q**-2.0 + 5.0
    I = bg.copy()
    for c, h in zip(positions, heights):
        I += gaussian(q, c, fwhm, h)
    sigma = np.sqrt(I / counts)
    if rng is not None:
        I = I + rng.normal(0.0, 1.0, q.size) * sigma
    return I, sigma
