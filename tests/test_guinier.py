"""Guinier analysis against published closed forms and tables (docs/REFERENCES.md)."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from shapes_linear import cylinder, debye, flat_disc, rg_schulz, schulz_spheres, sphere

from saxsnb.analysis import guinier, guinier_search, rod_length
from saxsnb.errors import SaxsInputError


def test_guinier_form_exact():
    q = np.linspace(0.01, 1.0, 300)
    rg = np.array([1.0, 2.0, 3.5])
    I = np.array([10.0, 1.0, 250.0])[:, None] * np.exp(-((q * rg[:, None]) ** 2) / 3)
    for q_range in (None, (0.0, 0.5)):
        r = guinier(q, I, 0.01 * I, q_range=q_range, qrg_limit=1.8)
        np.testing.assert_allclose(r["rg"], rg, rtol=1e-9)
        np.testing.assert_allclose(r["i0"], [10.0, 1.0, 250.0], rtol=1e-9)
    r = guinier(q, I, 0.01 * I)
    assert (r["qrg_max"] <= 1.3).all() and (r["status"] == "ok").all()


# Sphere (Guinier & Fournet 1955): Rg = sqrt(3/5) R. Bias of an unweighted fit of ln I vs
# q^2 on 400 evenly spaced q in (0, qmax] (docs/REFERENCES.md, [der]; reproduced to 4 digits).
SPHERE_BIAS = [(0.5, 1.0026), (0.8, 1.0067), (1.0, 1.0106), (1.3, 1.0184), (1.5, 1.0251), (2.0, 1.0483)]
# Gaussian chain (Debye 1947), same fit (docs/REFERENCES.md, [der]).
CHAIN_BIAS = [(0.5, 0.9911), (1.0, 0.9650), (1.3, 0.9419)]


@pytest.mark.parametrize(("qrg", "ratio"), SPHERE_BIAS)
def test_sphere_bias_table(qrg, ratio):
    R = 2.0
    rg = np.sqrt(3 / 5) * R  # Guinier & Fournet (1955)
    qmax = qrg / rg
    q = np.linspace(qmax / 400, qmax, 400)
    r = guinier(q, sphere(q * R), q_range=(0.0, qmax), qrg_limit=3.0)
    assert r["rg"][0] / rg == pytest.approx(ratio, abs=1e-4)  # docs/REFERENCES.md table


@pytest.mark.parametrize(("qrg", "ratio"), CHAIN_BIAS)
def test_chain_bias_table(qrg, ratio):
    rg = 3.0
    q = np.linspace(qrg / rg / 400, qrg / rg, 400)
    r = guinier(q, debye((q * rg) ** 2), q_range=(0.0, 1.0))
    assert r["rg"][0] / rg == pytest.approx(ratio, abs=1e-4)  # docs/REFERENCES.md table


def _noisy_schulz(rng, n=40, noise=0.01):
    q = np.linspace(0.01, 2.5, 400)
    Rm = rng.uniform(2.0, 8.0, n)
    z = rng.uniform(10.0, 60.0, n)
    I = 100.0 * np.array([schulz_spheres(q, a, b) for a, b in zip(Rm, z)])
    sigma = noise * np.sqrt(100.0 * I)  # counting-like noise, 1 % at I(0)
    return q, I + rng.normal(size=I.shape) * sigma, sigma, rg_schulz(Rm, z)


def test_automatic_range_on_noisy_schulz_spheres(rng):
    q, I, s, rg_true = _noisy_schulz(rng)
    r = guinier(q, I, s)
    assert (r["status"] == "ok").all()
    err = np.abs(r["rg"] / rg_true - 1)
    # apparent Rg of Schulz spheres (Kotlarchyk & Chen 1983); the issue asks < 1 %
    assert np.median(err) < 0.01
    assert (r["qrg_max"] <= 1.3 + 1e-12).all()


def test_search_alone_and_fit_agree(rng):
    q, I, s, _ = _noisy_schulz(rng, n=5)
    found = guinier_search(q, I, s)
    r = guinier(q, I, s)
    assert np.array_equal(found["start"], r["start"]) and np.array_equal(found["stop"], r["stop"])
    # the same range given by hand gives the same numbers
    ranges = np.stack([q[found["start"]], q[found["stop"] - 1]], axis=1)
    fixed = guinier(q, I, s, q_range=ranges)
    # the automatic result is the average over the acceptable windows (module notes):
    # the chosen window's own line lies within the reported sigma of it
    assert (np.abs(fixed["rg"] - r["rg"]) <= r["rg_sigma"]).all()
    np.testing.assert_allclose(fixed["qrg_max"], r["qrg_max"], rtol=1e-12)


def test_batch_equals_loop(rng):
    q, I, s, _ = _noisy_schulz(rng, n=12)
    I[3, :40] = np.nan
    I[5, 2] = -1.0
    for kwargs in ({}, {"q_range": (0.02, 0.2)}, {"shape": "rod"}):
        batch = guinier(q, I, s, **kwargs)
        for f in range(I.shape[0]):
            one = guinier(q, I[f], s[f], **kwargs)
            for key, v in batch.items():
                assert np.array_equal(v[f : f + 1], one[key], equal_nan=v.dtype.kind == "f"), (key, f)


def test_long_cylinder_cross_section():
    R = 1.0
    q = np.linspace(0.3, 1.2, 40)  # q L >= 300, q Rc <= 0.85
    I = cylinder(q, R, 1000.0)
    r = guinier(q, I, shape="rod", q_range=(0.3, 1.2))
    # Rc^2 = R^2/2 (docs/REFERENCES.md [mem], from memory: loose tolerance); the curvature of
    # ln[2 J1(x)/x]^2 biases the fixed-range fit by about 1.4 %
    assert r["rc"][0] == pytest.approx(np.sqrt(0.5) * R, rel=0.02)
    assert r["radius"][0] == pytest.approx(R, rel=0.02)
    qa = np.linspace(0.05, 3.0, 300)
    auto = guinier(qa, 1e4 * cylinder(qa, R, 1000.0), np.full(300, 1e-3), shape="rod")
    assert auto["status"][0] == "ok"
    # docs/REFERENCES.md (from memory): cylinder cross-section Rc^2 = R^2 / 2
    # (the automatic result averages acceptable windows: within the 1.4 % bias above)
    assert auto["rc"][0] == pytest.approx(np.sqrt(0.5) * R, rel=0.02)


def test_flat_disc_thickness():
    T = 4.0
    q = np.linspace(0.1, 0.45, 30)  # q R >= 50, q Rt <= 0.52
    I = flat_disc(q, 500.0, T)
    r = guinier(q, I, shape="sheet", q_range=(0.1, 0.45))
    # Rt^2 = T^2/12 (docs/REFERENCES.md [mem], from memory: loose tolerance)
    assert r["thickness"][0] == pytest.approx(T, rel=0.02)
    assert r["rt"][0] == pytest.approx(T / np.sqrt(12), rel=0.02)


def test_rod_length():
    # cylinder R = 1, L = 30: Rg^2 = R^2/2 + L^2/12 (docs/REFERENCES.md [mem], from memory)
    L, Ls = rod_length(np.sqrt(0.5 + 900 / 12), np.sqrt(0.5), 0.1, 0.01)
    assert L == pytest.approx(30.0, rel=1e-12)
    assert Ls > 0
    assert np.isnan(rod_length(1.0, 2.0)[0])
    # end to end: whole-particle Rg at low q (elongated: q Rg <= 0.8), Rc from the rod fit
    q_lo = np.linspace(0.002, 0.8 / 8.7, 60)
    rg = guinier(q_lo, cylinder(q_lo, 1.0, 30.0), q_range=(0, 1))["rg"]
    q_hi = np.linspace(0.4, 1.2, 40)
    r = guinier(q_hi, cylinder(q_hi, 1.0, 30.0), shape="rod", q_range=(0.4, 1.2), rg=rg)
    assert r["length"][0] == pytest.approx(30.0, rel=0.03)  # loose: [mem] relation


def test_bad_input_statuses():
    q = np.linspace(0.01, 1.0, 100)
    I = np.tile(10.0 * np.exp(-((q * 2.0) ** 2) / 3), (5, 1))
    s = 0.01 * I
    I[0] = np.nan
    I[1, :] = -1.0
    s[2, :] = 0.0
    I[3, 5:] = np.nan
    auto = guinier(q, I, s)
    assert auto["status"].tolist() == ["no_data", "negative_intensity", "zero_sigma", "too_few_points", "ok"]
    assert np.isnan(auto["rg"][:4]).all() and np.isfinite(auto["rg"][4])
    I2 = np.tile(10.0 * np.exp(-((q * 2.0) ** 2) / 3), (6, 1))
    s2 = 0.01 * I2
    I2[0] = np.nan
    I2[1, 10] = -1.0
    s2[2, 12] = 0.0
    ranges = np.array([[0.05, 0.5], [0.05, 0.5], [0.05, 0.5], [2.0, 3.0], [0.05, 0.06], [0.05, 1.0]])
    fixed = guinier(q, I2, s2, q_range=ranges)
    assert fixed["status"].tolist() == [
        "no_data", "negative_intensity", "zero_sigma", "range_outside_data", "too_few_points",
        "qrg_limit_exceeded",
    ]
    assert np.isfinite(fixed["rg"][5])  # numbers kept, flagged
    with pytest.raises(SaxsInputError, match="shape"):
        guinier(q, I, s, shape="blob")
    with pytest.raises(SaxsInputError, match="q_range"):
        guinier(q, I, s, q_range=(0.5, 0.1))


def test_aggregation_is_flagged():
    q = np.linspace(0.02, 1.0, 200)
    base = 10.0 * np.exp(-((q * 2.0) ** 2) / 3)
    aggregate = 200.0 * np.exp(-((q * 25.0) ** 2) / 3) + 40.0 / (1 + (q * 30.0) ** 2)
    I = np.stack([base, base + aggregate, base + aggregate / 100])
    r = guinier(q, I, 0.005 * I)
    # frame 1: the aggregates dominate and are too large for this q grid (even the
    # shortest window exceeds q Rg = 1.3); frame 2: a small low-q upturn on the base curve
    assert r["status"].tolist() == ["ok", "qrg_limit_exceeded", "curvature_aggregation"]
    assert np.isnan(r["rg"][1:]).all()


def test_raw_flow_demo_background_is_refused():
    # issue 11: without the background subtraction the capillary's q^-3.5 term dominates
    # the lowest q of the first frames (small particles); the automatic range gave
    # Rg = 27.7 nm, status "ok", for 2.03 nm. It must refuse such frames, and every frame
    # it accepts must be near the truth (Kotlarchyk & Chen 1983 apparent Rg of the
    # demo's Schulz spheres).
    demo = pytest.importorskip("saxsnb.demo")
    series, background = demo.make_series("flow-growth", seed=0)
    truth = np.asarray(demo.truth(series)["rg_apparent_nm"])
    q, I, s = series.q.values, series.intensity.values, series.sigma.values
    raw = guinier(q, I, s)
    assert raw["status"][0] == "curvature_aggregation" and np.isnan(raw["rg"][0])
    ok = raw["status"] == "ok"
    # the unsubtracted background still biases the accepted frames a little (< 1 %
    # measured: 0.8 %), a bias no test on the curve alone can tell from the particle
    assert np.all(np.abs(raw["rg"][ok] / truth[ok] - 1) < 0.015)
    sub = guinier(q, I - background.intensity.values, np.hypot(s, background.sigma.values))
    assert (sub["status"] == "ok").all()
    assert np.all(np.abs(sub["rg"] / truth - 1) < 0.01)


def test_input_not_modified(rng):
    q, I, s, _ = _noisy_schulz(rng, n=3)
    I0, s0 = I.copy(), s.copy()
    guinier(q, I, s)
    guinier(q, I, s, q_range=(0.02, 0.1))
    assert np.array_equal(I, I0) and np.array_equal(s, s0)


@settings(max_examples=25, deadline=None)
@given(rg=st.floats(0.5, 20.0), i0=st.floats(1e-3, 1e6), n=st.integers(40, 400))
def test_automatic_recovers_exact_guinier(rg, i0, n):
    q = np.linspace(0.05 / rg, 3.0 / rg, n)
    I = i0 * np.exp(-((q * rg) ** 2) / 3)
    r = guinier(q, I, 0.01 * I)
    assert r["status"][0] == "ok"
    assert r["rg"][0] == pytest.approx(rg, rel=1e-7)
    assert r["i0"][0] == pytest.approx(i0, rel=1e-7)


def test_demo_flow_growth_truth():
    demo = pytest.importorskip("saxsnb.demo")
    series, background = demo.make_series("flow-growth", seed=0)
    truth = demo.truth(series)
    I = series.intensity.values - background.intensity.values
    s = np.hypot(series.sigma.values, background.sigma.values)
    r = guinier(series.q.values, I, s)
    assert (r["status"] == "ok").all()
    err = np.abs(r["rg"] / np.asarray(truth["rg_apparent_nm"]) - 1)
    # Counting noise is low in this scenario (sigma(Rg)/Rg ~ 0.05 %); the remaining error is
    # the curvature bias of the chosen windows on Schulz spheres (~0.2 % measured). 1 %
    # leaves a margin of several times that bias.
    assert err.max() < 0.01


# ------------------------------------------------------------------ the .saxs accessor
@pytest.fixture
def series(rng):
    import saxsnb

    q, I, s, rg_true = _noisy_schulz(rng, n=8)
    ds = saxsnb.from_arrays(q, I, s, scan={"temperature": np.linspace(20.0, 55.0, 8)}, intensity_unit="1/cm")
    return ds, rg_true


def test_accessor_guinier_dataset(series):
    ds, rg_true = series
    before = ds.copy(deep=True)
    res = ds.saxs.guinier()
    assert ds.identical(before)  # the input is not modified
    assert res.rg.dims == ("frame",) and "temperature" in res.coords
    assert res.rg.attrs["units"] == "nm" and res.i0.attrs["units"] == "1/cm"
    assert res.qrg_max.attrs["units"] == "1" and res.q_min.attrs["units"] == "1/nm"
    assert res.attrs["operation"] == "guinier" and '"shape": "compact"' in res.attrs["parameters"]
    direct = guinier(ds.q.values, ds.intensity.values, ds.sigma.values)
    np.testing.assert_array_equal(res.rg.values, direct["rg"])
    import matplotlib

    matplotlib.use("Agg")
    res.rg.plot(x="temperature")  # trends over the scan just work


def test_accessor_dask_equals_in_memory(series):
    pytest.importorskip("dask")
    ds, _ = series
    lazy = ds.chunk({"frame": 3})
    for kwargs in ({}, {"q_range": (0.02, 0.15)}):
        eager = ds.saxs.guinier(**kwargs)
        res = lazy.saxs.guinier(**kwargs)
        assert res.rg.chunks is not None
        res = res.compute()
        for v in eager.data_vars:
            assert np.array_equal(res[v].values, eager[v].values, equal_nan=res[v].dtype.kind == "f"), v


def test_accessor_per_frame_range_mask_and_errors(series):
    import xarray as xr

    from saxsnb.errors import SaxsFitError

    ds, _ = series
    ranges = np.tile([0.02, 0.15], (8, 1))
    ranges[2] = [0.02, 0.1]
    res = ds.saxs.guinier(q_range=ranges)
    direct = guinier(ds.q.values, ds.intensity.values, ds.sigma.values, q_range=ranges)
    np.testing.assert_array_equal(res.rg.values, direct["rg"])
    res_da = ds.saxs.guinier(q_range=xr.DataArray(ranges, dims=("frame", "bound")))
    np.testing.assert_array_equal(res_da.rg.values, direct["rg"])
    masked = ds.assign(mask=(("frame", "q"), np.zeros(ds.intensity.shape, bool)))
    masked["mask"][4, :] = True
    out = masked.saxs.guinier()
    assert out.status.values[4] == "no_data" and np.isnan(out.rg.values[4])
    with pytest.raises(SaxsFitError, match=r"frame 4 \(temperature = 40.0 degC\).*no_data") as err:
        masked.saxs.guinier(errors="raise")
    assert err.value.frame == 4 and err.value.parameter == "intensity"
    with pytest.raises(SaxsFitError, match="q_range"):
        ds.saxs.guinier(q_range=(5.0, 6.0), errors="raise")
    with pytest.raises(SaxsInputError, match="errors"):
        ds.saxs.guinier(errors="sometimes")
    with pytest.raises(SaxsInputError, match="q_range"):
        ds.saxs.guinier(q_range=np.zeros((3, 2)))


def test_accessor_rod_with_length():
    import saxsnb

    q_lo = np.linspace(0.002, 0.8 / 8.7, 60)
    q_hi = np.linspace(0.4, 1.2, 40)
    q = np.concatenate([q_lo, q_hi])
    I = cylinder(q, 1.0, 30.0)
    ds = saxsnb.from_arrays(q, I, 1e-4 * I)
    g = ds.saxs.guinier(q_range=(0.0, 0.1))
    rod = ds.saxs.guinier(q_range=(0.4, 1.2), shape="rod", rg=g)
    assert rod.length.attrs["units"] == "nm"
    assert rod.length.values[0] == pytest.approx(30.0, rel=0.03)  # [mem] relation, loose
    assert "rg" not in rod.data_vars
    # finite length (q L = 12 .. 36) still bends ln(q I): radius only to a few %
    assert rod.radius.values[0] == pytest.approx(1.0, rel=0.06)


def test_rising_rod_plot_is_not_called_aggregation():
    q = np.linspace(0.05, 3.0, 300)
    I = q**-0.5  # ln(q I) rises everywhere: no cross-section region, but no aggregation either
    r = guinier(q, I, 0.01 * I, shape="rod")
    assert r["status"][0] == "no_linear_region"
    # compact: ln I vs q^2 of a power law curves upwards, as aggregates do
    assert guinier(q, I, 0.01 * I)["status"][0] == "curvature_aggregation"


def test_bad_first_points_are_skipped():
    q = np.linspace(0.02, 1.0, 200)
    I = 10.0 * np.exp(-((q * 2.5) ** 2) / 3)
    I[:2] *= [0.3, 0.6]  # a beam-stop shadow on the first two points
    found = guinier_search(q, I, 0.005 * I)
    assert found["status"][0] == "ok" and found["start"][0] == 2
    r = guinier(q, I, 0.005 * I)
    assert r["rg"][0] == pytest.approx(2.5, rel=1e-6)
    only_first = guinier(q, I, 0.005 * I, n_starts=1)
    assert only_first["status"][0] != "ok"


def test_automatic_without_sigma(rng):
    q = np.linspace(0.02, 1.5, 300)
    I = np.exp(-((q * 3.0) ** 2) / 3) * (1 + 0.01 * rng.normal(size=(4, 300)))
    r = guinier(q, I)  # unweighted; uncertainties from the scatter of the residuals
    assert (r["status"] == "ok").all()
    assert np.all(np.abs(r["rg"] - 3.0) < 4 * r["rg_sigma"])


def test_fixed_range_sigma_scaled_by_chi2_when_sigma_is_too_small():
    # common practice: scale the covariance by chi2_reduced when the fit misses the data
    rng = np.random.default_rng(1234)
    q = np.linspace(0.02, 0.4, 80)
    I0 = 100.0 * np.exp(-(q * 3.0) ** 2 / 3)
    true_s = np.broadcast_to(0.03 * I0, (200, q.size))
    I = I0 + true_s * rng.standard_normal((200, q.size))
    told = guinier(q, I, true_s / 3.0, q_range=(0.02, 0.4))  # stated sigma 3x too small
    right = guinier(q, I, true_s, q_range=(0.02, 0.4))
    assert np.median(told["sigma_scale"]) == pytest.approx(3.0, rel=0.1)
    np.testing.assert_allclose(np.median(told["rg_sigma"]), np.median(right["rg_sigma"]), rtol=0.1)
    assert (right["sigma_scale"] == 1.0).mean() > 0.95
    np.testing.assert_allclose(told["rg"], right["rg"], rtol=1e-12)


def test_fixed_range_fast_route_equals_general_route(rng):
    # issue 14: the fixed-range fit takes a fast route for frames whose window holds only
    # usable points; frames with masked (NaN), negative or zero-sigma points take the
    # general route. Results equal a per-frame call (batch equals loop) and a plain
    # weighted least squares (numpy.polyfit with w = 1/sigma of ln I, common practice).
    q, I, s, _ = _noisy_schulz(rng, n=6)
    I, s = I.copy(), s.copy()
    I[1, 5] = np.nan  # masked point
    I[2, 7] = -1.0  # negative intensity
    s[3, 9] = 0.0  # zero sigma
    rng_ = (q[3], q[40])
    batch = guinier(q, I, s, q_range=rng_)
    for f in range(6):
        one = guinier(q, I[f], s[f], q_range=rng_)
        for key in ("rg", "rg_sigma", "i0", "chi2_reduced", "q_min", "q_max", "n_points"):
            np.testing.assert_allclose(batch[key][f], one[key][0], rtol=1e-12, equal_nan=True)
        assert batch["status"][f] == one["status"][0]
    assert batch["status"].tolist()[2:4] == ["negative_intensity", "zero_sigma"]
    assert np.isfinite(batch["rg"][[0, 1, 4, 5]]).all()
    for f in (0, 1, 4):
        m = (q >= rng_[0]) & (q <= rng_[1]) & np.isfinite(I[f])
        b, a = np.polyfit(q[m] ** 2, np.log(I[f, m]), 1, w=I[f, m] / s[f, m])
        assert batch["rg"][f] == pytest.approx(np.sqrt(-3 * b), rel=1e-10)
        assert batch["i0"][f] == pytest.approx(np.exp(a), rel=1e-10)


def test_report_cautions_when_no_subtraction_is_recorded(tmp_path):
    # issue 11: the README tour once fitted the raw flow data; the report of a Guinier
    # result read from files with no subtraction in its history says so (common practice:
    # Guinier analysis assumes a subtracted curve), and a subtracted one does not
    import saxsnb
    from saxsnb.demo.files import write_demo

    write_demo(tmp_path, names=["flow-growth"])
    raw = saxsnb.read_series(tmp_path / "flow-growth", scan="position")
    assert "caution: no background subtraction" in raw.saxs.guinier().saxs.report()
    sub = raw.saxs.subtract(saxsnb.read_series(tmp_path / "flow-growth" / "background", scan="position"))
    assert "caution" not in sub.saxs.guinier().saxs.report()
    # curves made in memory (from_arrays) carry no claim either way: no caution
    q = np.linspace(0.02, 1.0, 100)
    mem = saxsnb.from_arrays(q, np.exp(-(2 * q) ** 2 / 3), np.full(100, 0.01))
    assert "caution" not in mem.saxs.guinier().saxs.report()


def test_errors_raise_passes_cautions_with_a_warning():
    import saxsnb
    from saxsnb.errors import SaxsFitError, SaxsWarning

    # a Gaussian chain (Debye 1947, P = 2 (e^-x + x - 1) / x^2, x = (q Rg)^2) from q Rg = 0.6,
    # noise-free: every window curves upwards, status "curved_approximate" (numbers kept).
    # errors="raise" stops on failures only: the caution passes with a SaxsWarning.
    rg = 5.0
    q = np.linspace(0.6 / rg, 5.0 / rg, 100)
    x = (q * rg) ** 2
    I = 1000.0 * 2 * (np.exp(-x) + x - 1) / x**2
    ds = saxsnb.from_arrays(q, np.tile(I, (3, 1)), np.tile(1e-4 * I, (3, 1)),
                            scan={"temperature": [1.0, 2.0, 3.0]})
    with pytest.warns(SaxsWarning, match="3 of 3 frames carry a caution .curved_approximate."):
        r = ds.saxs.guinier(errors="raise")
    assert (r["status"] == "curved_approximate").all()
    assert np.all(np.abs(r["rg"] / rg - 1) < 0.05)
    with pytest.raises(SaxsFitError, match="q_range"):
        ds.saxs.guinier(q_range=(5.0, 6.0), errors="raise")


def test_empty_inputs_give_a_clear_error():
    # zero frames or a q grid with no points: an error of the family naming the input
    # (numpy's reduction error before)
    with pytest.raises(SaxsInputError, match="no frames"):
        guinier(np.linspace(0.1, 1.0, 50), np.zeros((0, 50)))
    with pytest.raises(SaxsInputError, match="no q points"):
        guinier(np.zeros(0), np.zeros((3, 0)))
