"""The ``.saxs`` accessor on :class:`xarray.Dataset`: the one place that turns Datasets
into numpy arrays and back.

``ds.saxs`` is one class assembled from a mixin per subject; every analysis method is a
few lines over :meth:`~saxsnb.accessor._core.AccessorBase._apply` (masked points to
NaN, ``errors=``, ``xarray.apply_ufunc(..., dask="parallelized")``, units, the series'
attrs and one history format on the result):

- :mod:`saxsnb.accessor.series`: ``frame``, ``to_q_unit``, ``summary``, ``report``,
  ``save``, ``subtract``;
- :mod:`saxsnb.accessor.linear`: ``guinier``, ``porod``, ``invariant``, ``kratky``,
  ``kratky_summary``;
- :mod:`saxsnb.accessor.phases`: ``find_peaks``, ``index_phases``, ``phase_map``,
  ``phase_report``;
- :mod:`saxsnb.accessor.distance`: ``distance_distribution``;
- :mod:`saxsnb.accessor.tables`: ``to_dataframe``, ``to_csv``;
- :mod:`saxsnb.accessor.recipe`: ``recipe`` (code that rebuilds a result from its files);
- :mod:`saxsnb.accessor.preparation`: ``compare_frames``, ``average``,
  ``absolute_scale``, ``rescale_q``, ``rebin``, ``per_concentration``,
  ``extrapolate_concentration``.
"""

from __future__ import annotations

import xarray as xr

from ._core import AccessorBase, OutputSpec, provenance, result_attrs
from .distance import DistanceMethods
from .images import ImageMethods
from .linear import LinearMethods
from .phases import PhaseMethods
from .preparation import PreparationMethods
from .recipe import RecipeMethods
from .series import SeriesMethods
from .tables import TableMethods

__all__ = ["SaxsAccessor", "OutputSpec", "AccessorBase", "provenance", "result_attrs"]


@xr.register_dataset_accessor("saxs")
class SaxsAccessor(SeriesMethods, LinearMethods, DistanceMethods, PhaseMethods, PreparationMethods,
                   TableMethods, RecipeMethods, ImageMethods):
    """SAXS series methods, as ``ds.saxs.<method>``.

    Examples
    --------
    >>> import saxsnb
    >>> ds = saxsnb.from_arrays([0.1, 0.2, 0.3], [[3.0, 2.0, 1.0]], [[0.1, 0.1, 0.1]])
    >>> ds.saxs.summary()["q_points"]
    3
    """
