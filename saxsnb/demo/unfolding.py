"""Demo scenario "unfolding": a compact globule unfolding to a chain in denaturant.

A fictional small protein GP-12 (folded: a sphere of radius 2.5 nm, Rg 1.94 nm;
unfolded: a Gaussian chain with Rg 4.5 nm) titrated from 0 to 6 M denaturant. The
unfolded fraction follows a two-state sigmoid with midpoint 3 M. The buffer background
grows with the denaturant concentration, so each frame has its own background.
"""

from __future__ import annotations

import numpy as np

from ._common import check_options, counting_noise, debye_chain, sphere_form_factor

DEFAULTS = {
    "denaturant": None,  # M, default 0 .. 6 M in 0.15 M steps (41 frames)
    "q": None,  # 1/nm, default 0.06 .. 4.0, 600 linear points
    "counts_scale": 3.0e6,  # counts per 1/cm
    "noise": True,
    "radius_folded_nm": 2.5,
    "rg_unfolded_nm": 4.5,
    "midpoint_M": 3.0,
    "m_value": 2.0,  # kcal/mol/M
    "i0_per_cm": 0.06,
}

RT_KCAL = 0.0019872 * 298.15  # gas constant x 25 degC, kcal/mol
WATER_PER_CM = 0.01632  # Orthaber, Bergmann & Glatter 2000, 20 degC (from memory)


def unfolded_fraction(c, midpoint: float = 3.0, m_value: float = 2.0) -> np.ndarray:
    """Two-state unfolded fraction f = K / (1 + K), K = exp(m (c - c_mid) / RT).

    The linear extrapolation model of denaturation (Pace 1986, Methods Enzymol. 131,
    266; Santoro & Bolen 1988, Biochemistry 27, 8063): dG(c) = m (c_mid - c).

    >>> float(unfolded_fraction(3.0))
    0.5
    """
    c = np.asarray(c, dtype=float)
    return 1.0 / (1.0 + np.exp(-m_value * (c - midpoint) / RT_KCAL))


def build(rng: np.random.Generator, options: dict):
    """Arrays and truth of the scenario; see :func:`saxsnb.demo.make_series`."""
    opts = check_options("unfolding", options, DEFAULTS)
    c = np.linspace(0.0, 6.0, 41) if opts["denaturant"] is None else opts["denaturant"]
    c = np.atleast_1d(np.asarray(c, dtype=float))
    q = np.linspace(0.06, 4.0, 600) if opts["q"] is None else np.asarray(opts["q"], dtype=float)
    R = float(opts["radius_folded_nm"])
    rg_u = float(opts["rg_unfolded_nm"])
    f = unfolded_fraction(c, float(opts["midpoint_M"]), float(opts["m_value"]))
    p_folded = sphere_form_factor(q * R)
    p_unfolded = debye_chain((q * rg_u) ** 2)
    i0 = float(opts["i0_per_cm"])
    signal = i0 * ((1.0 - f)[:, None] * p_folded[None, :] + f[:, None] * p_unfolded[None, :])
    background = WATER_PER_CM * (1.0 + 0.12 * c[:, None]) + 0.002 + 1.0e-6 * q[None, :] ** -3.5
    cs = float(opts["counts_scale"])
    I, S = counting_noise(rng, signal + background, cs, opts["noise"])
    bI, bS = counting_noise(rng, background, cs, opts["noise"])
    rg_f = np.sqrt(0.6) * R  # Guinier & Fournet 1955
    truth = {
        "scenario": "unfolding",
        "unfolded_fraction": f,
        "rg_folded_nm": rg_f,
        "radius_folded_nm": R,
        "rg_unfolded_nm": rg_u,
        # same molecule, same I0: the Guinier Rg^2 of the mixture is the weighted mean
        "rg_mixture_nm": np.sqrt((1.0 - f) * rg_f**2 + f * rg_u**2),
        "midpoint_M": float(opts["midpoint_M"]),
        "m_value_kcal_per_mol_M": float(opts["m_value"]),
        "i0_per_cm": i0,
        "counts_scale": cs,
        "noise": bool(opts["noise"]),
    }
    return {
        "q": q,
        "scan": {"denaturant": (c, "M")},
        "intensity": I,
        "sigma": S,
        "bg_intensity": bI,
        "bg_sigma": bS,
        "intensity_unit": "1/cm",
        "sample": "globular protein model GP-12, 4 mg/ml, denaturant titration (fictional)",
        "background_sample": "matching denaturant buffers for GP-12 (fictional)",
        "truth": truth,
    }
