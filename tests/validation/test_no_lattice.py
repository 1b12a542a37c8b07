"""Series with no lattice must get no phase label (issue 15 targets).

Truth: Schulz spheres and vesicles by quadrature of the closed-form sphere / shell
amplitudes (Pedersen 1997; Schulz 1939), featureless diffuse curves and single-point
spikes with Poisson counts (tests/validation/truth.py). The peak table of
``find_peaks`` goes whole into ``index_peaks`` so the Bragg-evidence tests run.

Known limit (measured, stop 21): over seeds 0-199 of "spheres z100" (4,000 frames), 3 frames
got a cubic label (Fd3m twice, Pm3n once) with status "ok", each resting on exactly 3 weak
peaks (prominence 2.6-8 noise units, widths differing 3-5x) and the caveat "only 3 peaks:
assignment rests on few ratios". The test uses one fixed seed; the rate is the figure to watch.
"""

import zlib

import numpy as np
import pytest

from saxsnb.analysis import find_peaks, index_peaks

from . import runs


@pytest.mark.parametrize(
    "kind", ["spheres z100", "spheres z30", "vesicles z100", "vesicles z50", "spikes", "featureless"]
)
def test_no_phase_label_without_a_lattice(kind):
    q, I, S = runs.no_lattice_series(kind, 20, seed=zlib.crc32(kind.encode()) % 1000)
    # (a fixed seed: Python's str hash changes per process. Measured over seeds 0-199 of
    # 'spheres z100': 3 of 4,000 frames got a label, each on 3 weak peaks; see the module notes)
    pk, r = runs.index_curves(q, I, S)
    # target: zero frames given a phase label, whatever the status
    assert (r["phase"] == "").all(), (kind, runs.labels(r))


def test_spikes_are_named_as_the_reason():
    q, I, S = runs.no_lattice_series("spikes", 10, seed=3)
    pk, r = runs.index_curves(q, I, S)
    hit = r["n_rejected"] > 0
    assert hit.mean() > 0.8
    assert all("spike" in c for c in r["caveat"][hit])
    assert set(r["status"][hit]) <= {"no_bragg_peaks", "not_enough_peaks_to_index", "no_phase_found"}


def test_two_peaks_alone_are_no_cubic():
    # two numbers fit some cubic ratio within 1 % by chance: sqrt(16/14) is Ia3d 321:400
    res = index_peaks(np.array([[1.0, 1.0690]]))
    assert res["phase"][0, 0] == ""
    # two orders 1:2 (lamellar) and 1:sqrt(3) (hexagonal) are still read (common practice)
    res = index_peaks(np.array([[1.0, 2.0], [1.0, np.sqrt(3.0)]]))
    assert res["phase"][:, 0].tolist() == ["lamellar", "hexagonal"]


def test_accessor_path_gets_no_phase_for_particles():
    # the user path: ds.saxs.find_peaks / index_phases on the same curves
    import saxsnb

    for kind in ("spheres z30", "vesicles z100"):
        q, I, S = runs.no_lattice_series(kind, 10, seed=5)
        ix = saxsnb.from_arrays(q, I, S).saxs.index_phases()
        assert (ix.phase.values == "").all(), kind


def test_find_peaks_passes_widths_for_the_spike_test():
    # a one-point spike on a smooth curve is fitted narrower than 1.5 q steps
    q = np.linspace(0.5, 2.0, 500)
    I = 100.0 + np.zeros_like(q)
    I[250] += 60.0
    pk = find_peaks(q, I[None], np.full((1, q.size), 1.0))
    assert pk["fwhm"][0, 0] < 1.5 * (q[1] - q[0])


def test_find_peaks_on_a_short_curve_gives_statuses():
    # issue 15: fewer than 12 points with errors="ignore" is a per-frame status, not an error
    q = np.linspace(0.5, 1.0, 8)
    res = find_peaks(q, np.ones((2, 8)), errors="ignore")
    assert res["status"].tolist() == ["no_data", "no_data"] and res["position"].shape == (2, 16)
