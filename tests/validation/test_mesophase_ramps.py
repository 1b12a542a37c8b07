"""Mesophase ramps: all eight phases, coexistence, weak high orders, spikes and counts
150..3000 on the strongest peak (issue 15 targets).

Truth: reflection lists derived in tests/validation/truth.py from the space-group
reflection conditions of International Tables Vol. A (docs/REFERENCES.md; checked there
against the listed sequences), Gaussian peaks of instrument width on a diffuse
background, Poisson counts.
"""

import numpy as np
import pytest

from . import runs
from . import truth as t


def test_reflection_lists_match_references():
    # docs/REFERENCES.md, Mesophases: allowed h^2+k^2+l^2 in order
    ref = {
        "Pn3m": [2, 3, 4, 6, 8, 9, 10, 11, 12, 14, 16, 17],
        "Im3m": [2, 4, 6, 8, 10, 12, 14, 16, 18, 20, 22, 24],
        "Ia3d": [6, 8, 14, 16, 20, 22, 24, 26, 30, 32],
        "Pm3n": [2, 4, 5, 6, 8, 10, 12, 13, 14, 16],
        "Fm3m": [3, 4, 8, 11, 12, 16, 19, 20, 24, 27],
        "Fd3m": [3, 8, 11, 12, 16, 19, 24, 27, 32, 35, 36],
        "hexagonal": [1, 3, 4, 7, 9, 12, 13],
    }
    for ph, s in ref.items():
        assert [x for x, _ in t.reflections(ph, len(s))] == s, ph


@pytest.mark.parametrize("counts", [3000, 600, 150])
def test_single_phase_ramps(counts):
    right = lattice = 0
    n = 0
    errs = []
    for k, ph in enumerate(t.PHASES):
        a = runs.ramp_accuracy((ph,), counts, 8, seed=100 + k)
        right += a["right"].sum()
        n += a["right"].size
        errs.append(a["lattice_err"])
    lattice = np.nanmedian(errs)
    # targets: >= 98 % right at >= 600 counts, >= 90 % at 150; lattice within 0.2 % (median)
    assert right / n >= (0.98 if counts >= 600 else 0.90)
    assert lattice <= 0.002


def test_spikes_do_not_change_the_label():
    a = runs.ramp_accuracy(("Pn3m",), 600, 10, seed=7, spikes=3)
    assert a["right"].mean() >= 0.98


def test_ia3d_with_weak_321_is_not_fm3m():
    # Ia3d with its 321 lost in noise: 211, 220, 400, 420, 332 remain; Fm3m at a / sqrt(2)
    # explains all but 420 (docs/REFERENCES.md lists)
    a = runs.ramp_accuracy(("Ia3d",), 600, 8, seed=9, rel=[1.0, 0.6, 0.0, 0.12, 0.12, 0.1, 0.04])
    assert "Fm3m" not in set(a["labels"])


@pytest.mark.parametrize("pair", [("Fd3m", "hexagonal"), ("Im3m", "Pm3n"), ("Ia3d", "Pn3m"),
                                  ("hexagonal", "Ia3d"), ("lamellar", "Pn3m")])
def test_coexistence_600_counts(pair):
    a = runs.ramp_accuracy(pair, 600, 16, seed=21)
    assert a["right"].mean() >= 0.9, a["labels"]


def test_coexistence_subset_cubic():
    a = runs.ramp_accuracy(("Pn3m", "Im3m"), 600, 8, seed=21)
    assert a["right"].mean() >= 0.9, a["labels"]


@pytest.mark.parametrize("phase", ["lamellar", "hexagonal", "Pn3m", "Ia3d"])
def test_lattice_sigma_calibrated(phase):
    # issue 15 item 4: spread of the lattice over 100 noise draws / median reported sigma
    # within ~20 % (1 = calibrated; the spread of a standard deviation from 100 draws is
    # itself ~7 %, so the band is 0.75..1.25). Measured: 0.88..1.11 at 600 counts.
    rng = np.random.default_rng(5)
    q, I, lat = runs.ramp_curves((phase,), 100, shift=0.0)
    N, S = t.counts_noise(I, 600, rng)
    _, r = runs.index_curves(q, N, S)
    ok = r["phase"][:, 0] == phase
    assert ok.sum() >= 98
    a, s = r["lattice"][ok, 0], r["lattice_sigma"][ok, 0]
    assert 0.75 <= np.std(a, ddof=1) / np.median(s) <= 1.25
    assert abs(np.mean(a) / lat[0, 0] - 1.0) < 3 * np.std(a) / lat[0, 0] / np.sqrt(ok.sum()) + 1e-5


@pytest.mark.parametrize("seed", [1, 3, 21])
def test_coexistence_subset_cubic_seeds(seed):
    # Pn3m + Im3m at 600 counts: seed 1 once gave Pn3m + Pm3n on 7 of 16 frames (the
    # Pn3m 111 lies 0.15 % from the Pm3n 210 of the Im3m cell); target >= 98 % (issue 15)
    a = runs.ramp_accuracy(("Pn3m", "Im3m"), 600, 16, seed=seed)
    assert a["right"].mean() >= 0.98, a["labels"]


@pytest.mark.parametrize("counts", [600, 150])
def test_user_route_ramps(counts):
    # index_phases (noise-weighted absent reflections): the same targets on the frames
    # where every phase has enough reflections above noise (runs.identifiable)
    right = n = 0
    ramps = [("Ia3d",), ("Pm3n",), ("Fd3m", "hexagonal"), ("Pn3m", "Im3m"), ("hexagonal", "Ia3d")]
    for k, ph in enumerate(ramps):
        a = runs.ramp_accuracy_user(ph, counts, 8, seed=40 + k)
        right += (a["right"] & a["identifiable"]).sum()
        n += a["identifiable"].sum()
    assert n >= 10 and right / n >= (0.98 if counts >= 600 else 0.90)
