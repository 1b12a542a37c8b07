"""The one table of per-frame status codes.

Every analysis writes a ``status`` per frame (``"ok"`` or a failure code). The codes,
what they mean, which input they are about and the plain-language message a person
reads live here and nowhere else: the producers in :mod:`saxsnb.analysis` use these
codes, ``errors="raise"`` names :attr:`Status.parameter` in its error, and the display
layer (:mod:`saxsnb.display`) shows :attr:`Status.message`.

``{size}`` and ``{limit}`` in a message are filled in by the display layer (default
Rg and 1.3, the compact-particle Guinier limit).

Examples
--------
>>> STATUS["too_few_points"].parameter
'q_range'
>>> sorted(set(STATUS) - set(STATUS))
[]
>>> status_array(["ok", "no_data"]).dtype
dtype('<U32')
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

__all__ = [
    "Status",
    "STATUS",
    "STATUS_DTYPE",
    "INDEXED",
    "UNINDEXED",
    "status_array",
    "check_codes",
    "parameter_of",
]


class Status(NamedTuple):
    """One status code: ``meaning`` (for developers), ``parameter`` (the input a
    failure is about), ``message`` (for people, may hold ``{size}`` / ``{limit}``).

    >>> STATUS["no_peaks"].message
    'no Bragg peaks found in this frame'
    """

    meaning: str
    parameter: str
    message: str


#: Fixed width of every status array (numpy unicode), long enough for every code.
STATUS_DTYPE = "<U32"

#: code -> Status. One code per meaning.
STATUS: dict[str, Status] = {
    "ok": Status("the analysis succeeded", "", "ok"),
    "no_data": Status(
        "no finite, usable point in the frame", "intensity", "no usable intensity in this frame"
    ),
    "range_outside_data": Status(
        "the q range holds no measured point", "q_range", "the chosen q range misses the measured points"
    ),
    "too_few_points": Status(
        "fewer usable points than the fit needs",
        "q_range",
        "too few usable points in the q range for this fit: widen the range",
    ),
    "negative_intensity": Status(
        "I <= 0 where a logarithm is needed",
        "intensity",
        "intensity at or below zero in the range: its logarithm is undefined "
        "(check the background subtraction)",
    ),
    "zero_sigma": Status(
        "sigma <= 0 for a point in the range",
        "sigma",
        "some points in the range have sigma = 0 and cannot be weighted",
    ),
    "positive_slope": Status(
        "the Guinier line rises with q",
        "q_range",
        "the intensity rises with q over this range: not a Guinier region",
    ),
    "curvature_aggregation": Status(
        "automatic Guinier: the lowest-q points turn upwards more steeply than any single population "
        "of particles allows (relative curvature c / b^2 of ln I vs q^2 above 2 by > 4 sigma)",
        "q_range",
        "the lowest-q points rise above the Guinier line more steeply than one kind of particle can: "
        "aggregates, attraction, or background left in (subtract it first): no Guinier fit",
    ),
    "qrg_limit_exceeded": Status(
        "q_max R above the validity limit",
        "q_range",
        "q_max\u00b7{size} above the validity limit {limit}: the range is too long for a Guinier fit",
    ),
    "no_linear_region": Status(
        "every candidate window curves",
        "q_range",
        "no straight low-q stretch found: every candidate range curves",
    ),
    "no_guinier": Status(
        "no Guinier result for the low-q extrapolation", "guinier", "no Guinier region at low q"
    ),
    "low_q_estimated": Status(
        "no Guinier result; the low-q part, estimated flat at I(q_min) with 100 % "
        "uncertainty, is at most 1 % of the invariant: numbers kept",
        "guinier",
        "no Guinier fit: the part of the invariant below q_min is estimated (it is at most "
        "1 % of the total, with its full size as uncertainty)",
    ),
    "no_porod_constant": Status(
        "no Porod constant for the high-q tail", "porod", "no Porod region at high q"
    ),
    "negative_porod_constant": Status(
        "the fitted Porod constant is <= 0",
        "background",
        "the Porod constant came out negative (check the background)",
    ),
    "porod_region_not_reached": Status(
        "the exponent on the Porod range differs from 4 by > 3 sigma and 0.3",
        "q_range",
        "the curve does not yet fall as q^-4 on this range: the Porod constant "
        "and the quantities built on it do not apply here",
    ),
    "no_porod_signal": Status(
        "porod(): the Porod constant is below 2 sigma or the exponent undetermined: numbers kept",
        "q_range",
        "no falling power law above the noise on this range (a flat curve or background only): "
        "no Porod constant or exponent to read",
    ),
    "too_few_shannon_channels": Status(
        "q_max Dmax / pi below min_channels (default 3): numbers kept",
        "q_range",
        "the q range holds too little information for a p(r) (too few Shannon channels): "
        "extend q_max or read only I0 and Rg",
    ),
    "dmax_too_small": Status(
        "fixed Dmax: the fit misses the data or p(r) is still above zero at Dmax, and a 1.5 times longer "
        "Dmax is decisively more probable",
        "dmax",
        "Dmax is too short for these data: the particle is larger; increase Dmax",
    ),
    "dmax_at_scan_edge": Status(
        "automatic Dmax: the best candidate is the shortest or the longest scanned: numbers kept",
        "dmax_candidates",
        "the best Dmax lies at the edge of the scanned range: widen the Dmax candidates "
        "(at the long end the q range may be too short to see the particle's size)",
    ),
    "poor_fit": Status(
        "chi2_reduced above both 1.5 and 1 + 5 sqrt(2 / dof): numbers kept",
        "sigma",
        "the fit misses the data by more than their errors: sigma may be too small, or the data "
        "hold something one model does not describe (aggregates, interparticle interference, a "
        "background: try background=True)",
    ),
    "negative_i0": Status(
        "I0 from p(r) is zero or negative: Rg is NaN, p(r) kept",
        "intensity",
        "I0 from p(r) is zero or negative (check the background subtraction)",
    ),
    "no_peaks": Status(
        "no peak above the prominence threshold", "min_prominence", "no Bragg peaks found in this frame"
    ),
    "no_bragg_peaks": Status(
        "only broad features, too wide for Bragg reflections",
        "max_relative_width",
        "no Bragg peaks found in this frame (only broad features, e.g. particle form-factor maxima)",
    ),
    "not_enough_peaks_to_index": Status(
        "one peak: no ratio to index", "peaks", "only one peak: at least two are needed to index a lattice"
    ),
    "no_phase_found": Status(
        "the peaks fit none of the phases", "phases", "the peaks fit none of the known phases"
    ),
    "unexplained_peaks": Status(
        "a phase is assigned but some peaks are left over",
        "phases",
        "some peaks are not explained by the assigned phase(s)",
    ),
    "is_reference": Status(
        "the frame is the reference the others are compared with",
        "reference",
        "reference frame of the comparison (not tested against itself)",
    ),
    "override": Status("the phase was set by hand", "overrides", "override (phase set by hand)"),
    "not_converged": Status(
        "the least-squares iterations stopped before converging: numbers kept",
        "intensity",
        "the fit did not converge: treat its numbers with caution",
    ),
    "curved_approximate": Status(
        "automatic Guinier: every window within the limit curves upwards, but no more than a single "
        "population can (chains, rods, broad size distributions): the shortest window's line, numbers kept",
        "q_range",
        "curved: the range is too long for this shape; {size} from the shortest range is approximate "
        "(likely an underestimate)",
    ),
    "outside_validity": Status(
        "automatic rod/sheet range: no acceptable window between the low-q end of the law's validity "
        "(finite length or lateral size bias below 1.5 % on size^2) and q_max R = limit",
        "q_range",
        "the rod or sheet law does not hold on this q range: the particle is too short (rod) or too "
        "narrow (sheet) for its cross-section or thickness to be read here",
    ),
}

#: Statuses of phase indexing for a frame that has a phase assignment.
INDEXED = ("ok", "unexplained_peaks", "override")
#: Statuses of phase indexing for a frame whose phases are unknown (not "absent").
UNINDEXED = ("no_data", "not_enough_peaks_to_index", "no_phase_found")


def status_array(values) -> np.ndarray:
    """Status codes as a numpy array of the one status dtype.

    >>> status_array(np.array(["ok"], dtype="<U2")).dtype.str
    '<U32'
    """
    return np.asarray(values).astype(STATUS_DTYPE)


def check_codes(values) -> None:
    """Raise AssertionError when an array holds a code missing from :data:`STATUS`.

    For tests and producers under development.

    >>> check_codes(["ok", "no_peaks"])
    """
    unknown = sorted(set(np.asarray(values).astype(str).ravel()) - set(STATUS))
    if unknown:
        raise AssertionError(f"status codes missing from the table: {unknown}")


def parameter_of(code: str, default: str = "q_range") -> str:
    """The input a failure status is about (``default`` for an unknown code).

    >>> parameter_of("zero_sigma"), parameter_of("?")
    ('sigma', 'q_range')
    """
    st = STATUS.get(str(code))
    return st.parameter if st is not None and st.parameter else default

# --- appended by the indexing work (issue 15): two explanations of a frame's peaks close
STATUS["ambiguous_phase"] = Status(
    "another explanation of the peaks is about as good",
    "phases",
    "ambiguous phase: another explanation of the peaks is about as good (see 'alternative')",
)
INDEXED = INDEXED + ("ambiguous_phase",)

# --- appended (lead, stop 21): cautions, not failures
#: Statuses whose numbers stand but carry a caution the report shows (an approximate Rg
#: from a curved Guinier region, a phase label with a close alternative). ``errors="raise"``
#: passes them with a :class:`saxsnb.errors.SaxsWarning` instead of raising.
CAUTIONS = ("curved_approximate", "ambiguous_phase")
__all__ += ["CAUTIONS"]
