"""``explore(ds)``: all panels of a series, linked on one current frame."""

from __future__ import annotations

import html
from collections.abc import Sequence

import ipywidgets as widgets
import traitlets
import xarray as xr

from .base import PanelBase
from .model import SeriesModel

__all__ = ["Dashboard", "PanelSet", "explore", "PANEL_NAMES", "DEFAULT_PANELS"]

#: Panels :func:`explore` offers, in display order.
PANEL_NAMES = ("browser", "curve", "guinier", "kratky", "peaks", "distance")
#: Panels :func:`explore` shows when none are named.
DEFAULT_PANELS = ("browser", "curve", "guinier", "kratky", "peaks")
#: Panels added when a background is given.
BACKGROUND_PANELS = ("preparation",)


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

    def __init__(self, panels: dict[str, PanelBase], *, model: SeriesModel | None = None, **kwargs):
        super().__init__(**kwargs)
        self.panels = PanelSet(panels)
        self.model = model
        targets = [model] if model is not None else list(self.panels.values())
        self._links = [traitlets.link((t, "frame"), (self, "frame")) for t in targets]
        self.status_line = widgets.HTML("")
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
        self.children = [
            *self._arrange(),
            widgets.HBox([self.export_button]),
            self.code_area,
            self.status_line,
        ]

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

    def to_code(self) -> str:
        """Code reproducing every panel's result, one variable per panel (its name).

        The code expects the series in ``ds`` (and ``background`` where used).
        """
        out = ["import saxsnb  # noqa: F401  (registers ds.saxs)"]
        for name, p in self.panels.items():
            out.append(f"# {p.title}")
            out.extend(p._code_lines(name))
        return "\n".join(out) + "\n"

    @property
    def code(self) -> str:
        """The same as :meth:`to_code`."""
        return self.to_code()

    def show_code(self) -> str:
        """Show the exported code in the text area (what "Export all code" does)."""
        self.code_area.value = self.to_code()
        self.code_area.layout.display = None
        return self.code_area.value


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
        "kratky": lambda model, bg: KratkyPanel(model),
        "peaks": lambda model, bg: PeaksPanel(model),
        "preparation": lambda model, bg: PreparationPanel(model, bg),
        "distance": lambda model, bg: DistancePanel(model),
    }


def explore(
    ds: xr.Dataset,
    background: xr.Dataset | None = None,
    *,
    panels: Sequence[str] = DEFAULT_PANELS,
    frame: int = 0,
) -> Dashboard:
    """Open the linked panels of a series in a notebook.

    Parameters
    ----------
    ds : xarray.Dataset
        A series in the saxsnb layout (never modified).
    background : xarray.Dataset, optional
        A background series, drawn in the curve panel.
    panels : sequence of str
        Which panels, among ``"browser"``, ``"curve"``, ``"guinier"``, ``"kratky"``,
        ``"peaks"``, ``"distance"`` (p(r), :class:`~saxsnb.widgets.DistancePanel`) and
        ``"preparation"`` (default: :data:`DEFAULT_PANELS`, every panel but ``"distance"``;
        ``"preparation"``, the subtraction and frame-similarity panel, needs a background
        and is shown when named).
    frame : int
        Initial current frame.

    Returns
    -------
    Dashboard
        An ``ipywidgets.VBox``; ``dashboard.panels`` is a dict ``name -> panel`` (a
        :class:`PanelSet`), ``dashboard.frame`` the shared current frame and
        ``dashboard.to_code()`` the code that reproduces every panel's result.

    Notes
    -----
    The panels share one :class:`~saxsnb.widgets.model.SeriesModel`
    (``dashboard.model``): the masked arrays exist once, and each whole-series
    analysis (the automatic Guinier fit, the peak search and indexing) runs once
    whichever panels use it.
    """
    from ..errors import SaxsInputError

    make = _factories()
    known = (*PANEL_NAMES, *BACKGROUND_PANELS)
    unknown = [p for p in panels if p not in known]
    if unknown:
        raise SaxsInputError(f"unknown panel(s) {unknown}; choose from {list(known)}", parameter="panels")
    if background is None and any(p in BACKGROUND_PANELS for p in panels):
        raise SaxsInputError("the preparation panel needs a background series", parameter="background")
    # the preparation panel (frame x frame similarity map) is shown when asked for by name:
    # explore(ds, bg, panels=(*DEFAULT_PANELS, "preparation"))
    model = SeriesModel(ds)
    built = {name: make[name](model, background) for name in panels}
    dash = Dashboard(built, model=model)
    if frame:
        dash.frame = int(frame)
    return dash
