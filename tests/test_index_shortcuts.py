"""The work-saving shortcuts of the candidate search (issue 14) give the same numbers as the
plain computation, bit for bit: labels, statuses, alternatives, lattices, costs, margins."""

import numpy as np
import pytest

from saxsnb.analysis import _latticematch, index_peaks, index_phases
from saxsnb.analysis._reflections import q_positions


def _ramp(n=160, seed=5):
    """Peak table of a ramp through single phases and coexisting pairs, with drifting
    lattices, dropped high orders, position noise and now and then an extra peak."""
    rng = np.random.default_rng(seed)
    stretches = [(("lamellar",), (4.6,)), (("hexagonal",), (6.1,)), (("Pn3m", "Im3m"), (10.0, 12.8)),
                 (("Im3m",), (12.5,)), (("Ia3d", "hexagonal"), (15.7, 6.0)), (("Fd3m",), (15.8,)),
                 (("Pm3n", "lamellar"), (12.0, 4.4)), (("Fm3m",), (12.0,))]
    rows = []
    for phases, lat in stretches:
        for i in range(n // len(stretches)):
            drift = 1.0 + 0.01 * i / n
            q = np.concatenate([q_positions(p, a * drift, 6 if len(phases) == 2 else 8)
                                for p, a in zip(phases, lat)])
            q = q[rng.random(q.size) < 0.8]
            if rng.random() < 0.1:
                q = np.append(q, rng.uniform(0.5, 2.5))
            rows.append(q * (1.0 + 2e-4 * rng.standard_normal(q.size)))
    P = max(r.size for r in rows)
    pos = np.full((len(rows), P), np.nan)
    for i, r in enumerate(rows):
        pos[i, : r.size] = rng.permutation(r)
    prom = np.where(np.isfinite(pos), rng.uniform(3.0, 80.0, pos.shape), np.nan)
    return pos, 2e-4 * pos, 0.01 * pos, prom


def _both(fn):
    _latticematch.SHORTCUTS = True
    try:
        fast = fn()
        _latticematch.SHORTCUTS = False
        plain = fn()
    finally:
        _latticematch.SHORTCUTS = True
    return fast, plain


@pytest.mark.parametrize("route", ["index_phases", "index_peaks", "index_peaks_plain_misses"])
def test_shortcuts_give_the_plain_numbers(route):
    pos, sig, fwhm, prom = _ramp()
    calls = {
        "index_phases": lambda: index_phases(pos, sig, fwhm, prom, q_min=0.3, q_step=0.002),
        "index_peaks": lambda: index_peaks(pos, sig, prom, q_min=0.3, fwhm=fwhm, q_step=0.002, snr=prom),
        # without snr: absent reflections counted unweighted (the other branch of the recount)
        "index_peaks_plain_misses": lambda: index_peaks(pos, sig, prom, q_min=0.3),
    }
    fast, plain = _both(calls[route])
    assert fast.keys() == plain.keys()
    for k in fast:
        a, b = np.asarray(fast[k]), np.asarray(plain[k])
        if a.dtype.kind == "f":
            assert np.array_equal(a, b, equal_nan=True), k  # bit for bit, not close
        else:
            assert a.tolist() == b.tolist(), k
    # the series exercises what the shortcuts touch: pairs, close alternatives, subset cubics
    labels = {"+".join(sorted(p for p in row if p)) for row in np.asarray(fast["phase"])}
    assert {"Im3m+Pn3m", "Ia3d+hexagonal"} <= labels
    assert (np.asarray(fast["alternative"]) != "").any()
