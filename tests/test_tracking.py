"""Linking peaks across frames (saxsnb.analysis._tracking)."""

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from scipy.optimize import linear_sum_assignment

from saxsnb.analysis import link_peaks


def test_drifting_peaks_form_one_track_each():
    n = 30
    pos = np.stack([1.0 + 0.001 * np.arange(n), 2.0 - 0.0005 * np.arange(n)], axis=1)
    track, prev = link_peaks(pos, np.full(pos.shape, 2e-4), np.full(pos.shape, 0.02))
    assert (track[:, 0] == 0).all() and (track[:, 1] == 1).all()
    assert (prev[0] == -1).all() and (prev[1:] == [0, 1]).all()


def test_fading_and_appearing_reflections_are_separate_tracks():
    # one reflection fades out at frame 10, another appears at frame 10 nearby
    pos = np.full((20, 2), np.nan)
    pos[:10, 0] = 1.20
    pos[10:, 0] = 1.25
    pos[:, 1] = 2.0
    track, _ = link_peaks(pos, np.full(pos.shape, 1e-3), np.full(pos.shape, 0.03))
    assert track[9, 0] != track[10, 0]
    assert len(set(track[:, 1])) == 1
    assert sorted(set(track.ravel())) == [0, 1, 2]


def test_nan_frame_splits_tracks_and_no_peaks():
    pos = np.array([[1.0, 2.0], [np.nan, np.nan], [1.0, 2.0]])
    track, _ = link_peaks(pos, np.full(pos.shape, 1e-3))
    assert track.tolist() == [[0, 1], [-1, -1], [2, 3]]


def test_matches_minimum_cost_assignment(rng):
    # reference: scipy.optimize.linear_sum_assignment (Hungarian/Jonker-Volgenant) per pair
    n_f, n_p = 40, 6
    base = np.sort(rng.uniform(0.5, 4.0, n_p))
    pos = base + rng.normal(0, 2e-4, (n_f, n_p))
    for row in pos:
        rng.shuffle(row)
    sig = np.full(pos.shape, 2e-4)
    _, prev = link_peaks(pos, sig)
    for t in range(1, n_f):
        cost = np.abs(pos[t][None, :] - pos[t - 1][:, None])
        r, c = linear_sum_assignment(cost)
        want = np.empty(n_p, dtype=int)
        want[c] = r
        assert prev[t].tolist() == want.tolist()


def test_labels_split_tracks():
    pos = np.array([[1.0], [1.0], [1.0]])
    lab = np.array([["Pn3m 110"], ["Pn3m 110"], ["Im3m 110"]])
    track, _ = link_peaks(pos, np.full(pos.shape, 1e-3), labels=lab)
    assert track[:, 0].tolist() == [0, 0, 1]


@settings(max_examples=40, deadline=None)
@given(
    arrays(float, (8, 5), elements=st.one_of(st.just(np.nan), st.floats(0.5, 3.0))),
    st.floats(1e-4, 1e-2),
)
def test_track_invariants(pos, sig):
    track, prev = link_peaks(pos, np.full(pos.shape, sig), np.full(pos.shape, 0.02))
    ok = np.isfinite(pos)
    assert ((track >= 0) == ok).all()
    # one peak per track per frame; numbers 0..n-1
    for t in range(pos.shape[0]):
        got = track[t][ok[t]]
        assert len(set(got.tolist())) == got.size
    ids = sorted(set(track[ok].tolist()))
    assert ids == list(range(len(ids)))
    # every link is inside its gate and joins peaks of the same track
    for t in range(1, pos.shape[0]):
        for j in np.nonzero(prev[t] >= 0)[0]:
            i = prev[t, j]
            gate = max(5 * np.hypot(sig, sig), 0.5 * 0.02)
            assert abs(pos[t, j] - pos[t - 1, i]) <= gate + 1e-12
            assert track[t, j] == track[t - 1, i]


def test_blocks_of_frame_pairs_equal_one_block(rng, monkeypatch):
    # issue 13: links are matched in blocks of frame pairs (bounded memory on 1e5 frames);
    # a link depends on its two frames only, so the blocks must not change any track
    import saxsnb.analysis._tracking as mod

    F, P = 400, 6
    base = np.sort(rng.uniform(0.5, 3.0, P))
    pos = base + 0.002 * rng.standard_normal((F, P)).cumsum(0) * 0.1
    pos[rng.random((F, P)) < 0.05] = np.nan  # missing peaks split tracks
    sig, wid = np.full(pos.shape, 0.002), np.full(pos.shape, 0.02)
    labels = np.where(np.arange(F)[:, None] < 200, "a", "b") + np.zeros((F, P), dtype="<U1")
    one = link_peaks(pos, sig, wid, labels=labels)
    monkeypatch.setattr(mod, "BLOCK_PAIRS", 7 * P * P)  # blocks of 7 pairs
    blocked = link_peaks(pos, sig, wid, labels=labels)
    np.testing.assert_array_equal(blocked[0], one[0])
    np.testing.assert_array_equal(blocked[1], one[1])
    assert one[0].max() > P  # splits happened: the check is not trivial
