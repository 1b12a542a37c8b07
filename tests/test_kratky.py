"""Kratky transforms and shape summary against closed forms (docs/REFERENCES.md)."""

import numpy as np
import pytest
from shapes_linear import debye, sphere, thin_rod

from saxsnb.analysis import kratky, kratky_summary
from saxsnb.errors import SaxsInputError

Q = np.linspace(0.005, 8.0, 4000)


def test_plain_and_dimensionless_transform():
    I = np.exp(-(Q**2) * 4 / 3)[None, :] * 7.0
    K, Ks = kratky(Q, I, 0.1 * I)
    np.testing.assert_allclose(K, Q**2 * I)
    np.testing.assert_allclose(Ks, Q**2 * 0.1 * I)
    D = kratky(Q, I, rg=[2.0], i0=[7.0])
    np.testing.assert_allclose(D[0], (2 * Q) ** 2 * np.exp(-((2 * Q) ** 2) / 3))
    with pytest.raises(SaxsInputError, match="rg"):
        kratky(Q, I, rg=[2.0])


def test_debye_chain_kratky_values():
    rg = 1.0
    x = np.array([1.0, 2.0, 5.0, 10.0])  # x = (q Rg)^2
    q = np.sqrt(x) / rg
    D = kratky(q, debye(x)[None, :], rg=[rg], i0=[1.0])
    # Debye (1947): x P = 0.7358, 1.1353, 1.6027, 1.8000 at x = 1, 2, 5, 10 (docs/REFERENCES.md [der])
    np.testing.assert_allclose(D[0], [0.7358, 1.1353, 1.6027, 1.8000], atol=5e-5)
    # ... tending to 2 (the plateau)
    big = kratky(np.array([100.0]), debye(np.array([1e4]))[None, :], rg=[1.0], i0=[1.0])
    assert big[0, 0] == pytest.approx(2.0, abs=2e-4)


def test_peak_of_guinier_form_and_sphere():
    R = 1.0
    rg = np.sqrt(3 / 5) * R  # Guinier & Fournet (1955)
    I = np.stack([np.exp(-((Q * rg) ** 2) / 3), sphere(Q * R)])
    s = kratky_summary(Q, I, rg=[rg, rg], i0=[1.0, 1.0])
    # Durand et al. (2010): Guinier form peaks at q Rg = sqrt(3), height 3/e (docs/REFERENCES.md [der])
    assert s["peak_qrg"][0] == pytest.approx(np.sqrt(3), abs=2e-4)
    assert s["peak_height"][0] == pytest.approx(3 / np.e, abs=2e-4)
    # a true sphere peaks at q Rg = 1.6124, height 1.0274 (docs/REFERENCES.md [der])
    assert s["peak_qrg"][1] == pytest.approx(1.6124, abs=2e-4)
    assert s["peak_height"][1] == pytest.approx(1.0274, abs=2e-4)


def test_shape_classes():
    rg = 1.0
    I = np.stack(
        [
            sphere(Q * rg / np.sqrt(0.6)),
            np.exp(-((Q * rg) ** 2) / 3),
            debye((Q * rg) ** 2),
            thin_rod(Q * rg * np.sqrt(12)),  # thin rod: Rg^2 = L^2 / 12 (docs/REFERENCES.md)
        ]
    )
    s = kratky_summary(Q, I, rg=np.full(4, rg), i0=np.ones(4))
    assert s["shape_class"].tolist() == ["bell", "bell", "plateau", "rise"]
    assert np.isnan(s["peak_qrg"][2]) and np.isnan(s["peak_qrg"][3])  # no interior maximum
    assert s["level_high"][2] == pytest.approx(1.93, abs=0.02)  # Debye: x P -> 2 from below
    short = kratky_summary(Q[:200], I[:, :200], rg=np.full(4, rg), i0=np.ones(4))
    assert (short["shape_class"] == "undetermined").all()
    nan_rg = kratky_summary(Q, I[:1], rg=[np.nan], i0=[1.0])
    assert nan_rg["shape_class"][0] == "undetermined" and np.isnan(nan_rg["peak_qrg"][0])


def test_noisy_peak_and_batch_equals_loop(rng):
    rg = np.array([1.5, 2.0, 3.0])
    I = np.exp(-((Q[None, :] * rg[:, None]) ** 2) / 3) * 5.0
    I = I * (1 + 0.01 * rng.normal(size=I.shape))
    s = kratky_summary(Q, I, rg=rg, i0=np.full(3, 5.0))
    # Durand et al. (2010), J. Struct. Biol. 169, 45: Guinier-form peak at qRg = sqrt(3), height 3/e
    np.testing.assert_allclose(s["peak_qrg"], np.sqrt(3), atol=0.03)
    np.testing.assert_allclose(s["peak_height"], 3 / np.e, atol=0.01)
    for f in range(3):
        one = kratky_summary(Q, I[f], rg=rg[f], i0=5.0)
        for key, v in s.items():
            assert np.array_equal(v[f : f + 1], one[key], equal_nan=v.dtype.kind == "f"), key


def test_accessor_kratky(rng):
    import saxsnb

    rg = np.array([1.5, 2.0])
    I = 3.0 * np.exp(-((Q[None, :] * rg[:, None]) ** 2) / 3)
    ds = saxsnb.from_arrays(Q, I, 0.001 * I, scan={"denaturant": [0.0, 1.0]}, intensity_unit="1/cm")
    k = ds.saxs.kratky()
    assert k.dims == ("frame", "q") and k.attrs["units"] == "1/cm 1/nm^2" and "denaturant" in k.coords
    np.testing.assert_allclose(k.values, Q**2 * I)
    d = ds.saxs.kratky("rg")
    assert d.attrs["units"] == "1"
    np.testing.assert_allclose(d.values.max(axis=1), 3 / np.e, rtol=1e-4)  # Durand et al. (2010)
    s = ds.saxs.kratky_summary()
    assert s.shape_class.values.tolist() == ["bell", "bell"]
    np.testing.assert_allclose(s.peak_qrg.values, np.sqrt(3), atol=1e-3)
    assert s.peak_qrg.attrs["units"] == "1" and s.rg.attrs["units"] == "nm"
    with pytest.raises(SaxsInputError, match="normalize"):
        ds.saxs.kratky("i0")


def test_no_peak_reported_for_noisy_gaussian_chains():
    # Debye (1947): the Kratky plot of a Gaussian chain rises to a plateau, no maximum;
    # a compact Guinier form exp(-(q Rg)^2 / 3) peaks at q Rg = sqrt(3) (der)
    from saxsnb.analysis import guinier, kratky_summary

    rng = np.random.default_rng(1234)
    q = np.linspace(0.01, 1.6, 300)
    rg = 5.0
    x = (q * rg) ** 2
    chain = 2.0 * (np.expm1(-x) + x) / x**2 * 1000.0
    glob = np.exp(-x / 3.0) * 1000.0
    for noise in (0.01, 0.03, 0.1):
        for curve, want in ((chain, 0.05), (glob, 0.85)):
            S = noise * np.sqrt(curve * curve[0]) + 1e-4 * curve[0]
            I = curve + S * rng.standard_normal((60, q.size))
            g = guinier(q, I, np.broadcast_to(S, I.shape))
            k = kratky_summary(q, I, rg=g["rg"], i0=g["i0"])
            frac = np.isfinite(k["peak_qrg"]).mean()
            if curve is chain:
                assert frac <= want, (noise, frac)
            else:
                assert frac >= want, (noise, frac)


def test_blocks_equal_whole_and_temporaries_stay_below_the_input(rng, monkeypatch):
    # issue 13: the summary works on blocks of frames; the result must not depend on them
    import tracemalloc

    import saxsnb.analysis._kratky as mod

    F, n = 300, 1000
    q = np.linspace(0.02, 4.0, n)
    rg = np.linspace(1.5, 3.0, F)
    I = np.exp(-np.outer(rg, q) ** 2 / 3) * (1 + 0.01 * rng.standard_normal((F, n)))
    monkeypatch.setattr(mod, "BLOCK_POINTS", F * n)  # one block
    whole = kratky_summary(q, I, rg=rg, i0=np.ones(F))
    monkeypatch.setattr(mod, "BLOCK_POINTS", 10 * n)  # blocks of 10 frames
    tracemalloc.start()
    blocked = kratky_summary(q, I, rg=rg, i0=np.ones(F))
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    for k in whole:
        np.testing.assert_array_equal(blocked[k], whole[k], err_msg=k)
    assert peak < 0.5 * I.nbytes  # ~14 working arrays of 10 frames, not of 300


def test_summary_band_gather_is_order_and_block_free():
    # the cubic fit around the maximum works on the band of columns holding the points
    # within half_width (gathered per frame): the same numbers (to rounding) whatever the
    # q order, the block size and the other frames of a block (common practice: the fit
    # depends on the frame's own points only)
    import saxsnb.analysis._kratky as kk
    from saxsnb.analysis import kratky_summary

    q = np.linspace(0.05, 3.0, 400)
    R = np.linspace(2.0, 6.0, 9)
    x = q[None] * R[:, None]
    I = 100.0 * (3 * (np.sin(x) - x * np.cos(x)) / x**3) ** 2  # spheres (Rayleigh 1911)
    rg, i0 = np.sqrt(3 / 5) * R, np.full(R.size, 100.0)
    a = kratky_summary(q, I, rg=rg, i0=i0)
    b = kratky_summary(q[::-1].copy(), I[:, ::-1], rg=rg, i0=i0)
    old = kk.BLOCK_POINTS
    try:
        kk.BLOCK_POINTS = 400  # one frame a block
        c = kratky_summary(q, I, rg=rg, i0=i0)
    finally:
        kk.BLOCK_POINTS = old
    for other in (b, c):
        for k in ("peak_qrg", "peak_height", "level_mid", "level_high"):
            np.testing.assert_allclose(other[k], a[k], rtol=1e-12, err_msg=k)
        assert (other["shape_class"] == a["shape_class"]).all()
    # the sphere's dimensionless Kratky maximum, (q Rg)^2 P(q) of the closed form maximised
    # by scipy.optimize.minimize_scalar: q Rg = 1.61238, height 1.02737 (below the Guinier
    # form's sqrt(3) and 3/e)
    np.testing.assert_allclose(a["peak_qrg"], 1.61238, rtol=2e-4)
    np.testing.assert_allclose(a["peak_height"], 1.02737, rtol=2e-4)
