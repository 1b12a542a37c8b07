"""Pure numerical functions on numpy arrays, vectorised over a leading frame axis.

Nothing here imports xarray, ipywidgets or bqplot, prints, formats text for people, or
reads files. Every function takes ``(q, intensity, sigma, **options)`` (or a peak
table) with frames first and returns a dict of arrays whose first axis is the frame;
``ds.saxs.<name>`` is a thin wrapper of the function of the same name, so both routes
give the same numbers. The modules are private (as in ``skimage.measure``): import
from ``saxsnb.analysis``.

Subjects: linear regions (:func:`guinier`, :func:`porod`, :func:`invariant`, the plot
table :data:`LINEAR_PLOTS`), Kratky (:func:`kratky`, :func:`kratky_summary`), peaks
(:func:`find_peaks`, :func:`track_peaks`), the distance distribution
(:func:`distance_distribution`, :func:`forward_transform`), phases (:func:`index_phases`,
:func:`phase_map`, :func:`q_positions`), corrections (:func:`subtract_background`,
:func:`scale_intensity`), preparation (:func:`compare_frames`, :func:`average_frames`,
:func:`rebin`, :func:`calibrate_q`, :func:`water_cross_section`, :func:`merge_ranges`,
:func:`extrapolate_concentration`) and the status table (:data:`STATUS`).

>>> import numpy as np
>>> from saxsnb import analysis
>>> q = np.linspace(0.02, 1.0, 100)
>>> analysis.guinier(q, np.exp(-(2 * q) ** 2 / 3)[None], None)["rg"].round(6).tolist()
[2.0]
"""

from ._averaging import average_frames, group_labels, rebin
from ._calibrant import calibrant_orders, calibrate, find_ring_points, fit_geometry
from ._calibration import SILVER_BEHENATE_D, calibrate_q, calibration_factor, water_cross_section
from ._corrections import fit_scale, match_frames, normalization_factor, scale_intensity, subtract_background
from ._distance import (
    default_dmax_candidates,
    distance_distribution,
    forward_transform,
    sphere_distance_distribution,
    transform_matrix,
)
from ._geometry import DetectorGeometry, rotation_matrix
from ._guinier import guinier, guinier_search, rod_length
from ._indexing import PHASE_OUTPUTS, index_phases
from ._integrate import IntegrationMatrix, bin_edges, integration_matrix
from ._invariant import guinier_integrals, invariant
from ._kratky import SHAPE_CLASSES, kratky, kratky_summary
from ._lattice import index_peaks, lattice_from_metric
from ._linear import (
    LINEAR_PLOTS,
    SHAPE_PLOTS,
    LinearPlot,
    index_range,
    linear_plot,
    linearize,
    weighted_linear_fit,
)
from ._masks import circle_mask, combine_masks, gap_mask, mask_fraction, polygon_mask, threshold_mask
from ._merging import extrapolate_concentration, merge_ranges, per_concentration
from ._orientation import azimuthal_peak_width, estimate_director, hermans_orientation
from ._peakfit import PROFILES, fit_peaks, guess_peaks, peak_profile
from ._peaks import detect_peaks, estimate_baseline, find_peaks
from ._phasemap import BONNET_RATIOS, phase_map
from ._porod import default_porod_range, porod, porod_fit, power_law_fit
from ._reflections import PHASES, allowed_reflections, hkl_labels, q_positions, spacing_ratios
from ._similarity import (
    adjust_pvalues,
    compare_frames,
    longest_run_pvalue,
    longest_same_sign_run,
    pairwise_similarity,
)
from ._status import CAUTIONS, STATUS, STATUS_DTYPE, Status
from ._tracking import link_peaks, track_peaks
from ._windows import WindowMoments, running_sum

__all__ = [
    # linear regions
    "LINEAR_PLOTS",
    "SHAPE_PLOTS",
    "LinearPlot",
    "linear_plot",
    "linearize",
    "weighted_linear_fit",
    "WindowMoments",
    "running_sum",
    "index_range",
    "guinier",
    "guinier_search",
    "rod_length",
    "porod",
    "porod_fit",
    "power_law_fit",
    "default_porod_range",
    "invariant",
    "guinier_integrals",
    # Kratky
    "kratky",
    "kratky_summary",
    "SHAPE_CLASSES",
    # peaks
    "PROFILES",
    "peak_profile",
    "guess_peaks",
    "fit_peaks",
    "estimate_baseline",
    "detect_peaks",
    "find_peaks",
    "link_peaks",
    "track_peaks",
    # distance distribution
    "distance_distribution",
    "forward_transform",
    "transform_matrix",
    "default_dmax_candidates",
    "sphere_distance_distribution",
    # phases
    "PHASES",
    "allowed_reflections",
    "spacing_ratios",
    "q_positions",
    "hkl_labels",
    "index_peaks",
    "index_phases",
    "PHASE_OUTPUTS",
    "lattice_from_metric",
    "phase_map",
    "BONNET_RATIOS",
    # corrections
    "subtract_background",
    "scale_intensity",
    "match_frames",
    "fit_scale",
    "normalization_factor",
    # preparation: similarity, averaging, calibration, merging, concentration
    "compare_frames",
    "pairwise_similarity",
    "longest_same_sign_run",
    "longest_run_pvalue",
    "adjust_pvalues",
    "group_labels",
    "average_frames",
    "rebin",
    "water_cross_section",
    "calibration_factor",
    "calibrate_q",
    "SILVER_BEHENATE_D",
    "merge_ranges",
    "per_concentration",
    "extrapolate_concentration",
    # statuses
    "CAUTIONS",
    "STATUS",
    "STATUS_DTYPE",
    "Status",
    # images: geometry, integration, masks, calibration, orientation
    "DetectorGeometry",
    "rotation_matrix",
    "IntegrationMatrix",
    "integration_matrix",
    "bin_edges",
    "threshold_mask",
    "gap_mask",
    "circle_mask",
    "polygon_mask",
    "combine_masks",
    "mask_fraction",
    "calibrant_orders",
    "find_ring_points",
    "fit_geometry",
    "calibrate",
    "hermans_orientation",
    "azimuthal_peak_width",
    "estimate_director",
]
