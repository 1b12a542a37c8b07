"""Frame similarity and averaging (issue 10, items 2)."""

import itertools
import json

import numpy as np
import pytest

import saxsnb
from saxsnb import analysis
from saxsnb.analysis._status import check_codes


def _repeats(rng, n=10, m=400, damaged=()):
    q = np.linspace(0.1, 3.0, m)
    base = 100 * np.exp(-(q * 2.0) ** 2 / 3) + 1.0
    sigma = 0.01 * base
    I = base + rng.normal(size=(n, m)) * sigma
    for i in damaged:
        I[i] += 0.05 * base * np.exp(-((q / 0.4) ** 2))  # smooth low-q excess, 5 % at q -> 0
    return q, I, np.broadcast_to(sigma, I.shape).copy()


def test_run_pvalue_matches_exhaustive_enumeration():
    # exact: enumerate all 2^n sign sequences (Schilling 1990 distribution, checked by counting)
    for n in (2, 5, 9, 12):
        seqs = np.array(list(itertools.product([1.0, -1.0], repeat=n)))
        C = analysis.longest_same_sign_run(seqs)
        for k in range(1, n + 1):
            assert analysis.longest_run_pvalue(n, k) == pytest.approx((C >= k).mean(), abs=1e-12)


def test_holm_matches_the_textbook_procedure():
    # Holm (1979): sorted p_(i) * (m - i + 1), running maximum, capped at 1
    p = np.array([0.01, 0.04, 0.03, 0.005])
    expected = np.array([0.03, 0.06, 0.06, 0.02])
    np.testing.assert_allclose(analysis.adjust_pvalues(p), expected)
    np.testing.assert_allclose(analysis.adjust_pvalues(p, "bonferroni"), np.minimum(1, 4 * p))


@pytest.mark.parametrize("test", ["cormap", "chi2"])
def test_flags_exactly_the_damaged_frames(rng, test):
    q, I, S = _repeats(rng, damaged=(6, 8, 9))
    out = analysis.compare_frames(q, I, S, test=test)
    assert np.flatnonzero(out["outlier"]).tolist() == [6, 8, 9]
    check_codes(out["status"])


def test_false_positive_rate_over_many_seeds():
    # pure-noise repeats: with Holm's correction the family-wise rate is <= alpha (Holm 1979);
    # 400 series of 8 frames, alpha = 0.05: binomial 3-sigma margin above 0.05 is 0.083
    hits = {"cormap": 0, "chi2": 0}
    for seed in range(400):
        r = np.random.default_rng(seed)
        q, I, S = _repeats(r, n=8, m=200)
        for test in hits:
            hits[test] += analysis.compare_frames(q, I, S, test=test, alpha=0.05)["outlier"].any()
    assert hits["cormap"] / 400 <= 0.083
    assert 0.01 <= hits["chi2"] / 400 <= 0.083  # chi2 is continuous: the rate is near alpha


def test_pairwise_matrix_equals_loop(rng):
    q, I, S = _repeats(rng, n=7, m=120, damaged=(3,))
    pw = analysis.pairwise_similarity(q, I, block_elements=500)  # several blocks
    for i in range(7):
        for j in range(7):
            if i != j:
                # numpy reference: longest same-sign run by run-length encoding
                s = np.sign(I[i] - I[j]) >= 0
                runs = np.diff(np.flatnonzero(np.diff(np.r_[-1, s.astype(int), -1]) != 0))
                assert pw["score"][i, j] == runs.max()
    assert np.isnan(np.diag(pw["score"])).all()
    chi = analysis.pairwise_similarity(q, I, S, test="chi2")["score"]
    # chi2 of one pair by hand
    assert chi[1, 2] == pytest.approx(np.mean((I[1] - I[2]) ** 2 / (S[1] ** 2 + S[2] ** 2)))


def test_accessor_route_and_dask(rng):
    q, I, S = _repeats(rng, n=6, m=100, damaged=(5,))
    ds = saxsnb.from_arrays(q, I, S, scan={"time": np.arange(6.0)}, sample="protein")
    res = ds.saxs.compare_frames()
    ref = analysis.compare_frames(q, I, S)
    np.testing.assert_array_equal(res["p_value"].values, ref["p_value"])
    assert res["pairwise_score"].dims == ("frame", "frame2")
    assert res.attrs["sample"] == "protein" and res.attrs["operation"] == "compare_frames"
    lazy = ds.chunk({"frame": 2}).saxs.compare_frames()
    np.testing.assert_array_equal(lazy["outlier"].values, res["outlier"].values)


def test_average_sigma_sqrt_n_and_members(rng):
    q, I, S = _repeats(rng, n=9, m=50)
    ds = saxsnb.from_arrays(q, I, S, scan={"time": np.arange(9.0)})
    before = ds.copy(deep=True)
    avg = ds.saxs.average(exclude=None)
    # mean of n independent values: sigma / sqrt(n) (Taylor 1997, ch. 3)
    np.testing.assert_allclose(avg.sigma.values[0], S[0] / 3.0)
    np.testing.assert_allclose(avg.intensity.values[0], I.mean(axis=0))
    assert avg.members.values.all() and int(avg.n_averaged[0]) == 9
    blocks = ds.saxs.average(exclude=None, every=3)
    # batch equals loop: numpy mean of each block
    for g in range(3):
        np.testing.assert_allclose(blocks.intensity.values[g], I[3 * g: 3 * g + 3].mean(axis=0))
    np.testing.assert_allclose(blocks.time.values, [1.0, 4.0, 7.0])
    lazy = ds.chunk({"frame": 4}).saxs.average(exclude=None, every=3)
    np.testing.assert_allclose(lazy.intensity.values, blocks.intensity.values)
    assert json.loads(blocks.attrs["history"][-1])["operation"] == "average"
    import xarray as xr

    xr.testing.assert_identical(ds, before)  # input untouched


def test_average_excludes_outliers_and_groups_by_sample(rng):
    q, I, S = _repeats(rng, n=8, m=300, damaged=(3, 7))
    ds = saxsnb.from_arrays(q, I, S, scan={"sample_name": np.array(["a", "a", "a", "a", "b", "b", "b", "b"])})
    avg = ds.saxs.average(by="sample_name")
    assert avg.sample_name.values.tolist() == ["a", "b"]
    assert avg.n_averaged.values.tolist() == [3, 3]
    assert not avg.members.values[0, 3] and not avg.members.values[1, 7]


def test_rebin_batch_equals_loop_and_sigma(rng):
    q = np.linspace(0.05, 5.0, 200)
    I = rng.uniform(1, 2, (3, 200))
    S = np.full((3, 200), 0.1)
    out = analysis.rebin(q, I, S, 20, spacing="log")
    edges = np.geomspace(q.min(), q.max(), 21)
    # the loop a user writes: bin of each point, mean per non-empty bin, sigma/sqrt(k)
    which = np.minimum(np.searchsorted(edges, q, "right") - 1, 19)
    for f in range(3):
        for b, k in enumerate(np.unique(which)):
            sel = which == k
            np.testing.assert_allclose(out["q"][b], q[sel].mean())
            np.testing.assert_allclose(out["intensity"][f, b], I[f, sel].mean())
            np.testing.assert_allclose(out["sigma"][f, b], 0.1 / np.sqrt(sel.sum()))
    ds = saxsnb.from_arrays(q, I, S)
    r = ds.saxs.rebin(20)
    np.testing.assert_allclose(r.intensity.values, out["intensity"])
    np.testing.assert_allclose(ds.chunk({"frame": 1}).saxs.rebin(20).sigma.values, out["sigma"])
    with pytest.raises(saxsnb.SaxsInputError) as info:
        ds.saxs.rebin(0)
    assert info.value.parameter == "n"
