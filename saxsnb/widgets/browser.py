"""Series browser: a slider and play button over the frames, and an overview map."""

from __future__ import annotations

import html

import ipywidgets as widgets
import numpy as np

from ..display import colour_bar_ticks, fill_missing
from . import _bq as bq
from .base import PanelBase, control_row, make_figure
from .palette import MAP_SCHEME, ROLE

__all__ = ["SeriesBrowser"]


class SeriesBrowser(PanelBase):
    """Step through a series: slider, play button and a clickable overview map.

    Parameters
    ----------
    source : xarray.Dataset or SeriesModel
        The series, or the model shared with other panels.
    frame : int, optional
        Initial frame (default: the model's).
    max_rows, max_cols : int
        Size limits of the overview map; a larger series is averaged in blocks of
        frames and q points (``display.overview_map``), and the panel says so.

    Attributes
    ----------
    slider : ipywidgets.IntSlider
        Frame slider (keyboard: focus its handle and use the arrow keys).
    play : ipywidgets.Play
        Play button, linked to the slider in the browser (``jslink``).
    label : ipywidgets.HTML
        The current frame's scan value and units, e.g. "temperature 45.5 degC".
    heatmap : bqplot.HeatMap
        log10 I over (q, scan).
    rows : bqplot.GridHeatMap (``_bq.CellTargets``: its selection stays serialisable)
        Transparent row targets over the map: clicking a row selects its frame
        (``rows.on_element_click``, and ``rows.selected`` with the click-select
        interaction, cleared once read). From Python: :meth:`select_row` or the
        handler ``_on_row_click``.
    marker : bqplot.Lines
        Horizontal line at the current frame.

    ``result`` is the current frame, ``ds.isel(frame=[i])``.
    """

    name = "browser"
    title = "Series browser"

    def __init__(self, source, *, frame: int | None = None, max_rows: int = 400, max_cols: int = 400,
                 **kwargs):
        self._max_rows = int(max_rows)
        self._max_cols = int(max_cols)
        super().__init__(source, frame=frame, **kwargs)

    # ---------------------------------------------------------------- build
    def _build(self):
        n = self.n_frames
        self.slider = widgets.IntSlider(
            value=0,
            min=0,
            max=max(n - 1, 0),
            step=1,
            description="frame",
            continuous_update=True,
            readout=True,
            layout=widgets.Layout(width="60%"),
        )
        self.play = widgets.Play(
            value=0, min=0, max=max(n - 1, 0), step=1, interval=250, description="Play through the frames"
        )
        widgets.jslink((self.play, "value"), (self.slider, "value"))
        widgets.link((self.slider, "value"), (self, "frame"))
        self.label = widgets.HTML("")

        omap = self.model.overview(self._max_rows, self._max_cols)  # block by block (chunks when lazy)
        self.overview = omap
        centre = (omap["frame_start"] + omap["frame_stop"] - 1) // 2
        y = self.scan_values[centre] if self._monotonic() else centre.astype(float)
        self._row_axis_is_scan = self._monotonic()
        order = np.argsort(y, kind="stable")
        self._row_frames = centre[order]
        self._row_y = np.asarray(y, dtype=float)[order]
        logmap = omap["log10_intensity"][order]
        if logmap.shape[0] == 1:  # one frame: a map of two identical rows (a 2-D image)
            logmap = np.vstack([logmap, logmap])
            self._row_frames = np.repeat(self._row_frames, 2)
            self._row_y = self._row_y[0] + np.array([-0.5, 0.5])
        logmap, missing = fill_missing(logmap)

        xs = bq.LogScale() if np.all(self.q > 0) else bq.LinearScale()
        ys = bq.LinearScale()
        # fixed colour range and a few whole-decade ticks: the colour bar never re-ticks
        c_lo, c_hi, c_ticks = colour_bar_ticks(logmap)
        cs = bq.ColorScale(scheme=MAP_SCHEME, min=c_lo, max=c_hi)
        self.heatmap = bq.HeatMap(
            x=omap["q"],
            y=self._row_y,
            color=logmap,
            scales={"x": xs, "y": ys, "color": cs},
            null_color="white",
        )
        qx = omap["q"]
        q_edges = np.array([qx[0], np.sqrt(qx[0] * qx[-1]) if qx[0] > 0 else 0.5 * (qx[0] + qx[-1]), qx[-1]])
        y_edges = self._edges(self._row_y)
        self.rows = bq.CellTargets(
            # invisible click targets: every cell gets the value 0 of a transparent scale
            # (bqplot colours NaN cells black: null_color only applies to None)
            color=np.zeros((self._row_y.size, 2)),
            row=y_edges,
            column=q_edges,
            scales={
                "row": ys,
                "column": xs,
                "color": bq.ColorScale(colors=["transparent", "transparent"], min=0.0, max=1.0),
            },
            null_color="transparent",
            stroke="transparent",
            opacity=1.0,
            interactions={"click": "select"},
            selected_style={"stroke": ROLE["current"], "stroke-width": "2"},
        )
        self.rows.on_element_click(self._on_row_click)
        self.rows.observe(self._on_row_selected, "selected")
        self.marker = bq.Lines(
            x=np.array([qx[0], qx[-1]]),
            y=np.zeros(2),
            scales={"x": xs, "y": ys},
            colors=[ROLE["current"]],
            stroke_width=2.0,
        )
        caxis = bq.ColorAxis(
            scale=cs, label="log10 I", side="right", tick_values=c_ticks, tick_format="~g"
        )
        ylab = self.scan_label if self._row_axis_is_scan else "frame"
        marks = [self.heatmap] + ([self.rows] if self._row_y.size >= 2 else []) + [self.marker]
        fig = make_figure(
            marks,
            xs,
            ys,
            x_label=f"q ({self.q_units})",
            y_label=ylab,
            title="log10 intensity over the series (click a row)",
            # bqplot draws a vertical colour bar 200 px shorter than the plot area
            height="440px",
            x_range=(float(qx[0]), float(qx[-1])),
        )
        fig.axes = [*fig.axes, caxis]
        fig.fig_margin = {**fig.fig_margin, "right": 70}
        self.figures = [fig]
        notes = []
        if omap["row_step"] > 1 or omap["col_step"] > 1:
            notes.append(
                f"Map downsampled for the browser: blocks of {omap['row_step']} frame(s) x "
                f"{omap['col_step']} q point(s) averaged (log10 I); the curves are not."
            )
        if missing.any():
            notes.append(
                f"{int(missing.sum())} map cell(s) without a positive intensity are drawn "
                "in the lowest colour."
            )
        self.map_note = widgets.HTML(f"<small>{html.escape(' '.join(notes))}</small>")
        return [control_row([self.play, self.slider]), self.label, fig, self.map_note]

    def _monotonic(self) -> bool:
        v = self.scan_values
        if self.scan == "frame" or v.size < 2 or not np.issubdtype(v.dtype, np.number):
            return self.scan != "frame" and v.size == 1 and np.issubdtype(v.dtype, np.number)
        d = np.diff(v.astype(float))
        return bool(np.all(np.isfinite(d)) and (np.all(d > 0) or np.all(d < 0)))

    @staticmethod
    def _edges(centres: np.ndarray) -> np.ndarray:
        c = np.asarray(centres, dtype=float)
        if c.size == 1:
            return np.array([c[0] - 0.5, c[0] + 0.5])
        mid = 0.5 * (c[1:] + c[:-1])
        return np.concatenate([[c[0] - (mid[0] - c[0])], mid, [c[-1] + (c[-1] - mid[-1])]])

    # -------------------------------------------------------------- clicking
    def select_row(self, row: int) -> None:
        """Make the frame of overview row ``row`` (0 = lowest scan value) current."""
        row = int(row)
        if not 0 <= row < self._row_frames.size:
            self.status = f"map row {row} outside 0..{self._row_frames.size - 1}"
            return
        self.frame = int(self._row_frames[row])

    def _on_row_click(self, _mark, content) -> None:
        data = content.get("data") or {}
        row = data.get("rowNum", data.get("row")) if isinstance(data, dict) else None
        if row is not None:
            self.select_row(row)

    def _on_row_selected(self, change) -> None:
        sel = change["new"]
        if sel is None or np.size(sel) == 0:
            return
        row = int(np.asarray(sel, dtype=float).reshape(-1, 2)[-1, 0])
        # cleared at once: the outline would stay on the clicked row beside the
        # current-frame line after moving on
        self.rows.selected = None
        self.select_row(row)

    # ---------------------------------------------------------------- update
    def _update(self) -> None:
        i = self.frame
        y = self.scan_values[i] if self._row_axis_is_scan else float(i)
        with self.marker.hold_sync():
            self.marker.y = np.array([float(y), float(y)])
        self.label.value = f"<b>{html.escape(self.frame_label(i))}</b> of {self.n_frames} frames"
        self._set_result(self.model.part([i]))
        self.status = ""

    def _code_lines(self, target: str) -> list[str]:
        return [f"{target} = ds.isel(frame=[{self.frame}])  # {self.code_comment()}"]
