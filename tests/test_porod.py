"""Porod analysis against closed forms (docs/REFERENCES.md): sphere invariant, Porod volume,
surface to volume, power-law exponents of sphere, chain and rod tails."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from shapes_linear import debye, schulz_spheres, sphere, thin_rod

from saxsnb.analysis import (
    default_porod_range,
    guinier_integrals,
    invariant,
    porod_fit,
    power_law_fit,
)
from saxsnb.errors import SaxsInputError


@pytest.fixture(scope="module")
def sphere_curve():
    q = np.linspace(1e-3, 400.0, 400_001)
    return q, sphere(q)  # R = 1, I(0) = 1


def test_sphere_invariant_volume_surface(sphere_curve):
    q, I = sphere_curve
    # Kp from q^4 I over a whole number of periods of cos^2(qR) (period pi) ending at 400
    q_lo = 400.0 - 63 * np.pi
    pf = porod_fit(q, I, q_range=(q_lo, 400.0), background=0.0)
    # Porod (1951): a sphere P(q) -> 9 / (2 q^4 R^4), so Kp = 4.5 [der]
    assert pf["porod_constant"][0] == pytest.approx(4.5, rel=1e-3)
    r = invariant(q, I, rg=np.sqrt(0.6), i0=1.0, porod_constant=pf["porod_constant"])
    # docs/REFERENCES.md (sphere R = 1 integrated to q = 400 plus Kp/qmax): Q = 3 pi / 2 = 4.71240,
    # V = 4 pi / 3 = 4.18878, S/V = 3.0000 [der]
    assert r["invariant"][0] == pytest.approx(3 * np.pi / 2, rel=2e-5)
    assert r["porod_volume"][0] == pytest.approx(4 * np.pi / 3, rel=2e-5)
    assert r["surface_to_volume"][0] == pytest.approx(3.0, rel=1e-3)
    assert r["invariant_high"][0] == pytest.approx(4.5 / 400.0, rel=1e-3)
    assert r["invariant_low"][0] == pytest.approx(1e-9 / 3, rel=1e-3)  # int_0^0.001 q^2 dq
    assert np.isnan(r["specific_surface"][0])
    r2 = invariant(q, I, rg=np.sqrt(0.6), i0=1.0, porod_constant=4.5, volume_fraction=0.1)
    # S/V of the sample = pi phi (1 - phi) Kp / Q (Porod 1951; docs/REFERENCES.md)
    assert r2["specific_surface"][0] == pytest.approx(np.pi * 0.1 * 0.9 * 4.5 / (1.5 * np.pi), rel=1e-4)


def test_guinier_integrals_against_quadrature():
    from scipy import integrate

    for a, s in ((0.5, 2.0), (3.0, 0.01), (1e-3, 0.2), (2.0, 1e-9)):
        # scipy.integrate.quad (reference library)
        j2 = integrate.quad(lambda x, s=s: x**2 * np.exp(-s * x * x), 0, a, epsabs=0, epsrel=1e-13)[0]
        j4 = integrate.quad(lambda x, s=s: x**4 * np.exp(-s * x * x), 0, a, epsabs=0, epsrel=1e-13)[0]
        g2, g4 = guinier_integrals(np.array(a), np.array(s))
        assert g2 == pytest.approx(j2, rel=1e-10)
        assert g4 == pytest.approx(j4, rel=1e-10)


def test_exponent_of_sphere_chain_rod_tails():
    # smooth surface -> 4 (Porod 1951): polydisperse spheres smooth the oscillations
    q = np.geomspace(10.0, 50.0, 200)
    assert power_law_fit(q, schulz_spheres(q, 1.0, 20, n=2001), q_range=(10, 50))["exponent"][0] == (
        pytest.approx(4.0, abs=0.02)
    )
    # Gaussian chain -> 2 (Debye 1947; Bale & Schmidt 1984 [mem]: from memory, loose)
    q = np.geomspace(10.0, 100.0, 100)
    assert power_law_fit(q, debye(q**2), q_range=(10, 100))["exponent"][0] == pytest.approx(2.0, abs=0.02)
    # thin rod -> 1 (Neugebauer 1943; Schmidt 1991 [mem]: from memory, loose)
    q = np.geomspace(100.0, 2000.0, 100)
    assert power_law_fit(q, thin_rod(q), q_range=(100, 2000))["exponent"][0] == pytest.approx(1.0, abs=0.02)


def test_porod_constant_with_fitted_background(rng):
    q = np.linspace(1.5, 4.0, 200)
    Kp, B = np.array([3.0, 0.5, 10.0]), np.array([0.01, 0.002, 0.05])
    I = Kp[:, None] / q**4 + B[:, None]
    s = 0.01 * I
    noisy = I + rng.normal(size=I.shape) * s
    r = porod_fit(q, noisy, s, q_range=(1.5, 4.0))
    assert (r["status"] == "ok").all()
    assert np.all(np.abs(r["porod_constant"] - Kp) < 4 * r["porod_constant_sigma"])
    assert np.all(np.abs(r["background"] - B) < 4 * r["background_sigma"])
    assert np.all(r["porod_background_cov"] < 0)  # intercept and slope anticorrelated (x > 0)
    exact = porod_fit(q, I, s, q_range=(1.5, 4.0))
    np.testing.assert_allclose(exact["porod_constant"], Kp, rtol=1e-9)
    given = porod_fit(q, I, s, q_range=(1.5, 4.0), background=B)
    np.testing.assert_allclose(given["porod_constant"], Kp, rtol=1e-12)
    assert (given["background_sigma"] == 0).all()
    # exponent on I - B recovers 4 exactly
    pl = power_law_fit(q, I, s, q_range=(1.5, 4.0), background=B)
    np.testing.assert_allclose(pl["exponent"], 4.0, rtol=1e-10)


def test_invariant_uncertainty_by_monte_carlo(rng):
    q = np.linspace(0.05, 3.0, 300)
    I = 100 * np.exp(-(q**2) * 4.0 / 3.0) + 0.5 / q**4 * (1 - np.exp(-(q * 2) ** 6))
    s = 0.02 * I + 0.01
    base = invariant(q, I, s, rg=2.0, i0=100.0, porod_constant=0.5)
    draws = [
        invariant(q, I + rng.normal(size=I.shape) * s, rg=2.0, i0=100.0, porod_constant=0.5)["invariant"][0]
        for _ in range(300)
    ]
    # first-order propagation against the scatter of a Monte-Carlo (common practice)
    assert np.std(draws) == pytest.approx(base["invariant_sigma"][0], rel=0.15)


def test_batch_equals_loop_and_statuses(rng):
    q = np.linspace(0.5, 5.0, 300)
    I = 2.0 / q[None, :] ** 4 * rng.uniform(0.5, 2.0, (6, 1)) + 0.01
    s = 0.01 * I
    I = I + rng.normal(size=I.shape) * s
    I[1] = np.nan
    I[2, -5:] = -1.0
    s[3, -3] = 0.0
    for func in (power_law_fit, porod_fit):
        batch = func(q, I, s)
        for f in range(6):
            one = func(q, I[f], s[f])
            for key, v in batch.items():
                assert np.array_equal(v[f : f + 1], one[key], equal_nan=v.dtype.kind == "f"), (func, key)
    pl = power_law_fit(q, I, s)
    assert pl["status"].tolist()[:4] == ["ok", "no_data", "negative_intensity", "zero_sigma"]
    assert porod_fit(q, I, s)["status"][2] == "ok"  # no logarithm: negative points are data
    out = power_law_fit(q, I, s, q_range=(8.0, 9.0))
    assert out["status"][0] == "range_outside_data"
    few = porod_fit(q, I, s, q_range=(4.99, 5.0))
    assert few["status"][0] == "too_few_points"
    with pytest.raises(SaxsInputError, match="background"):
        porod_fit(q, I, s, background="flat")
    assert default_porod_range(q) == (q[224], 5.0)


def test_accessor_porod_and_invariant(rng):
    import saxsnb

    q = np.linspace(0.05, 4.0, 400)
    rg = np.array([2.0, 2.5, 3.0])
    R = np.sqrt(5 / 3) * rg
    I = np.array([sphere(q * r) * (4 / 3 * np.pi * r**3) ** 2 * 1e-4 for r in R]) + 0.002
    s = 1e-3 * I
    ds = saxsnb.from_arrays(q, I, s, scan={"time": [0.0, 10.0, 20.0]}, intensity_unit="1/cm")
    before = ds.copy(deep=True)
    p = ds.saxs.porod((2.5, 4.0))
    assert p.porod_constant.attrs["units"] == "1/cm 1/nm^4" and p.exponent.attrs["units"] == "1"
    assert "time" in p.coords
    direct = porod_fit(q, I, s, q_range=(2.5, 4.0))
    np.testing.assert_array_equal(p.porod_constant.values, direct["porod_constant"])
    given = ds.saxs.porod((2.5, 4.0), background=0.002)
    assert (given.exponent_status == "ok").all()  # (a monodisperse sphere tail oscillates: no exponent check)
    inv = ds.saxs.invariant(porod=given, volume_fraction=0.05)
    assert inv.invariant.attrs["units"] == "1/cm 1/nm^3" and inv.porod_volume.attrs["units"] == "nm^3"
    # Porod volume of a sphere 4/3 pi R^3 (Porod 1951): loose, the data stop at q R ~ 15 and
    # Kp from a short oscillating tail is uncertain by a few %
    np.testing.assert_allclose(inv.porod_volume.values, 4 / 3 * np.pi * R**3, rtol=0.05)
    assert (inv.specific_surface_sigma > 0).all()
    ds.saxs.kratky("rg")
    ds.saxs.kratky_summary()
    assert ds.identical(before)  # nothing the user loaded is modified
    lazy = ds.chunk({"frame": 1}).saxs.invariant(porod=given, volume_fraction=0.05).compute()
    for v in inv.data_vars:
        assert np.array_equal(lazy[v].values, inv[v].values, equal_nan=inv[v].dtype.kind == "f"), v


def test_accessor_porod_errors(rng):
    import saxsnb
    from saxsnb.errors import SaxsFitError

    q = np.linspace(0.5, 3.0, 100)
    I = 2.0 / q**4 + 0.01
    ds = saxsnb.from_arrays(q, np.stack([I, I]), 0.01 * np.stack([I, I]), scan={"time": [0.0, 5.0]})
    with pytest.raises(SaxsFitError, match=r"frame 0 \(time = 0.0 s\).*range_outside_data") as err:
        ds.saxs.porod(q_range=(10.0, 20.0), errors="raise")
    assert err.value.parameter == "q_range"
    with pytest.raises(SaxsInputError, match="background"):
        ds.saxs.porod(background="flat")
    res = ds.saxs.porod(q_range=(1.0, 3.0), background=np.array([0.01, 0.01]))
    np.testing.assert_allclose(res.porod_constant.values, 2.0, rtol=1e-9)
    np.testing.assert_allclose(res.exponent.values, 4.0, rtol=1e-9)


@settings(max_examples=30, deadline=None)
@given(kp=st.floats(1e-3, 1e3), b=st.floats(-1e-2, 1e-2), p=st.floats(1.0, 4.5))
def test_exact_power_laws_are_recovered(kp, b, p):
    q = np.linspace(1.0, 3.0, 60)
    porod = porod_fit(q, kp / q**4 + b, q_range=(1.0, 3.0))
    assert porod["porod_constant"][0] == pytest.approx(kp, rel=1e-6, abs=1e-9)
    pl = power_law_fit(q, kp * q**-p, q_range=(1.0, 3.0))
    assert pl["exponent"][0] == pytest.approx(p, rel=1e-9)


@pytest.mark.parametrize("kind", ["nan", "constant", "negative", "zeros"])
def test_nasty_frames_give_a_status_and_no_warning(kind):
    # warnings are errors in the suite: none may leak from these calls (issue 12)
    from saxsnb.analysis import guinier, invariant, kratky, kratky_summary, porod

    q = np.linspace(0.05, 3.0, 100)
    I = {"nan": np.full(100, np.nan), "constant": np.full(100, 5.0), "negative": -np.ones(100),
         "zeros": np.zeros(100)}[kind]
    S = np.full(100, 0.1)
    for r in (guinier(q, I, S), guinier(q, I, S, q_range=(0.05, 0.5)), porod(q, I, S),
              porod(q, I, S, background=0.0)):
        assert r["status"][0] != "ok"
    kratky(q, I)
    kratky_summary(q, I, rg=2.0, i0=1.0)
    r = invariant(q, I, S, rg=np.array([2.0]), i0=np.array([5.0]), porod_constant=np.array([1.0]))
    assert "status" in r


def test_invariant_without_guinier_when_low_q_part_is_tiny():
    # sphere R = 1 (Guinier & Fournet 1955) measured from q R = 0.5: the part below is
    # about 4e-3 of the invariant 3 pi / 2 (docs/REFERENCES.md, der), so it is estimated
    from saxsnb.analysis import invariant

    q = np.linspace(0.5, 400.0, 200001)
    x = q
    I = (3 * (np.sin(x) - x * np.cos(x)) / x**3) ** 2
    r = invariant(q, I, rg=np.nan, i0=np.nan, porod_constant=4.5)
    assert r["status"][0] == "low_q_estimated"
    assert r["invariant"][0] == pytest.approx(1.5 * np.pi, rel=2e-3)
    assert r["invariant_low_sigma"][0] == pytest.approx(r["invariant_low"][0])
    # from q R = 2 the low-q part is a large share: still refused
    m = q >= 2.0
    r = invariant(q[m], I[m], rg=np.nan, i0=np.nan, porod_constant=4.5)
    assert r["status"][0] == "no_guinier"


def _joint_fit_every_node(q, I, S, q_range):
    """The previous implementation of the joint fit I = A q^-p + B (kept here as the
    reference of the fast one): the chi-square at every node of the grid 0.5..7 step 0.01
    (A, B by weighted least squares, residuals summed directly), the parabola through the
    grid minimum and its neighbours, sigma_p = sqrt(2 / chi2'') scaled by max(chi2_red, 1)."""
    m = (q >= q_range[0]) & (q <= q_range[1])
    x, y, s = q[m], I[:, m], S[:, m]
    grid = np.linspace(0.5, 7.0, 651)
    ok = np.isfinite(y) & np.isfinite(s)
    w = np.where(ok, 1.0 / np.where(ok, s, 1.0) ** 2, 0.0)
    y = np.where(ok, y, 0.0)
    chi2 = np.empty((y.shape[0], grid.size))
    for g, p in enumerate(grid):
        X = x**-p
        a = np.stack([np.stack([(w * X * X).sum(-1), (w * X).sum(-1)], -1),
                      np.stack([(w * X).sum(-1), w.sum(-1)], -1)], -2)
        b = np.stack([(w * X * y).sum(-1), (w * y).sum(-1)], -1)
        A, B = np.linalg.solve(a, b[..., None])[..., 0].T
        chi2[:, g] = (w * (y - A[:, None] * X - B[:, None]) ** 2).sum(-1)
    j = np.clip(chi2.argmin(1), 1, grid.size - 2)
    r = np.arange(y.shape[0])
    c0, c1, c2 = chi2[r, j - 1], chi2[r, j], chi2[r, j + 1]
    h = 0.01
    shift = 0.5 * h * (c0 - c2) / (c0 - 2 * c1 + c2)
    p = grid[j] + np.clip(shift, -h, h)
    red = (c1 - 0.25 * (c0 - c2) * shift / h) / (ok.sum(-1) - 3)
    return p, np.sqrt(2.0 / ((c0 - 2 * c1 + c2) / h**2) * np.maximum(red, 1.0))


def _tails(rng, n=24):
    q = np.linspace(1.0, 5.0, 200)
    p = rng.uniform(2.5, 4.5, n)
    I = rng.uniform(0.5, 2.0, (n, 1)) * q ** -p[:, None] + (5.0 ** -p * rng.uniform(0.1, 1.0, n))[:, None]
    S = 0.01 * I
    return q, I + rng.normal(size=I.shape) * S, S, p


def test_joint_exponent_equals_the_every_node_grid_fit(rng):
    # the coarse-grid search + fine-grid descent returns the fit of the full 651-node grid
    # (documented tolerance: exponent 1e-8 relative, sigma 1e-5 relative: rounding in the
    # second difference of chi-square), on noisy tails, exact tails and frames with NaN points
    from saxsnb.analysis import porod

    q, I, S, p_true = _tails(rng)
    I[3, 5:9] = np.nan
    I[-1] = 1.5 * q**-3.25 + 0.002  # exact: chi2 ~ 0 at the minimum
    S[-1] = 1e-6 * I[-1]
    r = porod(q, I, S, q_range=(2.0, 5.0))
    p, sp = _joint_fit_every_node(q, I, S, (2.0, 5.0))
    assert (r["exponent_status"] == "ok").all()
    np.testing.assert_allclose(r["exponent"], p, rtol=1e-8)
    np.testing.assert_allclose(r["exponent_sigma"], sp, rtol=1e-5)
    assert r["exponent"][-1] == pytest.approx(3.25, abs=1e-4)
    for f in (0, 3, len(I) - 1):  # batch equals loop
        one = porod(q, I[f], S[f], q_range=(2.0, 5.0))
        for key, v in r.items():
            assert np.array_equal(v[f : f + 1], one[key], equal_nan=v.dtype.kind == "f"), key


def test_joint_exponent_against_curve_fit(rng):
    # reference: scipy.optimize.curve_fit of A q^-p + B (reference library) on the same points;
    # ours sits on a 0.01 grid refined by a parabola: agreement to 1e-3 sigma, and its sigma
    # (profile curvature) within 5 % of the curve_fit one (absolute sigma, chi2_red ~ 1)
    from scipy.optimize import curve_fit

    from saxsnb.analysis import porod

    q, I, S, p_true = _tails(rng, 6)
    r = porod(q, I, S, q_range=(2.0, 5.0))
    m = q >= 2.0
    for f in range(len(I)):
        par, cov = curve_fit(lambda x, a, p, b: a * x**-p + b, q[m], I[f, m], p0=[1.0, 4.0, 0.0],
                             sigma=S[f, m], absolute_sigma=True)
        assert abs(r["exponent"][f] - par[1]) < 1e-3 * r["exponent_sigma"][f]
        scale = max(r["exponent_chi2_reduced"][f], 1.0) ** 0.5
        assert r["exponent_sigma"][f] == pytest.approx(np.sqrt(cov[1, 1]) * scale, rel=0.05)
        assert r["prefactor"][f] == pytest.approx(par[0], rel=1e-3)


def test_joint_exponent_uses_each_frames_own_range(rng):
    # per-frame ranges: the window is their union, but each frame is fitted on its own points
    from saxsnb.analysis import porod

    q, I, S, _ = _tails(rng, 2)
    both = porod(q, I, S, q_range=np.array([[2.0, 5.0], [3.0, 5.0]]))
    # (equal up to rounding: the zero-weight padding changes the order of the sums)
    for f, rng_ in ((0, (2.0, 5.0)), (1, (3.0, 5.0))):
        one = porod(q, I[f], S[f], q_range=rng_)["exponent"][0]
        assert both["exponent"][f] == pytest.approx(one, rel=1e-9)
