"""Interactive linked panels (ipywidgets 8 + bqplot) over a SAXS series.

``saxsnb.explore(ds, background=None)`` shows the panels linked on one current frame
and returns a :class:`Dashboard` (an ``ipywidgets.VBox``); ``dashboard.panels`` is a
:class:`PanelSet`, a dict ``"browser" | "curve" | "guinier" | "kratky" | "peaks" ->
panel`` that also iterates over the panels and takes integer positions. Each panel
also works alone:

- :class:`SeriesBrowser` (slider, play button, clickable overview map),
- :class:`CurvePanel` (I(q) +- sigma on log-log axes, overlays, background),
- :class:`LinearFitPanel` (``kind="guinier" | "rod" | "sheet" | "porod"``; brush
  selector for the q range, residuals, result text, trend over the scan),
- :class:`KratkyPanel` (plain or dimensionless, reference levels, shape trend),
- :class:`PeaksPanel` (peaks with hkl, phase table, peak map, lattice trend, overrides),
- :class:`PreparationPanel` (sample, background, subtracted; scale control; clickable
  frame-similarity map and outlier flags; in ``explore()`` when a background is given).
- :class:`DistancePanel` (p(r) +- sigma, fit and residuals, Dmax / weight controls,
  evidence curve, Rg / Dmax / I0 trends; ``explore(ds, panels=(..., "distance"))``).

The panels of one series share a :class:`SeriesModel` (``panel.model``): the masked
intensity and sigma once, the whole-series results cached by (analysis, parameters),
and the current frame. ``explore()`` builds one; a panel made alone makes its own;
every panel takes a Dataset or a model as its first argument.

Big and lazy series: ``explore()`` on a series larger than
``dashboard.DEFER_SIZE`` points, or dask-backed, returns at once with the current
frame drawn and computes the whole-series results (automatic fits of every frame,
peak search and indexing, shape summary) in a background thread (a dask series on
the active distributed client, if any), updating the trends when they arrive; the
line above the panels shows what is running (``dashboard.wait()`` blocks until it is
done; ``explore(..., wait=True)`` computes everything first). On a dask series the
panels hold only what they show: the frames drawn (fetched on demand), an overview
map of block means of log10 I reduced chunk by chunk, and per-frame results.

Every panel (:class:`PanelBase`) has the traits ``frame`` (int), ``result`` (read-only
xarray.Dataset for the current choices), ``status`` (str, "" when no error; also shown
in ``panel.status_line``), ``last_error`` (the exception behind it, or None) and
``code`` (read-only str), and the methods ``to_code()``
(Python that starts from the files, through ``ds.saxs.recipe``, and rebuilds ``result``
exactly, about the user's own variable: ``explore(ramp)`` writes code about ``ramp``;
``name=`` / ``series_name=`` where it cannot be found; a series made in memory is
expected in ``ds``), ``show_code()`` (what the "Export code" button does),
``to_png()`` (the whole panel, 1800 px wide; the "PNG" button offers it for download),
``save_png()`` / ``save_svg()`` (the main figure, browser only) and
``to_matplotlib(dpi=...)`` (a matplotlib Figure of the same plots, no browser needed).
``explore()`` chooses its panels from what the series holds (Bragg peaks or a particle
curve, ``dashboard.reason``) and writes the results tables (``write_tables()``, the
"Write results tables" button, download links on a code-free page).
Range-selecting panels also have ``q_range`` ((q_min, q_max) in 1/nm, or None for the
automatic range) and ``selector`` (a bqplot BrushIntervalSelector on the linearised
x axis, q^2 or q^4).

Panels show and select; every number comes from :mod:`saxsnb.accessor` and
:mod:`saxsnb.analysis` (display transforms in :mod:`saxsnb.display`).
A new panel (e.g. P(r)) is one new module: subclass :class:`PanelBase`.
"""

from .base import PanelBase
from .browser import SeriesBrowser
from .curve import CurvePanel
from .dashboard import Dashboard, PanelSet, explore
from .distance import DistancePanel
from .kratky import KratkyPanel
from .linear import LinearFitPanel
from .model import SeriesModel
from .peaks import PeaksPanel
from .preparation import PreparationPanel

__all__ = [
    "explore",
    "Dashboard",
    "PanelSet",
    "PanelBase",
    "SeriesBrowser",
    "CurvePanel",
    "LinearFitPanel",
    "KratkyPanel",
    "PeaksPanel",
    "PreparationPanel",
    "DistancePanel",
    "SeriesModel",
]
