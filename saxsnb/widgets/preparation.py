"""Preparation panel: background subtraction with a scale control, frame similarity map."""

from __future__ import annotations

import html

import ipywidgets as widgets
import numpy as np
import traitlets

from ..display.axes import positive_range
from ..display.plots import similarity_map
from ..errors import SaxsError
from . import _bq as bq
from .base import PanelBase, control_row, make_figure
from .palette import MAP_SCHEME, ROLE

__all__ = ["PreparationPanel"]

#: Smallest p-value drawn on the map (-log10 p is clipped at 12).
P_FLOOR = 1e-12
#: Most cells along a side of the similarity map; longer series are shown in blocks.
MAP_CELLS = 200


class PreparationPanel(PanelBase):
    """Sample, background and subtracted curves; the frame-similarity map; outliers.

    Parameters
    ----------
    source : xarray.Dataset or SeriesModel
        The series, or the model shared with other panels.
    background : xarray.Dataset
        The background series (as for ``ds.saxs.subtract``; never modified).
    frame : int, optional
        Initial frame (default: the model's).
    scale : float or None
        Initial background scale; None = fitted per frame (``scale="auto"``).
    test : {"cormap", "chi2"}
        The similarity test of ``ds.saxs.compare_frames`` behind the map and flags.

    Traits
    ------
    scale : float or None
        The background scale: a number, or None for the automatic per-frame fit on the
        upper quarter of the q range. Linked to :attr:`scale_box` and :attr:`auto_box`.

    Attributes
    ----------
    sample_line, background_line, subtracted_line : bqplot.Lines
        The current frame as measured, the background as subtracted (scale x the
        matched background frame), and the difference.
    cells : bqplot.GridHeatMap (``_bq.CellTargets``)
        -log10 of the pairwise p-value of every pair of frames
        (``compare_frames(...).pairwise_p_value``). Clicking a cell makes its row's
        frame current; from Python set ``cells.selected`` or call :meth:`select_cell`.
    flags : bqplot.Scatter
        The flagged (outlier) frames, marked on the left edge of the map.
    flag_table : ipywidgets.HTML
        Per flagged frame: score and adjusted p-value.

    ``result`` is the whole subtracted series, ``ds.saxs.subtract(background,
    scale=...)``; the similarity test is ``model.result("compare_frames", test=...)``.
    """

    name = "preparation"
    title = "Preparation: subtraction and frame similarity"

    scale = traitlets.Float(None, allow_none=True)

    def __init__(self, source, background, *, frame: int | None = None, scale: float | None = None,
                 test: str = "cormap", **kwargs):
        self.background = background
        self.test = test
        self._subtracted: dict = {}
        self._syncing = False
        self._shown_scale: float | str = "auto"
        super().__init__(source, frame=frame, **kwargs)
        self.observe(self._on_scale, "scale")
        if scale is not None:
            self.scale = float(scale)

    # ---------------------------------------------------------------- analysis
    def _scale_argument(self) -> float | str:
        return "auto" if self.scale is None else float(self.scale)

    def subtracted(self):
        """The subtracted series for the current ``scale`` (cached per scale)."""
        s = self._scale_argument()
        if s not in self._subtracted:
            self._subtracted[s] = self.ds.saxs.subtract(self.background, scale=s).compute()
        return self._subtracted[s]

    def similarity(self):
        """``ds.saxs.compare_frames(test=..., pairwise=True)`` (cached on the model)."""
        return self.model.result("compare_frames", test=self.test, pairwise=True)

    def _background_dataset(self):
        return self.background

    def _code_lines(self, target: str) -> list[str]:
        return [f"{target} = ds.saxs.subtract(background, scale={self._shown_scale!r})"]

    # ------------------------------------------------------------------- build
    def _build(self):
        lo, hi = self.model.positive_range()
        try:  # the subtracted curves lie below the measured ones: the range holds both
            slo, shi = positive_range(self.subtracted()["intensity"].values)
            lo, hi = min(lo, slo), max(hi, shi)
        except SaxsError:
            pass
        xs = bq.LogScale() if np.all(self.q > 0) else bq.LinearScale()
        # a fixed y domain: from the data alone bqplot's first draw has none (the lines start
        # as placeholders) and lays the log axis ticks at translate(0,NaN) in the page
        ys = bq.LogScale(min=lo, max=hi)
        scales = {"x": xs, "y": ys}
        self.sample_line = bq.Lines(x=self.q, y=np.ones_like(self.q), scales=scales,
                                    colors=[ROLE["data"]], labels=["sample"], stroke_width=1.5)
        self.background_line = bq.Lines(x=self.q, y=np.ones_like(self.q), scales=scales,
                                        colors=[ROLE["background"]], labels=["background x scale"],
                                        stroke_width=1.5)
        self.subtracted_line = bq.Lines(x=self.q, y=np.ones_like(self.q), scales=scales,
                                        colors=[ROLE["fit"]], labels=["subtracted"], stroke_width=1.5)
        curve_fig = make_figure(
            [self.background_line, self.sample_line, self.subtracted_line], xs, ys,
            x_label=f"q ({self.q_units})", y_label=f"I ({self.intensity_units})",
            title="sample, background, subtracted",
            x_range=(float(self.q.min()), float(self.q.max())), y_range=(lo, hi),
        )
        curve_fig.legend_location = "top-right"
        for m in curve_fig.marks:
            m.display_legend = True
        self.scale_box = widgets.FloatText(value=1.0, step=0.01, description="scale", disabled=True,
                                           layout=widgets.Layout(width="12em"))
        self.auto_box = widgets.Checkbox(value=True, description="auto (fit on upper quarter of q)",
                                         indent=False, layout=widgets.Layout(width="auto"))
        self.scale_box.observe(self._from_controls, "value")
        self.auto_box.observe(self._from_controls, "value")
        self.scale_note = widgets.HTML("")

        n = self.n_frames
        sim = self.similarity()
        # fixed domains: the grid of cells alone gives bqplot no data range at first draw
        mx = bq.LinearScale(min=-1.5, max=n - 0.5)
        my = bq.LinearScale(min=-0.5, max=n - 0.5, reverse=True)
        # a long series: blocks of frames, at most MAP_CELLS a side, each its most dissimilar pair
        shrunk = similarity_map(self._map_values(sim), max_cells=MAP_CELLS)
        self.map_values = shrunk["values"]
        self.map_frames = shrunk["frame_start"]
        cs = bq.ColorScale(scheme=MAP_SCHEME, min=0.0, max=float(-np.log10(P_FLOOR)))
        edges = shrunk["edges"]
        self.cells = bq.CellTargets(
            color=self.map_values, row=edges, column=edges,
            scales={"row": my, "column": mx, "color": cs},
            interactions={"click": "select"},
            selected_style={"stroke": ROLE["current"], "stroke-width": "2"},
        )
        self.cells.observe(self._on_cell_selected, "selected")
        self.cells.on_element_click(self._on_cell_click)
        flagged = np.flatnonzero(np.asarray(sim["outlier"].values, dtype=bool))
        self.flagged_frames = flagged
        self.flags = bq.Scatter(x=np.full(max(flagged.size, 1), -1.0), y=flagged.astype(float)
                                if flagged.size else np.zeros(1), scales={"x": mx, "y": my},
                                colors=[ROLE["warning"]], marker="triangle-up", default_size=40,
                                labels=["flagged frames"], visible=bool(flagged.size))
        self.current_row = bq.Lines(x=np.array([-0.5, n - 0.5]), y=np.zeros(2), scales={"x": mx, "y": my},
                                    colors=[ROLE["current"]], stroke_width=1.5)
        top = float(-np.log10(P_FLOOR))
        caxis = bq.ColorAxis(scale=cs, label="-log10 p", side="right",
                             tick_values=np.array([0.0, top / 2, top]), tick_format="~g")
        map_fig = make_figure(
            [self.cells, self.flags, self.current_row], mx, my, x_label="frame", y_label="frame",
            title=f"frame similarity ({self.test}; click a cell)", height="360px",
        )
        map_fig.axes = [*map_fig.axes, caxis]
        map_fig.fig_margin = {**map_fig.fig_margin, "right": 70}
        self.flag_table = widgets.HTML(self._flag_table(sim))
        self.figures = [curve_fig, map_fig]
        return [curve_fig, control_row([self.auto_box, self.scale_box]), self.scale_note, map_fig,
                self.flag_table]

    @staticmethod
    def _map_values(sim) -> np.ndarray:
        p = np.asarray(sim["pairwise_p_value"].values, dtype=float)
        p = np.where(np.isfinite(p), p, 1.0)
        return -np.log10(np.clip(p, P_FLOOR, 1.0))

    def _flag_table(self, sim) -> str:
        ref = int(sim.attrs.get("parameters", {}).get("reference", 0)) if isinstance(
            sim.attrs.get("parameters"), dict) else 0
        head = (f"<small>Test {html.escape(self.test)} against frame {ref}, Holm-adjusted p-values; "
                "the map shows every pair (dark = alike). ")
        if not self.flagged_frames.size:
            return head + "No frame flagged.</small>"
        rows = "".join(
            f"<tr><td>{html.escape(self.frame_label(int(i)))}</td>"
            f"<td>{float(sim['score'].values[i]):.4g}</td><td>{float(sim['p_adjusted'].values[i]):.2g}</td></tr>"
            for i in self.flagged_frames
        )
        return (head + f"{self.flagged_frames.size} frame(s) flagged:</small>"
                "<table><tr><th>frame</th><th>score</th><th>p (adjusted)</th></tr>" + rows + "</table>")

    # ---------------------------------------------------------------- controls
    def _from_controls(self, change=None) -> None:
        if self._syncing:
            return
        self.scale = None if self.auto_box.value else float(self.scale_box.value)

    def _on_scale(self, change=None) -> None:
        self._syncing = True
        try:
            self.auto_box.value = self.scale is None
            self.scale_box.disabled = self.scale is None
            if self.scale is not None:
                self.scale_box.value = float(self.scale)
        finally:
            self._syncing = False
        self._update()

    # ---------------------------------------------------------------- clicking
    def select_cell(self, row: int, column: int | None = None) -> None:
        """Make the frame of map row ``row`` current (the column is the partner frame);
        on a shrunk map (more than ``MAP_CELLS`` frames) a row is a block of frames and
        its first frame becomes current."""
        row = int(row)
        n_rows = len(self.map_frames)
        if not 0 <= row < n_rows:
            self.status = f"map row {row} outside 0..{n_rows - 1}"
            return
        self.frame = int(self.map_frames[row])

    def _on_cell_click(self, _mark, content) -> None:
        data = content.get("data") or {}
        row = data.get("rowNum", data.get("row")) if isinstance(data, dict) else None
        if row is not None:
            self.select_cell(row)

    def _on_cell_selected(self, change) -> None:
        sel = change["new"]
        if sel is None or np.size(sel) == 0:
            return
        row, col = np.asarray(sel, dtype=float).reshape(-1, 2)[-1]
        self.cells.selected = None  # no outline left behind the current-frame line
        self.select_cell(int(row), int(col))

    # ------------------------------------------------------------------ update
    def _update(self) -> None:
        i = self.frame
        with self.current_row.hold_sync():
            self.current_row.y = np.array([float(i), float(i)])
        try:
            out = self.subtracted()
        except SaxsError as exc:
            self.report(exc, "subtract")
            return
        self._shown_scale = self._scale_argument()
        I, _ = self.model.rows(i)
        J = np.asarray(out["intensity"].values[i], dtype=float)
        self._set_line(self.sample_line, self.q, I, positive=True)
        self._set_line(self.background_line, self.q, I - J, positive=True)
        self._set_line(self.subtracted_line, self.q, J, positive=True)
        if "background_scale" in out:
            s = float(out["background_scale"].values[i])
            ds_ = float(out["background_scale_sigma"].values[i])
            self.scale_note.value = (f"<small>{html.escape(self.frame_label(i))}: fitted scale "
                                     f"{s:.4g} +- {ds_:.2g} (assumes the sample adds nothing "
                                     "on the upper quarter of q)</small>")
        else:
            self.scale_note.value = f"<small>fixed scale {float(self.scale):.4g}</small>"
        flagged = i in set(self.flagged_frames.tolist())
        self.status = f"frame {i} is flagged by the {self.test} test" if flagged else ""
        self._set_result(out)
