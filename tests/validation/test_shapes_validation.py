"""Guinier and Porod on curves of known shapes (issue 15 targets).

Truth: closed forms and quadratures in tests/validation/truth.py (Guinier & Fournet
1955; Debye 1947; Kotlarchyk & Chen 1983; Pedersen 1997) and a brute-force Debye
(1915) sum on a random point cloud, whose Rg is computed from the points themselves.
"""

import numpy as np
import pytest

from saxsnb.analysis import guinier, porod

from . import runs
from . import truth as t

COMPACT = ["sphere R5", "Schulz z20", "Schulz z100", "oblate 6x6x2", "core-shell", "vesicle R20 t4"]


@pytest.mark.parametrize("name", COMPACT)
def test_automatic_guinier_status_ok_is_never_far_off(name):
    f = runs.shape_cases()[name]
    _, rg0 = f(np.array([1e-3]))
    q = runs._grid(rg0)
    I, rg = f(q)
    for noise in (0.001, 0.01, 0.1):
        a = runs.guinier_accuracy(I, q, rg, noise, 60, seed=4)
        assert a["n_ok"] >= 55
        # median |error| at <= 1 % noise: the approximation bias of the chosen range
        # (numpy.polyfit on the noise-free curve) plus 1 %
        if noise <= 0.01:
            assert a["median_abs_err"] <= 0.01 + np.nanmedian(np.abs(a["bias"]))


def test_debye_point_cloud_rg():
    q, I, rg = runs.debye_cloud_case()
    a = runs.guinier_accuracy(I, q, rg, 0.001, 40, seed=5)
    # brute-force Debye sum: the Guinier Rg of the curve equals the Rg of the points
    assert a["median_abs_err"] <= 0.01


@pytest.mark.parametrize("name", ["sphere R5", "Schulz z20", "Gaussian chain", "prolate 3x3x9"])
@pytest.mark.parametrize("noise", [0.001, 0.01, 0.1])
def test_automatic_guinier_sigma_is_calibrated(name, noise):
    f = runs.shape_cases()[name]
    _, rg0 = f(np.array([1e-3]))
    q = runs._grid(rg0)
    I, rg = f(q)
    a = runs.guinier_accuracy(I, q, rg, noise, 120, seed=6)
    # target (issue 15): spread over >= 100 draws / median sigma within ~20 %, for Rg and I0
    assert 0.8 <= a["spread_over_sigma"] <= 1.25
    assert 0.8 <= a["i0_spread_over_sigma"] <= 1.25


def test_porod_exponent_of_smooth_spheres_with_fitted_background():
    # Schulz spheres (z = 20) beyond the oscillations fall as q^-4 (Porod 1951); a flat
    # background 0.2 % of the level at q R = 10 is added and fitted
    q = np.linspace(2.0, 6.0, 200)
    I, _ = t.schulz_spheres(q, 5.0, 20)
    B = 2e-3 * np.interp(2.0, q, I)
    rng = np.random.default_rng(8)
    Iobs, S = t.noisy(I + B, 0.0, rng, 20)
    S = 0.005 * (I + B)[None].repeat(20, 0)
    Iobs = (I + B)[None] + S * rng.standard_normal(S.shape)
    r = porod(q, Iobs, S, q_range=(2.0, 6.0))
    assert np.median(np.abs(r["exponent"] - 4.0)) < 0.1
    assert (r["status"] == "ok").mean() >= 0.9


def test_porod_status_when_region_not_reached():
    # a Gaussian chain falls as q^-2 (Debye 1947): not a Porod range
    q = np.linspace(0.5, 2.0, 150)
    I, _ = t.gaussian_chain(q, 5.0)
    r = porod(q, I + 1e-4, 1e-3 * I + 1e-6, q_range=(0.5, 2.0))
    assert r["status"][0] == "porod_region_not_reached"
    # local exponent of the Debye function at q Rg 2.5..10 is 2 (1 - 1/x) / (1 - 1/x + ...) ~ 1.8 (der)
    assert 1.6 < r["exponent"][0] < 2.1


@pytest.mark.parametrize("background", ["fit", "given"])
def test_porod_exponent_sigma_is_calibrated(background):
    # Schulz spheres (z = 20) fall as q^-4 beyond the oscillations (Porod 1951); target
    # (issue 15): spread over >= 100 draws / median sigma within ~20 %
    q = np.linspace(2.0, 6.0, 200)
    I, _ = t.schulz_spheres(q, 5.0, 20)
    B = 2e-3 * np.interp(2.0, q, I)
    rng = np.random.default_rng(9)
    S = 0.01 * (I + B)[None].repeat(150, 0)
    Iobs = (I + B)[None] + S * rng.standard_normal(S.shape)
    r = porod(q, Iobs, S, q_range=(2.0, 6.0), background="fit" if background == "fit" else B)
    ratio = np.nanstd(r["exponent"]) / np.nanmedian(r["exponent_sigma"])
    assert 0.8 <= ratio <= 1.25


# --------------------------------------------------------------------------- low-q upturn
# The rule (saxsnb.analysis._guinier, "low-q upturn"): the relative curvature
# kappa = c / b^2 of ln I vs q^2 of a window from the first point must not exceed 1.5
# significantly. For a sum of Guinier terms kappa is half the squared relative spread of
# the intensity-weighted Rg^2 (second cumulant of ln I in q^2, der); a power law q^-a
# gives 1 / (2 a) (der).


def _local_kappa(f, rg, u_max):
    u = np.linspace(0.01, u_max, 3000)
    q = u / rg
    y = np.log(f(q)[0])
    x = q * q
    yp = np.gradient(y, x)
    k = 0.5 * np.gradient(yp, x) / yp**2
    return k[5:-5]


NOT_AGGREGATING = {
    "Gaussian chain": lambda q: t.gaussian_chain(q, 5.0),
    "cylinder R2 L30": lambda q: t.cylinder(q, 2.0, 30.0),
    "cylinder R2 L60": lambda q: t.cylinder(q, 2.0, 60.0),
    "Schulz z4": lambda q: t.schulz_spheres(q, 4.0, 4),
    "Debye-Bueche xi3": lambda q: t.debye_bueche(q, 3.0),
    "prolate 3x3x9": lambda q: t.ellipsoid(q, 3.0, 9.0),
}


@pytest.mark.parametrize("name", sorted(NOT_AGGREGATING))
def test_single_populations_stay_below_the_upturn_limit(name):
    # closed forms / quadrature: kappa below 1.5 up to q Rg = 2 (the searched windows
    # reach q Rg ~ 1.8 at most); the chain's limit is 1/2 (q^-2 tail), Debye-Bueche 1/4
    f = NOT_AGGREGATING[name]
    rg = f(np.array([1e-3]))[1]
    assert _local_kappa(f, rg, 2.0).max() < 1.25


def test_aggregates_exceed_the_upturn_limit():
    # 1 % by weight of R = 30 nm spheres in R = 3 nm spheres (Guinier & Fournet 1955
    # sphere form factor): where the small spheres take over, kappa exceeds 5
    f = lambda q: t.sphere_mixture(q, 3.0, 30.0, 0.01)  # noqa: E731
    assert _local_kappa(f, np.sqrt(0.6) * 3.0, 0.8).max() > 5.0


@pytest.mark.parametrize("noise", [0.001, 0.01])
def test_one_percent_aggregates_are_flagged(noise):
    # a lab-SAXS grid from q = 0.1 1/nm (q Rg = 2.3 for the aggregates, 0.23 for the
    # small spheres): the upturn at the lowest q must be flagged, never "ok"
    q = np.linspace(0.1, 2.15, 300)
    I, _ = t.sphere_mixture(q, 3.0, 30.0, 0.01)
    Iobs, S = t.noisy(I * 1000.0, noise, np.random.default_rng(21), 40)
    r = guinier(q, Iobs, S)
    assert (r["status"] == "curvature_aggregation").all()
    assert np.isnan(r["rg"]).all()


@pytest.mark.parametrize("q0", [0.02, 0.05])
def test_resolved_aggregates_are_never_ok(q0):
    # the same mixture on grids that resolve the aggregates' own Guinier region: the
    # 8-point windows already exceed q Rg = 1.3 (aggregate Rg 23 nm): refused, not "ok"
    q = np.linspace(q0, 2.15, 300)
    I, _ = t.sphere_mixture(q, 3.0, 30.0, 0.01)
    Iobs, S = t.noisy(I * 1000.0, 0.01, np.random.default_rng(22), 20)
    assert not (guinier(q, Iobs, S)["status"] == "ok").any()


@pytest.mark.parametrize("name", sorted(NOT_AGGREGATING))
@pytest.mark.parametrize("u0,noise", [(0.05, 0.001), (0.05, 0.01), (0.3, 0.0), (0.3, 0.001)])
def test_non_aggregating_samples_are_not_called_aggregated(name, u0, noise):
    f = NOT_AGGREGATING[name]
    rg = f(np.array([1e-3]))[1]
    q = np.linspace(u0 / rg, 5.0 / rg, 100)
    I, _ = f(q)
    Iobs, S = t.noisy(I * 1000.0, noise, np.random.default_rng(23), 20)
    r = guinier(q, Iobs, S)
    assert set(r["status"].tolist()) <= {"ok", "curved_approximate"}
    # the neutral status keeps an approximate Rg: the shortest window, biased low by the
    # upward curvature (Debye chain -2 % at q Rg ~ 0.6, der), within 5 %
    approx = r["status"] == "curved_approximate"
    assert np.all(np.abs(r["rg"][approx] / rg - 1) < 0.05)


# --------------------------------------------------------------------------- rod and sheet
# Truth: orientation-averaged cylinders by Gauss-Legendre quadrature (Pedersen 1997);
# cross-section Rc = R / sqrt(2), sheet Rt = T / sqrt(12) (Glatter & Kratky 1982).
ROD_SHEET = {
    "rod R3 L200": ("rod", 3.0, 200.0, "rc", 3.0 / np.sqrt(2.0)),
    "rod R1 L200": ("rod", 1.0, 200.0, "rc", 1.0 / np.sqrt(2.0)),
    "disc R100 T5": ("sheet", 100.0, 5.0, "rt", 5.0 / np.sqrt(12.0)),
    "disc R50 T5": ("sheet", 50.0, 5.0, "rt", 5.0 / np.sqrt(12.0)),
    # marginal: a rod too short for its cross-section law to 3 % (L / Rc = 47), a disc
    # too narrow for its thickness law (R / T = 10): refused, or "ok" within sigma + bias
    "rod R3 L100": ("rod", 3.0, 100.0, "rc", 3.0 / np.sqrt(2.0)),
}
_ROD_CURVES = {}


def _rod_sheet_run(name, noise, n=20):
    shape, R, L, key, truth = ROD_SHEET[name]
    if name not in _ROD_CURVES:
        q = np.geomspace(0.01, 2.0 if shape == "rod" else 1.2, 300)
        _ROD_CURVES[name] = (q, t.cylinder(q, R, L, n_mu=500)[0])
    q, I = _ROD_CURVES[name]
    Iobs, S = t.noisy(I * 1000.0, noise, np.random.default_rng(31), n)
    r = guinier(q, Iobs, S, shape=shape)
    ok = r["status"] == "ok"
    return r[key][ok], r[key + "_sigma"][ok], truth


@pytest.mark.parametrize("name", sorted(ROD_SHEET))
@pytest.mark.parametrize("noise", [0.001, 0.01])
def test_rod_and_sheet_ok_results_are_never_far_off(name, noise):
    v, s, truth = _rod_sheet_run(name, noise)
    # issue 15 target: no "ok" result off by more than 3 sigma plus the documented bias
    # (3 %: finite length / lateral size 1.5 % on size^2, cross-section curvature
    # ln[2 J1(x)/x]^2 = -x^2/4 - x^4/192 (der) up to ~3 % at q Rc = 1)
    assert np.all(np.abs(v - truth) <= 3 * s + 0.03 * truth)


@pytest.mark.parametrize("name", ["rod R3 L200", "rod R1 L200", "disc R100 T5"])
@pytest.mark.parametrize("noise", [0.001, 0.01])
def test_rod_and_sheet_within_3_percent_where_valid(name, noise):
    # where the laws hold (L / Rc >= 90, disc R / T = 20): the median within 3 % plus
    # the noise (the median sigma; at 1 % noise at I(0) the points near q Rc = 1 carry
    # 10-30 % noise). Measured: rod R3 L200 +0.8 %, rod R1 L200 -0.2 % (4 of 20 frames
    # "ok" at 0.1 % noise, the others "no_linear_region": the cross-section law's own
    # curvature is significant there), disc R100 T5 +1.1 %.
    v, s, truth = _rod_sheet_run(name, noise)
    assert v.size >= 3
    assert abs(np.median(v) - truth) <= 0.03 * truth + np.median(s)
