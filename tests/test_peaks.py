"""Peak baseline, detection and batched fitting (saxsnb.analysis._peaks, ds.saxs.find_peaks)."""

from pathlib import Path

import numpy as np
import pytest
from _synth_peaks import Q, curve, gaussian
from scipy.optimize import curve_fit

import saxsnb
from saxsnb.analysis import estimate_baseline, find_peaks, fit_peaks, peak_profile
from saxsnb.errors import SaxsFitError, SaxsInputError


def _series(rng, n_frames=6):
    pos = [np.array([0.9, 1.3, 1.8, 2.6]) * (1 + 0.001 * i) for i in range(n_frames)]
    heights = np.array([80.0, 40.0, 20.0, 10.0])
    I, S = zip(*(curve(p, heights, rng=rng) for p in pos))
    return np.array(pos), np.array(I), np.array(S)


def test_fit_matches_curve_fit_on_same_window(rng):
    # reference: scipy.optimize.curve_fit (general-purpose library) on the same points
    q = np.linspace(0.5, 1.5, 401)
    true = gaussian(q, 1.0123, 0.03, 50.0) + 3.0 + 0.5 * (q - 1.0)
    sig = np.full(q.size, 0.4)
    y = true + rng.normal(0, 1, q.size) * sig
    ci = int(np.argmin(np.abs(q - 1.0123)))
    wpts = 6.0  # window = +-round(2 * 6) = 12 points
    res = fit_peaks(q, y[None], sig[None], np.array([[ci]]), np.array([[wpts]]), profile="gaussian")
    sl = slice(ci - 12, ci + 13)

    def model(x, c, w, h, b0, b1):
        return gaussian(x, c, w, h) + b0 + b1 * (x - q[ci])

    p, cov = curve_fit(model, q[sl], y[sl], p0=[q[ci], 0.025, 45, 3, 0], sigma=sig[sl])
    assert res["position"][0, 0] == pytest.approx(p[0], rel=1e-7)
    assert res["fwhm"][0, 0] == pytest.approx(p[1], rel=1e-5)
    assert res["height"][0, 0] == pytest.approx(p[2], rel=1e-5)
    # covariance scaled by reduced chi-square, as curve_fit with absolute_sigma=False
    assert res["position_sigma"][0, 0] == pytest.approx(np.sqrt(cov[0, 0]), rel=1e-3)
    assert res["fwhm_sigma"][0, 0] == pytest.approx(np.sqrt(cov[1, 1]), rel=1e-3)


@pytest.mark.parametrize("profile", ["gaussian", "lorentzian", "pseudo_voigt"])
def test_profiles_recover_area(profile, rng):
    q = np.linspace(0.5, 2.0, 1500)
    c, w, h = 1.2, 0.03, 100.0
    y = peak_profile(q, c, w, h, 0.4, profile=profile) + 10.0
    sig = np.full(q.size, 0.1)
    res = find_peaks(q, (y + rng.normal(0, 0.1, q.size))[None], sig[None], profile=profile)
    assert res["n_peaks"][0] == 1
    assert res["position"][0, 0] == pytest.approx(c, abs=5e-5)
    assert res["fwhm"][0, 0] == pytest.approx(w, rel=0.05)
    # closed-form areas: Gaussian h w sqrt(pi / (4 ln 2)), Lorentzian h w pi / 2 (common practice)
    area = {"gaussian": h * w * np.sqrt(np.pi / (4 * np.log(2))), "lorentzian": h * w * np.pi / 2}
    area["pseudo_voigt"] = 0.4 * area["lorentzian"] + 0.6 * area["gaussian"]
    # the local line absorbs part of the Lorentzian tails outside the window: 10 % band
    assert res["area"][0, 0] == pytest.approx(area[profile], rel=0.1)


def test_find_peaks_recovers_positions_and_batch_equals_loop(rng):
    pos, I, S = _series(rng)
    res = find_peaks(Q, I, S)
    assert res["n_peaks"].tolist() == [4] * len(pos)
    assert np.allclose(res["position"][:, :4], pos, atol=3e-4)
    z = (res["position"][:, :4] - pos) / res["position_sigma"][:, :4]
    assert np.all(np.abs(z) < 6)
    assert np.isnan(res["position"][:, 4:]).all()
    for i in range(len(pos)):  # batch equals loop
        one = find_peaks(Q, I[i : i + 1], S[i : i + 1])
        assert np.allclose(one["position"], res["position"][i : i + 1], equal_nan=True)


def test_baseline_under_data_and_close_to_background(rng):
    pos, I, S = _series(rng, 2)
    b = estimate_baseline(Q, I, S)
    bg = 2.0 * Q**-2.0 + 5.0
    assert np.mean(b <= I + 3 * S) > 0.995
    assert np.median(np.abs(b / bg - 1)) < 0.01


def test_no_false_peaks_on_pure_noise(rng):
    bg = 2.0 * Q**-2.0 + 5.0
    sig = np.sqrt(bg / 2000)
    I = bg + rng.normal(0, 1, (20, Q.size)) * sig
    res = find_peaks(Q, I, np.broadcast_to(sig, I.shape))
    assert res["n_peaks"].sum() <= 1
    assert set(res["status"].tolist()) <= {"no_peaks", "ok"}


def test_bad_frames_get_status(rng):
    pos, I, S = _series(rng, 3)
    I = I.copy()
    I[1] = np.nan
    I[2] = 2.0 * Q**-2.0 + 5.0  # no peaks, no noise
    res = find_peaks(Q, I, S)
    assert res["status"].tolist() == ["ok", "no_data", "no_peaks"]
    assert res["n_peaks"].tolist() == [4, 0, 0]
    with pytest.raises(SaxsFitError, match="frame 1"):
        find_peaks(Q, I, S, errors="raise")


def test_q_range_excludes_peaks_outside(rng):
    pos, I, S = _series(rng, 2)
    res = find_peaks(Q, I, S, q_range=(1.0, 2.0))
    assert res["n_peaks"].tolist() == [2, 2]
    assert np.all((res["position"][:, :2] > 1.0) & (res["position"][:, :2] < 2.0))
    # issue 15: a q range without enough points is a status per frame, an error only on request
    assert find_peaks(Q, I, S, q_range=(6.0, 7.0))["status"].tolist() == ["range_outside_data"] * 2
    assert find_peaks(Q, I, S, q_range=(1.0, 1.02))["status"].tolist() == ["too_few_points"] * 2
    with pytest.raises(SaxsInputError, match="q_range"):
        find_peaks(Q, I, S, q_range=(6.0, 7.0), errors="raise")
    with pytest.raises(SaxsInputError, match="profile"):
        find_peaks(Q, I, S, profile="triangle")


def test_accessor_units_dask_and_tracks(rng):
    pos, I, S = _series(rng)
    T = np.array([30.0, 25.0, 20.0, 35.0, 40.0, 45.0])  # not sorted: tracks follow the scan
    ds = saxsnb.from_arrays(Q, I, S, scan={"temperature": T})
    pk = ds.saxs.find_peaks()
    assert pk["position"].attrs["units"] == "1/nm"
    assert pk["area"].attrs["units"] == "arb 1/nm"
    assert pk["track"].dims == ("frame", "peak")
    assert sorted(set(pk["track"].values[:, :4].ravel().tolist())) == [0, 1, 2, 3]
    assert pk.attrs["operation"] == "find_peaks"
    lazy = ds.chunk({"frame": 2}).saxs.find_peaks(track=False)
    assert lazy["position"].chunks is not None
    assert np.allclose(lazy["position"].values, pk["position"].values, equal_nan=True)
    assert np.all(ds["intensity"].values == I)  # input untouched


def test_blocks_equal_one_pass(rng):
    pos, I, S = _series(rng, 5)
    one = find_peaks(Q, I, S)
    blocks = find_peaks(Q, I, S, block=2)
    for key in ("position", "position_sigma", "area", "n_peaks"):
        assert np.allclose(one[key], blocks[key], equal_nan=True)
    I = I.copy()
    I[3] = np.nan
    with pytest.raises(SaxsFitError, match="frame 3"):
        find_peaks(Q, I, S, block=2, errors="raise")


def test_shoulder_on_the_flank_of_a_strong_peak_is_found(rng):
    # a peak 1/5 as high, 1.5 FWHM away: no local maximum of its own, only a shoulder
    I, S = curve([1.0, 1.03], [100.0, 20.0], rng=rng)
    res = find_peaks(Q, I[None], S[None])
    assert res["n_peaks"][0] == 2
    assert np.allclose(res["position"][0, :2], [1.0, 1.03], atol=2e-3)
    assert np.all(np.isfinite(res["prominence"][0, :2]))
    plain = find_peaks(Q, I[None], S[None], shoulders=False)
    assert plain["n_peaks"][0] == 1


def test_order_by_time_for_a_heating_cooling_cycle(rng):
    # heating then cooling: sorting by temperature would interleave the two legs
    pos = 1.0 + 0.004 * np.arange(5)
    I, S = zip(*(curve([p], [80.0], rng=rng) for p in pos))
    ds = saxsnb.from_arrays(Q, np.array(I), np.array(S),
                            scan={"temperature": [20.0, 21, 22, 21, 20], "time": [0.0, 60, 120, 180, 240]})
    by_time = ds.saxs.find_peaks(order_by="time")
    assert set(by_time["track"].values[:, 0].tolist()) == {0}
    assert by_time.attrs["order_by"] == "time"
    by_temperature = ds.saxs.find_peaks()
    assert len(set(by_temperature["track"].values[:, 0].tolist())) > 1
    with pytest.raises(SaxsInputError, match="order_by"):
        ds.saxs.find_peaks(order_by="pressure")


def test_negative_constant_and_nan_frames_get_a_status_and_no_warning():
    # issue 12 item 9: find_peaks on negative intensities gives a status, not "ok";
    # all-NaN and constant frames likewise; no numpy RuntimeWarning (warnings are errors)
    from saxsnb.analysis import index_phases

    q = np.linspace(0.3, 3.0, 500)
    bumps = 3 * np.exp(-(((q - 1.0) / 0.01) ** 2)) + 3 * np.exp(-(((q - 2.0) / 0.01) ** 2))
    I = np.stack([-5.0 + bumps, np.full(q.size, np.nan), np.ones(q.size), 10.0 + bumps])
    r = find_peaks(q, I, np.full(I.shape, 0.1))
    assert r["status"].tolist() == ["negative_intensity", "no_data", "no_peaks", "ok"]
    x = index_phases(r["position"], r["position_sigma"], r["fwhm"], r["prominence"], peak_status=r["status"])
    assert x["status"][1] == "no_data" and x["status"][2] == "no_peaks"


def _fit_inputs(n_frames=30, seed=20261203):
    """Fit inputs (q, residual, noise, index, width) of a fixed synthetic series: 3-6
    peaks per frame, Gaussian and pseudo-Voigt (eta 0.5) shapes, some close pairs."""
    from saxsnb.analysis._peaks import _noise_scale, _odd, detect_peaks

    rng = np.random.default_rng(seed)
    I, S = [], []
    for f in range(n_frames):
        n = rng.integers(3, 7)
        pos = np.sort(rng.uniform(0.6, 4.6, n))
        if f % 3 == 0:
            pos[1] = pos[0] + 0.035  # a close pair (backfitting case)
        h = rng.uniform(10.0, 100.0, n)
        y = 2.0 * Q**-2.0 + 5.0
        for c, hh in zip(pos, h):
            y = y + peak_profile(Q, c, 0.02, hh, 0.5 if f % 2 else 0.0, profile="pseudo_voigt")
        s = np.sqrt(y / 2000.0)
        I.append(y + rng.normal(size=Q.size) * s)
        S.append(s)
    I, S = np.array(I), np.array(S)
    scale = _noise_scale(I, S)[:, None]
    resid = I - estimate_baseline(Q, I, S, _scale=scale)
    window = _odd(max(0.05 * (Q[-1] - Q[0]) / (Q[1] - Q[0]), 15))
    index, _, wpts = detect_peaks(Q, resid, S, window=window)
    return Q, resid, S, index, wpts


def test_fits_within_tolerance_of_the_previous_implementation():
    # tests/data/peakfit_previous.npz: fit_peaks before the stopping rule (Levenberg-Marquardt
    # run to max_iter) on _fit_inputs(). Documented tolerance: Gaussian and Lorentzian within
    # 0.01 sigma (the previous fit stopped on a chi-square change of 1e-9, ours on the step)
    # and the same chi-square to 1e-5; pseudo-Voigt: the previous fit often stalled with eta
    # at a bound, so ours reaches a chi-square never above it (up to 4x lower) and positions
    # within 0.6 sigma of it. Validity may differ for a few poor fits (chi2_red > 10).
    old = np.load(Path(__file__).parent / "data" / "peakfit_previous.npz")
    inputs = _fit_inputs()
    for profile in ("gaussian", "lorentzian", "pseudo_voigt"):
        new = fit_peaks(*inputs, profile=profile)
        prev = {k.split("/")[1]: old[k] for k in old.files if k.startswith(profile + "/")}
        both = np.isfinite(prev["position"]) & np.isfinite(new["position"])
        flip = np.isfinite(prev["position"]) != np.isfinite(new["position"])
        assert flip.sum() <= 4 and np.all(np.fmax(prev["chi2_reduced"], new["chi2_reduced"])[flip] > 10)
        ratio = new["chi2_reduced"][both] / prev["chi2_reduced"][both]
        assert ratio.max() < 1 + 1e-8
        z = {k: np.abs(new[k] - prev[k])[both] / prev[k + "_sigma"][both]
             for k in ("position", "fwhm", "height")}
        if profile == "pseudo_voigt":
            assert z["position"].max() < 0.6
        else:
            assert ratio.min() > 1 - 1e-5
            assert max(v.max() for v in z.values()) < 0.01
        assert np.all(new["n_iterations"][both] >= 1)


@pytest.mark.parametrize("eta", [0.0, 0.35, 1.0])
def test_pseudo_voigt_matches_bounded_curve_fit(eta, rng):
    # reference: scipy.optimize.curve_fit (reference library, bounded trust-region fit,
    # 0 <= eta <= 1) on the same window; eta = 0 and 1 sit on the bounds
    q = np.linspace(0.5, 1.5, 401)
    c, w, h = 1.0123, 0.03, 50.0
    sig = np.full(q.size, 0.2)
    y = peak_profile(q, c, w, h, eta, profile="pseudo_voigt") + 3.0 + rng.normal(0, 1, q.size) * sig
    ci = int(np.argmin(np.abs(q - c)))
    res = fit_peaks(q, y[None], sig[None], np.array([[ci]]), np.array([[6.0]]))
    sl = slice(ci - 12, ci + 13)

    def model(x, c_, w_, h_, b0, b1, e):
        return peak_profile(x, c_, w_, h_, e, profile="pseudo_voigt") + b0 + b1 * (x - q[ci])

    p, _ = curve_fit(model, q[sl], y[sl], p0=[q[ci], 0.025, 45, 3, 0, 0.5], sigma=sig[sl],
                     bounds=([-np.inf, 1e-4, -np.inf, -np.inf, -np.inf, 0.0], [np.inf] * 5 + [1.0]),
                     xtol=1e-14, ftol=1e-14, gtol=1e-14)
    assert res["position"][0, 0] == pytest.approx(p[0], abs=1e-3 * res["position_sigma"][0, 0])
    assert res["fwhm"][0, 0] == pytest.approx(p[1], abs=1e-3 * res["fwhm_sigma"][0, 0])
    assert res["height"][0, 0] == pytest.approx(p[2], abs=1e-3 * res["height_sigma"][0, 0])
    assert res["eta"][0, 0] == pytest.approx(p[5], abs=1e-4)
    assert 1 <= res["n_iterations"][0, 0] <= 25


def test_iterations_per_peak_are_reported_and_few():
    # the stopping rule ends converged peaks: a handful of iterations, not max_iter (50)
    inputs = _fit_inputs()
    for profile, most in (("gaussian", 8), ("pseudo_voigt", 14)):
        it = fit_peaks(*inputs, profile=profile)["n_iterations"]
        assert np.nanmedian(it) <= most and np.nanmax(it) < 50
    r = find_peaks(inputs[0], *_series(np.random.default_rng(3), 2)[1:], iterations=True)
    assert np.all(r["n_iterations"][np.isfinite(r["position"])] >= 1)


def test_zingers_are_fitted_as_spikes_and_get_no_phase(rng):
    # issue 15: single-point spikes (zingers) on featureless frames are kept in the peak
    # table with a FWHM below the q step, so index_phases sets them aside as "spike" and
    # labels no phase (_bragg.bragg_evidence; a reflection is wider than 1.5 q steps)
    from saxsnb.analysis import index_phases

    bg = 2.0 * Q**-2.0 + 5.0
    sig = np.sqrt(bg / 2000.0)
    I = bg + rng.normal(size=(6, Q.size)) * sig
    for f in range(6):
        I[f, rng.choice(np.arange(50, 950), 3, replace=False)] += 40 * sig[0]
    pk = find_peaks(Q, I, np.broadcast_to(sig, I.shape))
    found = np.isfinite(pk["position"])
    assert found.sum() >= 6  # most zingers pass detection (the smoothing weakens some)
    assert np.all(pk["fwhm"][found] < 1.5 * (Q[1] - Q[0]))
    ix = index_phases(pk["position"], pk["position_sigma"], pk["fwhm"], pk["prominence"],
                      peak_status=pk["status"], q_step=Q[1] - Q[0])
    assert (ix["phase"] == "").all()
    assert all("spike" in str(r) for r in ix["rejected"])


def test_running_extreme_equals_scipy_filters():
    # reference: scipy.ndimage.minimum_filter1d / maximum_filter1d (mode="nearest"), which
    # _running_extreme replaces; integer-valued data make ties frequent
    from scipy import ndimage

    from saxsnb.analysis._peaks import _running_extreme

    rng = np.random.default_rng(1234)
    for n in (1, 2, 5, 100, 1000):
        y = rng.integers(0, 5, (4, n)).astype(float)
        for size in (1, 2, 3, 4, 15, 16, 25, 47, 1001):
            for fn, ref in ((np.minimum, ndimage.minimum_filter1d), (np.maximum, ndimage.maximum_filter1d)):
                expected = ref(y, size=size, axis=-1, mode="nearest")
                assert np.array_equal(_running_extreme(y, size, fn), expected)
    y = rng.normal(size=(3, 50))
    y[1, 7] = np.nan  # non-finite rows: the library filter itself
    assert np.array_equal(_running_extreme(y, 5), ndimage.minimum_filter1d(y, size=5, mode="nearest"),
                          equal_nan=True)


def test_find_peaks_equal_to_before_the_issue_14_speed_work():
    # tests/data/peaks_before_issue14.npz: find_peaks (pseudo-Voigt and Gaussian) on the
    # phase-ramp demo (seed 0) before the speed work of issue 14. Documented tolerance:
    # statuses, peak counts and tracks identical; position, FWHM, height and area within
    # 2e-3 of their one-sigma uncertainty (measured: under 7e-4). The fits now stop
    # without trying a step whose predicted chi-square decrease is under 1e-8 chi2_red
    # (below 1e-4 sigma), and sums run in another order; nothing else changed.
    old = np.load(Path(__file__).parent / "data" / "peaks_before_issue14.npz")
    ser, _ = saxsnb.demo.make_series("phase-ramp", seed=0)
    for profile in ("pseudo_voigt", "gaussian"):
        new = find_peaks(ser.q.values, ser.intensity.values, ser.sigma.values, profile=profile)
        prev = {k.split("/")[1]: old[k] for k in old.files if k.startswith(profile + "/")}
        assert new["status"].astype(str).tolist() == prev["status"].tolist()
        assert np.array_equal(new["n_peaks"], prev["n_peaks"])
        assert np.array_equal(new["track"], prev["track"])
        assert np.array_equal(np.isfinite(new["position"]), np.isfinite(prev["position"]))
        ok = np.isfinite(prev["position"])
        for key in ("position", "fwhm", "height", "area"):
            z = np.abs(new[key] - prev[key])[ok] / prev[key + "_sigma"][ok]
            assert z.max() < 2e-3, key
