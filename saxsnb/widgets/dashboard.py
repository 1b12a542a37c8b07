"""``explore(ds)``: all panels of a series, linked on one current frame."""

from __future__ import annotations

import html
import os
from collections.abc import Sequence
from pathlib import Path

import ipywidgets as widgets
import numpy as np
import traitlets
import xarray as xr

from .base import PanelBase, caller_variable, checked_name, control_row, download_link, export_code
from .model import SeriesModel

__all__ = ["Dashboard", "PanelSet", "explore", "choose_panels", "PANEL_NAMES", "DEFAULT_PANELS",
           "PARTICLE_PANELS", "BRAGG_PANELS"]

#: Panels :func:`explore` offers, in display order ("rod", "sheet", "porod": the
#: other straight-line fits of :class:`~saxsnb.widgets.LinearFitPanel`).
PANEL_NAMES = ("browser", "curve", "guinier", "rod", "sheet", "porod", "kratky", "peaks", "distance")
#: Every default panel (a series with Bragg peaks in some sampled frames, and a particle
#: curve in others).
DEFAULT_PANELS = ("browser", "curve", "guinier", "kratky", "peaks")
#: Default panels of a particle curve (no Bragg peaks in the sampled frames).
PARTICLE_PANELS = ("browser", "curve", "guinier", "kratky")
#: Default panels of a series whose sampled frames mostly index as a lattice.
BRAGG_PANELS = ("browser", "curve", "peaks")
#: Frames sampled by :func:`choose_panels`.
SAMPLED_FRAMES = 5
#: Panels added when a background is given.
BACKGROUND_PANELS = ("preparation",)
#: Series larger than this (frames x q points) get their whole-series results in the
#: background (``explore(..., wait=None)``); a dask-backed series always does.
DEFER_SIZE = 2_000_000


class PanelSet(dict):
    """The panels of a dashboard: a dict ``name -> panel`` in display order.

    Keys are ``"browser"``, ``"curve"``, ``"guinier"``, ``"kratky"``, ``"peaks"``,
    ``"distance"`` (those asked for): ``panels["guinier"]``, ``panels.keys()``, ``panels.items()``,
    ``panels.values()``, ``"peaks" in panels`` and ``dict(panels)`` behave as for
    any dict. To be friendly to code that expects a list, iterating gives the
    *panels* (``for panel in dash.panels``, ``list(dash.panels)``), an integer gives
    the panel at that position (``panels[0]`` is the browser), and indexing with a
    panel returns it, so ``for p in panels: panels[p]`` works too.

    Examples
    --------
    >>> ps = PanelSet(a=1, b=2)
    >>> list(ps), list(ps.keys()), ps[1], ps["a"]
    ([1, 2], ['a', 'b'], 2, 1)
    """

    def __iter__(self):
        return iter(list(self.values()))

    def __getitem__(self, key):
        if isinstance(key, int) and not isinstance(key, bool):
            return list(self.values())[key]
        if isinstance(key, str):
            return super().__getitem__(key)
        for v in self.values():
            if v is key:
                return v
        raise KeyError(key)


class Dashboard(widgets.VBox):
    """The linked panels of one series (made by :func:`explore`).

    Parameters
    ----------
    panels : dict name -> panel
    model : SeriesModel, optional
        The model the panels share (what :func:`explore` passes); the dashboard's
        ``frame`` is linked to it. Without one, it is linked to each panel's ``frame``.

    Attributes
    ----------
    panels : PanelSet
        ``name -> panel``.
    model : SeriesModel or None
        The shared series, masked arrays, cached results and current frame.
    frame : int trait
        The shared current frame; every panel's ``frame`` is linked to it.
    """

    frame = traitlets.Int(0)

    def __init__(self, panels: dict[str, PanelBase], *, model: SeriesModel | None = None, reason: str = "",
                 **kwargs):
        super().__init__(**kwargs)
        self.panels = PanelSet(panels)
        self.model = model
        #: Why these panels (one line, shown above them; "" when the panels were named).
        self.reason = reason
        self.reason_line = widgets.HTML(f"<small>{html.escape(reason)}</small>" if reason else "")
        #: Folder :meth:`write_tables` writes to when its button is pressed.
        self.table_folder = "."
        targets = [model] if model is not None else list(self.panels.values())
        self._links = [traitlets.link((t, "frame"), (self, "frame")) for t in targets]
        self.status_line = widgets.HTML("")
        #: What the panels compute in the background, with its progress ("" when idle).
        self.progress_line = widgets.HTML("")
        if model is not None:
            model.observe(self._show_busy, "busy")
            self._show_busy()
        for p in self.panels.values():
            p.observe(self._collect_status, "status")
        self._collect_status()  # statuses set while the panels were built
        self.export_button = widgets.Button(
            description="Export all code", icon="code", layout=widgets.Layout(width="auto")
        )
        self.code_area = widgets.Textarea(
            "", layout=widgets.Layout(width="100%", height="12em", display="none")
        )
        self.export_button.on_click(lambda _b: self.show_code())
        self.table_button = widgets.Button(
            description="Write results tables", icon="table", layout=widgets.Layout(width="auto"),
            tooltip="Write one CSV table per panel (one row per frame) and offer them for download",
        )
        self.table_button.on_click(lambda _b: self._tables_from_button())
        #: Download links of the tables last written (data: URIs; work on a code-free page).
        self.download = widgets.HTML("")
        self.children = [
            self.reason_line,
            self.progress_line,
            *self._arrange(),
            control_row([self.export_button, self.table_button]),
            self.download,
            self.code_area,
            self.status_line,
        ]

    def _show_busy(self, change=None) -> None:
        text = self.model.busy if self.model is not None else ""
        self.progress_line.value = (
            f'<small class="saxsnb-busy">&#8987; {html.escape(text)}; the panels update when '
            "the results arrive</small>" if text else ""
        )

    def wait(self, timeout: float | None = None) -> Dashboard:
        """Block until the whole-series results computed in the background are in and
        drawn (``SeriesModel.wait``); returns the dashboard."""
        self._model().wait(timeout)
        return self

    def _arrange(self) -> list[widgets.Widget]:
        ps = list(self.panels.values())
        rows = []
        half = widgets.Layout(width="50%")
        for k in range(0, len(ps), 2):
            pair = ps[k : k + 2]
            if len(pair) == 2:
                for p in pair:
                    p.layout.width = half.width
                rows.append(widgets.HBox(pair, layout=widgets.Layout(width="100%")))
            else:
                rows.append(pair[0])
        return rows

    def _collect_status(self, change=None) -> None:
        parts = [f"{name}: {p.status_text}" for name, p in self.panels.items() if p.status]
        self.status_line.value = "<br>".join(html.escape(t) for t in parts)

    def _variables(self) -> dict[str, str]:
        """panel name -> variable of its result in the exported code (the panel's name,
        unless that is the series' or the background's variable)."""
        taken = {self._model().name or "ds", self._model().background_name or "background", "saxsnb"}
        return {name: (f"{name}_result" if name in taken else name) for name in self.panels.keys()}

    def _model(self) -> SeriesModel:
        return self.model if self.model is not None else next(iter(self.panels.values())).model

    def to_code(self, *, name: str | None = None, background_name: str | None = None) -> str:
        """Code that rebuilds every panel's result from the files, one variable per
        panel (its name: ``guinier``, ``peaks``, ...), about the user's variables.

        The series (and the background where a panel uses it) is read as its recipe
        says (``ds.saxs.recipe``) once, then each panel's steps follow.
        """
        steps = []
        background = None
        for p, var in zip(self.panels.values(), self._variables().values()):
            steps.append(f"# {p.title}")
            steps.extend(p._code_lines(var))
            background = background if background is not None else p._background_dataset()
        return export_code(self._model(), steps, background=background, name=name,
                           background_name=background_name)

    # ---------------------------------------------------------------- tables
    def tables(self) -> dict:
        """Per panel with per-frame numbers, its table (``panel.table_result()``, i.e.
        the whole-series fit for fit panels, the shape summary for Kratky, the result
        otherwise, through ``.saxs.to_dataframe()``: one row per frame, the scan
        coordinates first, units in the column names). The browser and curve panels
        show curves only and have no table."""
        out = {}
        for name, p in self.panels.items():
            res = p.table_result()
            if res is None or "frame" not in res.dims:
                continue
            if not any(v.dims == ("frame",) for v in res.data_vars.values()):
                continue
            out[name] = res.saxs.to_dataframe()
        return out

    def write_tables(self, folder=None, *, stem: str | None = None) -> list[Path]:
        """Write :meth:`tables` as CSV files, one per panel, each atomically
        (``result.saxs.to_csv``): ``<folder>/<stem>-<panel>.csv``.

        Parameters
        ----------
        folder : path, optional
            Where to write (default :attr:`table_folder`, the working directory).
        stem : str, optional
            File name start (default ``"saxsnb-<series variable>"``).

        Returns
        -------
        The paths written. The download links (:attr:`download`) are refreshed.
        """
        folder = Path(self.table_folder if folder is None else folder)
        stem = stem or f"saxsnb-{self._model().name or 'series'}"
        paths, links = [], []
        for name in self.tables():
            res = self.panels[name].table_result()
            path = folder / f"{stem}-{name}.csv"
            res.saxs.to_csv(path)
            paths.append(path)
            links.append(download_link(path.name, path.read_bytes(), "text/csv", style="margin-right:1em"))
        self.download.value = (
            "<small>tables (one row per frame):</small> " + "".join(links) if links
            else "<small>no panel has per-frame numbers to tabulate</small>"
        )
        return paths

    def _tables_from_button(self) -> None:
        try:
            paths = self.write_tables()
        except Exception as exc:  # shown in the status line
            self.status_line.value = html.escape(f"tables: {type(exc).__name__}: {exc}")
            return
        where = os.path.abspath(self.table_folder)
        self.status_line.value = html.escape(f"{len(paths)} table(s) written to {where}")

    @property
    def code(self) -> str:
        """The same as :meth:`to_code`."""
        return self.to_code()

    def show_code(self) -> str:
        """Show the exported code in the text area (what "Export all code" does)."""
        self.code_area.value = self.to_code()
        self.code_area.layout.display = None
        return self.code_area.value


def choose_panels(ds: xr.Dataset, *, n_sample: int = SAMPLED_FRAMES) -> tuple[tuple[str, ...], str]:
    """Default panels for what a series holds, and why in one line.

    A few evenly spaced frames are indexed (``ds.isel(frame=...).saxs.index_phases()``,
    the accessor's own peak search and Bragg tests; nothing new is computed here):
    frames whose peaks index as a lattice (status in ``INDEXED``) hold Bragg peaks.
    Mostly Bragg frames give :data:`BRAGG_PANELS`, none :data:`PARTICLE_PANELS`
    (Guinier and Kratky, which need a particle curve), a mix :data:`DEFAULT_PANELS`.

    Examples
    --------
    >>> import saxsnb
    >>> from saxsnb.widgets.dashboard import choose_panels
    >>> choose_panels(saxsnb.demo.example_series("cubic"))[0]
    ('browser', 'curve', 'peaks')
    """
    from ..analysis._status import INDEXED

    n = int(ds.sizes["frame"])
    picks = np.unique(np.linspace(0, n - 1, min(n_sample, n)).round().astype(int))
    try:
        ix = ds.isel(frame=picks).saxs.index_phases()
    except Exception as exc:  # the panels report their own errors
        return DEFAULT_PANELS, f"Every panel shown (the sampled peak search failed: {type(exc).__name__})."
    status = np.asarray(ix["status"].values).astype(str)
    bragg = np.isin(status, INDEXED)
    k, m = int(bragg.sum()), int(picks.size)
    phases = sorted({str(p) for p in np.asarray(ix["phase"].values).ravel() if str(p)})
    found = f"Bragg peaks indexed in {k} of {m} sampled frames"
    if k and 2 * k >= m:
        return BRAGG_PANELS, (f"{found} ({', '.join(phases)}): peaks panel shown; Guinier and Kratky "
                              "(particle curves) left out; name any panel with panels=[...].")
    if k:
        return DEFAULT_PANELS, (f"{found} ({', '.join(phases)}), particle curves in the others: "
                                "Guinier, Kratky and peaks panels shown.")
    return PARTICLE_PANELS, (f"No Bragg peaks in {m} sampled frames (a particle curve): Guinier and Kratky "
                             "panels shown, peaks panel left out; name any panel with panels=[...].")


def _factories():
    from .browser import SeriesBrowser
    from .curve import CurvePanel
    from .distance import DistancePanel
    from .kratky import KratkyPanel
    from .linear import LinearFitPanel
    from .peaks import PeaksPanel
    from .preparation import PreparationPanel

    return {
        "browser": lambda model, bg: SeriesBrowser(model),
        "curve": lambda model, bg: CurvePanel(model, bg),
        "guinier": lambda model, bg: LinearFitPanel(model, kind="guinier"),
        "rod": lambda model, bg: LinearFitPanel(model, kind="rod"),
        "sheet": lambda model, bg: LinearFitPanel(model, kind="sheet"),
        "porod": lambda model, bg: LinearFitPanel(model, kind="porod"),
        "kratky": lambda model, bg: KratkyPanel(model),
        "peaks": lambda model, bg: PeaksPanel(model),
        "preparation": lambda model, bg: PreparationPanel(model, bg),
        "distance": lambda model, bg: DistancePanel(model),
    }


def explore(
    ds: xr.Dataset,
    background: xr.Dataset | None = None,
    *,
    panels: Sequence[str] | None = None,
    frame: int = 0,
    name: str | None = None,
    background_name: str | None = None,
    wait: bool | None = None,
) -> Dashboard:
    """Open the linked panels of a series in a notebook.

    Parameters
    ----------
    ds : xarray.Dataset
        A series in the saxsnb layout (never modified).
    background : xarray.Dataset, optional
        A background series, drawn in the curve panel.
    panels : sequence of str, optional
        Which panels, among ``"browser"``, ``"curve"``, ``"guinier"``, ``"rod"``,
        ``"sheet"``, ``"porod"`` (the straight-line fits of
        :class:`~saxsnb.widgets.LinearFitPanel`), ``"kratky"``, ``"peaks"``,
        ``"distance"`` (p(r), :class:`~saxsnb.widgets.DistancePanel`) and
        ``"preparation"`` (subtraction and frame similarity; needs a background).
        Default: chosen from what the series holds (:func:`choose_panels`: Bragg
        peaks or a particle curve), the reason shown in one line above the panels.
    frame : int
        Initial current frame.
    name, background_name : str, optional
        Variable names of the series and background in exported code (default:
        the caller's own variables holding them, found by identity, else ``ds``).
    wait : bool, optional
        True: compute the whole-series results (automatic fits over every frame, the
        peak search and indexing, the shape summary) before returning. False: return
        at once with the current frame drawn, compute them in a background thread
        (on the active dask distributed client for a dask series) and update the
        trends when they arrive, the progress shown above the panels
        (``dashboard.wait()`` blocks until then). Default: False for a dask-backed
        series or one larger than :data:`DEFER_SIZE` points, else True. In the
        background the costly whole-series work is bounded whatever the length of the
        series: the peaks panel analyses one frame in k of a series longer than
        ``peaks.PEAK_FRAMES`` (2,000) frames, the distance panel's automatic p(r)
        trends one frame in k of more than ``distance.DISTANCE_FRAMES`` (100), each
        panel saying so (the peaks panel has a button for every frame); the fits and
        the shape summary cover every frame. ``dashboard.model.timings`` gives the
        time of each part.

    Returns
    -------
    Dashboard
        An ``ipywidgets.VBox``; ``dashboard.panels`` is a dict ``name -> panel`` (a
        :class:`PanelSet`), ``dashboard.frame`` the shared current frame,
        ``dashboard.reason`` why these panels, ``dashboard.to_code()`` the code that
        rebuilds every panel's result from the files and ``dashboard.write_tables()``
        the CSV tables of their results.

    Notes
    -----
    The panels share one :class:`~saxsnb.widgets.model.SeriesModel`
    (``dashboard.model``): the masked arrays exist once, and each whole-series
    analysis (the automatic Guinier fit, the peak search and indexing) runs once
    whichever panels use it. On a dask-backed series the panels hold only what they
    show: the frames drawn (fetched on demand), an overview map of block means of
    log10 I reduced chunk by chunk, and the per-frame results; the whole (frame, q)
    arrays are never loaded.
    """
    from ..errors import SaxsInputError

    make = _factories()
    known = (*PANEL_NAMES, *BACKGROUND_PANELS)
    reason = ""
    if panels is None:
        panels, reason = choose_panels(ds)
    elif isinstance(panels, str):
        panels = (panels,)
    unknown = [p for p in panels if p not in known]
    if unknown:
        raise SaxsInputError(f"unknown panel(s) {unknown}; choose from {list(known)}", parameter="panels")
    if background is None and any(p in BACKGROUND_PANELS for p in panels):
        raise SaxsInputError("the preparation panel needs a background series", parameter="background")
    # the preparation panel (frame x frame similarity map) is shown when asked for by name:
    # explore(ds, bg, panels=(*DEFAULT_PANELS, "preparation"))
    model = SeriesModel(ds)
    if wait is None:
        wait = not (model.lazy or model.n_frames * model.q.size > DEFER_SIZE)
    model.deferred = not wait
    model.name = checked_name(name) or caller_variable(ds)
    model.name_given = name is not None
    model.background = background
    model.background_name = checked_name(background_name, "background_name") or caller_variable(background)
    model.background_name_given = background_name is not None
    built = {p: make[p](model, background) for p in panels}
    dash = Dashboard(built, model=model, reason=reason)
    if frame:
        dash.frame = int(frame)
    return dash
