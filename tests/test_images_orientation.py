"""Orientation from azimuthal profiles (saxsnb.analysis._orientation)."""

import numpy as np
import pytest
from scipy.optimize import curve_fit

from saxsnb.analysis._geometry import DetectorGeometry
from saxsnb.analysis._integrate import integration_matrix
from saxsnb.analysis._orientation import azimuthal_peak_width, estimate_director, hermans_orientation
from saxsnb.errors import SaxsError

CHI = np.arange(-179.5, 180.0, 1.0)


@pytest.mark.parametrize("n,expected", [(1, 0.4), (2, 0.5714), (5, 0.7692)])
def test_hermans_cos2n_closed_form(n, expected):
    # I ~ cos^(2n) phi: <cos^2> = (2n+1)/(2n+3), f = 2n/(2n+3) (closed form, sin-weighted
    # integrals of powers of cos; Hermans & Platzek 1939 definition); issue 16 table.
    I = np.abs(np.cos(np.radians(CHI))) ** (2 * n)
    out = hermans_orientation(CHI, I[None], director_deg=0.0)
    assert abs(out["hermans"][0] - 2 * n / (2 * n + 3)) < 2e-4
    assert round(float(out["hermans"][0]), 4) == pytest.approx(expected, abs=2e-4)
    # 2D order parameter <cos 2phi> = n/(n+1) (Wallis ratio of cos powers, closed form)
    assert abs(out["order_2d"][0] - n / (n + 1)) < 2e-4


def test_hermans_director_perpendicular_and_auto():
    phi = np.radians(CHI - 37.0)
    I = np.stack([np.cos(phi) ** 4, np.sin(phi) ** 2, np.ones_like(phi)])
    out = hermans_orientation(CHI, I, director_deg=37.0)
    # sin^2 about the director: <cos^2> = (2/15)/(2/3) = 1/5, f = -1/5 (closed form)
    np.testing.assert_allclose(out["hermans"], [4 / 7, -0.2, 0.0], atol=2e-4)
    auto = hermans_orientation(CHI, I[:1], director_deg="auto")
    assert abs(auto["director_deg"][0] - 37.0) < 1e-6
    assert abs(estimate_director(CHI, I[1:2])[0] - (37.0 - 90.0)) < 1e-6
    # batch equals loop
    for k in range(3):
        one = hermans_orientation(CHI, I[k], director_deg=37.0)
        assert one["hermans"][0] == pytest.approx(out["hermans"][k], rel=1e-12, abs=1e-14)


def test_hermans_coarse_bins_are_exact_for_piecewise_constant_profiles():
    # the bin weights are exact integrals, so 12 bins of a step profile give the exact answer:
    # bins of 30 deg; I = 1 in the bins |phi| < 30 deg (and their mirror at 180), else 0:
    # <cos^2> = int_0^a cos^2 sin / int_0^a sin = (1 - c^3) / (3 (1 - c)), c = cos 30 (closed form)
    chi = np.arange(-165.0, 180.0, 30.0)
    I = ((np.abs(chi) < 16) | (np.abs(chi) > 164)).astype(float)
    c = np.cos(np.radians(30.0))
    cos2 = (1 - c**3) / (3 * (1 - c))
    out = hermans_orientation(chi, I[None])
    assert out["cos2"][0] == pytest.approx(cos2, rel=1e-12)


def test_hermans_sigma_against_monte_carlo_and_isotropic_image():
    rng = np.random.default_rng(1234)
    base = 200 * np.abs(np.cos(np.radians(CHI))) ** 4 + 50
    sig = np.sqrt(base)
    frames = base + rng.normal(size=(2000, CHI.size)) * sig
    out = hermans_orientation(CHI, frames, np.broadcast_to(sig, frames.shape))
    assert abs(out["hermans"].std() / out["hermans_sigma"].mean() - 1) < 0.1
    assert abs(out["order_2d"].std() / out["order_2d_sigma"].mean() - 1) < 0.1

    # an isotropic Poisson image through the cake: f = 0 within noise
    g = DetectorGeometry(63.5, 63.5, 1000.0, 0.172, 0.172, 0.1, shape=(128, 128))
    img = rng.poisson(100.0 * g.solid_angle() * g.polarization_factor(), size=(4, 128, 128))
    cake = integration_matrix(g, q_edges=[0.3, 0.5], n_chi=72)
    prof = cake.integrate(img)
    res = hermans_orientation(cake.chi, prof["intensity"][:, 0], prof["sigma"][:, 0])
    assert np.all(np.abs(res["hermans"]) < 3 * res["hermans_sigma"])
    assert np.all(res["hermans_sigma"] < 0.02)
    assert np.all(res["status"] == "ok")


def _two_arcs(chi, b, a, c0, w):
    d = (chi - c0 + 90) % 180 - 90
    return b + a * sum(np.exp(-0.5 * ((d + m * 180) / w) ** 2) for m in (-1, 0, 1))


def test_peak_width_against_closed_form_and_curve_fit():
    rng = np.random.default_rng(1234)
    widths = np.array([4.0, 10.0, 25.0, 40.0])
    truth = np.stack([_two_arcs(CHI, 20.0, 300.0, 75.0, w) for w in widths])
    sig = np.sqrt(truth)
    noisy = truth + rng.normal(size=truth.shape) * sig
    out = azimuthal_peak_width(CHI, noisy, sig)
    # FWHM = 2 sqrt(2 ln 2) w for a Gaussian (common practice)
    fwhm = 2 * np.sqrt(2 * np.log(2)) * widths
    assert np.all(np.abs(out["fwhm_deg"] - fwhm) < 4 * out["fwhm_sigma"] + 1e-3)
    assert np.all(np.abs((out["center_deg"] - 75.0 + 90) % 180 - 90) < 1.0)
    assert np.all(out["status"] == "ok")
    for k in range(widths.size):      # scipy's curve_fit (a reference library) on each frame
        p, cov = curve_fit(_two_arcs, CHI, noisy[k], p0=[20, 300, 75, widths[k]], sigma=sig[k])
        assert 2.3548200450309493 * abs(p[3]) == pytest.approx(out["fwhm_deg"][k], rel=1e-5)
        assert 2.3548200450309493 * np.sqrt(cov[3, 3]) == pytest.approx(out["fwhm_sigma"][k], rel=1e-3)
        one = azimuthal_peak_width(CHI, noisy[k], sig[k])     # batch equals loop
        assert one["fwhm_deg"][0] == pytest.approx(out["fwhm_deg"][k], rel=1e-8)


def test_peak_width_flat_and_bad_input():
    rng = np.random.default_rng(1234)
    flat = 100 + rng.normal(size=(20, CHI.size))
    out = azimuthal_peak_width(CHI, flat, np.ones_like(flat))
    assert np.mean(out["status"] == "ok") <= 0.1      # noise alone is (almost) never a peak
    empty = np.full((1, CHI.size), np.nan)
    assert azimuthal_peak_width(CHI, empty)["status"][0] == "no_data"
    assert hermans_orientation(CHI, empty)["status"][0] == "no_data"
    with pytest.raises(SaxsError, match="intensity"):
        hermans_orientation(CHI, np.ones((2, 5)))
    with pytest.raises(SaxsError, match="director"):
        hermans_orientation(CHI, np.ones((1, CHI.size)), director_deg="north")
