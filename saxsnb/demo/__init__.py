"""Synthetic demo series in fictional scenarios, made from closed forms.

Three scenarios, each a series (sample + background, as measured) and a matching
background series measured separately, so that subtracting the background gives the
sample signal:

``"phase-ramp"``
    Lipid formulation L-7 heated 20 -> 90 degC in 0.5 degC steps (141 frames),
    q 0.3 .. 5 1/nm (1000 points, linear), scan coordinate ``temperature`` (degC).
    Lamellar -> Ia3d -> Pn3m -> inverse hexagonal with 2.5 degC coexistence windows;
    Bragg peaks at the allowed reflections of each phase. Intensity "arb".
``"flow-growth"``
    Oxide nanoparticles ripening along a flow channel, 60 positions (``position``,
    mm), Schulz-distributed spheres with mean radius 2 -> 12 nm and z 20 -> 50,
    q 0.03 .. 3 1/nm (500 log-spaced points). Intensity "1/cm".
``"unfolding"``
    Protein model GP-12 (sphere R = 2.5 nm) unfolding to a Gaussian chain
    (Rg = 4.5 nm) over 0 -> 6 M denaturant (``denaturant``, M, 41 frames), two-state
    midpoint 3 M; q 0.06 .. 4 1/nm (600 points). Intensity "1/cm".

Every name, sample and number is invented. Noise follows counting statistics:
sigma = sqrt(I c) / c with c counts per intensity unit, drawn Gaussian with
``np.random.default_rng(seed)``.

The truth used to make a series is stored as a JSON string in
``series.attrs["truth"]``; :func:`truth` parses it. Keys by scenario (per-frame
values are arrays of length n_frames):

- all: ``scenario``, ``counts_scale``, ``noise``;
- phase-ramp: ``phase_sequence`` (names in order), ``phases`` (per frame: list of
  the phases present), ``lattice_nm`` (per frame: dict phase -> lattice parameter in
  nm, the d-spacing for lamellar, a for the others), ``fractions`` (dict phase ->
  per-frame fraction, rows sum to 1), ``transitions`` (list of ``{"phase",
  "appears", "vanishes"}`` in degC, None = present at the start/end of the ramp),
  ``coexistence`` (list of ``{"phases", "start", "end"}`` in degC),
  ``bonnet_ratio_ia3d_pn3m``;
- flow-growth: ``radius_mean_nm``, ``z``, ``rg_apparent_nm`` (sqrt(3/5 Rm^2
  (z+7)(z+8)/(z+1)^2), Kotlarchyk & Chen 1983), ``radius_relative_sd``,
  ``volume_fraction``, ``contrast_per_cm2``;
- unfolding: ``unfolded_fraction``, ``rg_folded_nm``, ``radius_folded_nm``,
  ``rg_unfolded_nm``, ``rg_mixture_nm`` (per frame), ``midpoint_M``,
  ``m_value_kcal_per_mol_M``, ``i0_per_cm``.
"""

from __future__ import annotations

import json
from typing import Any

import numpy as np
import xarray as xr

from ..errors import SaxsInputError
from ..series import add_history, from_arrays
from . import flow_growth, phase_ramp, unfolding
from ._common import truth_json
from .files import write_demo

__all__ = ["SCENARIOS", "make_series", "truth", "write_demo", "example_series"]

_BUILDERS = {
    "phase-ramp": phase_ramp.build,
    "flow-growth": flow_growth.build,
    "unfolding": unfolding.build,
}

#: Names of the demo scenarios.
SCENARIOS = tuple(_BUILDERS)


def make_series(name: str, seed: int = 0, **options: Any) -> tuple[xr.Dataset, xr.Dataset]:
    """Make a demo series and its separately measured background.

    Parameters
    ----------
    name : str
        One of :data:`SCENARIOS`: "phase-ramp", "flow-growth", "unfolding".
    seed : int
        Seed of ``np.random.default_rng``; the same seed gives the same data.
    **options
        ``noise`` (bool, default True; False gives the noiseless model with the
        sigma it would have), ``counts_scale`` (counts per intensity unit), ``q``
        (a q grid in 1/nm) and the scan values (``temperature``, ``position`` or
        ``denaturant``); flow-growth also takes ``volume_fraction``,
        ``contrast_per_cm2``, ``n_radii``; unfolding ``radius_folded_nm``,
        ``rg_unfolded_nm``, ``midpoint_M``, ``m_value``, ``i0_per_cm``.

    Returns
    -------
    series, background : xarray.Dataset
        Both in the saxsnb layout with the same q grid and frames. ``series`` holds
        sample + background and ``attrs["truth"]`` (JSON, see :func:`truth`).

    Examples
    --------
    >>> series, background = make_series("unfolding", seed=1)
    >>> dict(series.sizes), series.denaturant.attrs["units"]
    ({'frame': 41, 'q': 600}, 'M')
    >>> round(truth(series)["midpoint_M"], 1)
    3.0
    """
    if name not in _BUILDERS:
        raise SaxsInputError(f"unknown demo scenario {name!r}; choose from {list(SCENARIOS)}",
                             parameter="name")
    rng = np.random.default_rng(seed)
    parts = _BUILDERS[name](rng, dict(options))
    scan_name = next(iter(parts["scan"]))
    common = {"scan": parts["scan"], "intensity_unit": parts["intensity_unit"]}
    series = from_arrays(
        parts["q"], parts["intensity"], parts["sigma"], **common,
        sample=parts["sample"], demo_scenario=name,
        truth=truth_json({**parts["truth"], "seed": int(seed)}),
    )
    background = from_arrays(
        parts["q"], parts["bg_intensity"], parts["bg_sigma"], **common,
        sample=parts["background_sample"], demo_scenario=name, role="background",
    )
    series.attrs["scan"] = background.attrs["scan"] = scan_name
    params = {"name": name, "seed": int(seed), **{k: v for k, v in options.items() if k != "q"}}
    series = add_history(series, "demo.make_series", **params)
    background = add_history(background, "demo.make_series", part="background", **params)
    return series, background


def _arrays(obj):
    if isinstance(obj, dict):
        return {k: _arrays(v) for k, v in obj.items()}
    if isinstance(obj, list):
        if obj and all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in obj):
            return np.asarray(obj, dtype=float)
        return [_arrays(v) for v in obj]
    return obj


def truth(ds: xr.Dataset) -> dict[str, Any]:
    """The truth a demo series was made with, as a dict (number lists -> numpy arrays).

    Raises SaxsInputError when ``ds`` carries no ``truth`` attribute.

    >>> t = truth(make_series("flow-growth", seed=0)[0])
    >>> t["radius_mean_nm"].shape
    (60,)
    """
    text = ds.attrs.get("truth") if hasattr(ds, "attrs") else None
    if text is None:
        raise SaxsInputError("this series has no 'truth' attribute (not made by saxsnb.demo)",
                             parameter="ds")
    return _arrays(json.loads(text))


def example_series(kind: str = "spheres") -> xr.Dataset:
    """A tiny noise-free series of two frames for docstring examples.

    ``"spheres"``: spheres of radius 2 and 2.5 nm (I0 = 100, flat background 0.01), q
    0.05 .. 3 1/nm (300 points), scan ``time`` 0, 60 s. ``"cubic"``: four Pn3m
    reflections of a cell a = 10 nm (110, 111, 200, 211) on a flat level, q 0.3 .. 5
    1/nm (600 points), scan ``temperature`` 20, 21 degC. Sigma is 1 % (+0.01).

    >>> example_series("cubic").sizes["q"], example_series().saxs.scan
    (600, 'time')
    """
    from ..analysis import q_positions

    if kind == "spheres":
        q = np.linspace(0.05, 3.0, 300)
        x = np.outer([2.0, 2.5], q)
        I = 100 * (3 * (np.sin(x) - x * np.cos(x)) / x**3) ** 2 + 0.01
        return from_arrays(q, I, 0.01 * I, scan={"time": [0.0, 60.0]}, sample="example spheres")
    if kind == "cubic":
        q = np.linspace(0.3, 5.0, 600)
        I = 1.0 + sum(50 * np.exp(-0.5 * ((q - c) / 0.01) ** 2) for c in q_positions("Pn3m", 10.0, 4))
        I2 = np.vstack([I, I])
        scan = {"temperature": [20.0, 21.0]}
        return from_arrays(q, I2, 0.01 * I2 + 0.01, scan=scan, sample="example cubic")
    raise SaxsInputError(f"unknown example {kind!r}; use 'spheres' or 'cubic'", parameter="kind")
