"""Curves without Bragg reflections must not be given a mesophase (issue 4: never a guess
presented as an answer)."""

import numpy as np

import saxsnb
from saxsnb.demo import make_series


def test_particle_form_factor_maxima_are_not_indexed_as_a_lattice():
    ds, bg = make_series("flow-growth")  # Schulz spheres: broad form-factor maxima only
    ix = ds.saxs.subtract(bg).saxs.index_phases()
    confident = (ix.status.values == "ok") & (np.char.find(ix.caveat.values.astype(str), "few") < 0)
    # every frame is either refused or flagged as resting on few ratios
    assert not confident.any()
    assert (ix.status.values == "no_bragg_peaks").sum() > 30
    assert ix.n_broad.attrs["units"] == "1"


def test_unfolding_series_has_no_phases():
    ds, bg = make_series("unfolding")
    ix = ds.saxs.subtract(bg).saxs.index_phases()
    assert set(ix.phase.values.ravel()) == {""}


def test_sharp_reflections_are_still_indexed():
    # silver behenate orders, d001 = 5.8380 nm (Huang et al. 1993, J. Appl. Cryst. 26, 180)
    q = np.linspace(0.5, 5.0, 1500)
    I = 1.0 + 0.05 * q**-2
    for l in range(1, 5):
        I = I + 50.0 / l * np.exp(-0.5 * ((q - l * 1.076256) / 0.01) ** 2)
    ds = saxsnb.from_arrays(q, I[None, :], 0.01 * np.sqrt(I)[None, :])
    ix = ds.saxs.index_phases()
    assert ix.phase.values[0, 0] == "lamellar" and int(ix.n_broad.values[0]) == 0
    np.testing.assert_allclose(ix.lattice.values[0, 0], 5.8380, rtol=2e-3)
