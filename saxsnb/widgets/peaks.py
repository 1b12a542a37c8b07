"""Peaks panel: Bragg peaks with hkl labels, phase assignment, maps and overrides."""

from __future__ import annotations

import html
import json

import ipywidgets as widgets
import numpy as np
import traitlets

from ..analysis._reflections import PHASES
from ..analysis._status import INDEXED
from ..display import (
    PHASE_COLOURS,
    curve_at,
    finite_points,
    format_value,
    indexing_summary,
    label_levels,
    phase_colours,
    pretty_label,
    status_message,
)
from ..errors import SaxsInputError
from . import _bq as bq
from .base import PanelBase, control_row, key_html, make_figure
from .palette import ROLE

__all__ = ["PeaksPanel"]

#: Most frames drawn in the peak map and lattice trend (longer series are thinned).
MAX_MAP_FRAMES = 400
#: Most frames whose peaks a deferred model (:func:`saxsnb.explore` on a big or lazy
#: series) finds, fits and indexes in the background by default: a longer series is
#: analysed on every k-th frame (k = ceil(frames / PEAK_FRAMES), said in the panel),
#: so the maps arrive in a time that does not grow with the series; the "Analyse every
#: frame" button (:meth:`PeaksPanel.analyse_every_frame`) asks for all of them.
PEAK_FRAMES = 2000


def default_every(model) -> int:
    """The frame step of the peaks panel on ``model``: 1 (every frame), or on a deferred
    model of more than :data:`PEAK_FRAMES` frames ceil(frames / PEAK_FRAMES)."""
    n = int(model.n_frames)
    if not model.deferred or n <= PEAK_FRAMES:
        return 1
    return int(np.ceil(n / PEAK_FRAMES))


_AUTO = "(automatic)"


class PeaksPanel(PanelBase):
    """Bragg peaks of the current frame, the phase assignment and its trends.

    Parameters
    ----------
    source : xarray.Dataset or SeriesModel
        The series (background-subtracted for best results), or the model shared with
        other panels (whose cached peaks and indexing are used).
    frame : int, optional
        Initial frame (default: the model's).
    overrides : mapping frame -> {"phase": str, "lattice": float or None}, optional
        Initial hand-made assignments (``ds.saxs.index_phases(..., overrides=...)``).
    find_options, index_options : dict, optional
        Passed to ``ds.saxs.find_peaks`` and ``ds.saxs.index_phases``.
    every : int, optional
        Analyse every ``every``-th frame only (``ds.isel(frame=slice(None, None,
        every))``; default :func:`default_every`: every frame, except on a big series
        opened by :func:`saxsnb.explore` with its results in the background). A frame
        between two analysed ones shows its own curve with the peaks and phase of the
        nearest analysed frame, and the table says which.

    Traits
    ------
    overrides : dict
        frame -> {"phase", "lattice"}; set with the "Override this frame" button, or
        :meth:`override` / :meth:`clear_override` from Python. Applied in ``result``
        and written out by ``to_code()``.

    Attributes
    ----------
    peaks, index : xarray.Dataset or None
        ``ds.saxs.find_peaks(**find_options)`` and ``ds.saxs.index_phases(peaks,
        **index_options)`` (computed once, in the model's cache; None when they failed).
    curve, markers : bqplot marks of the current frame; labels : bqplot.Label (hkl).
    table : ipywidgets.HTML
        The frame's assignment: phases, lattice +- sigma, score, alternatives, status.
    map_marks, trend_marks : dict phase -> bqplot.Scatter
        Tracked peak positions and lattice parameters over the scan, by phase.
    boundaries : bqplot.Lines
        Phase transitions found by ``ds.saxs.phase_map``.

    ``result`` is the whole-series assignment with the overrides applied (of the
    analysed frames: every ``every``-th).
    """

    name = "peaks"
    title = "Bragg peaks and phases"

    overrides = traitlets.Dict()

    def __init__(
        self, source, *, frame: int | None = None, overrides=None, find_options=None, index_options=None,
        every: int | None = None, **kwargs
    ):
        self._init_every = every
        self.find_options = dict(find_options or {})
        self.index_options = dict(index_options or {})
        self.peaks = None
        self.index = None
        self._transitions: list = []
        self._pos = np.zeros((0, 0))
        self._map_rows = np.zeros(0, dtype=int)
        #: plain summary of the indexing of the shown result ("" when every frame is fine)
        self._indexing_summary = ""
        super().__init__(source, frame=frame, **kwargs)
        self.observe(self._on_overrides, "overrides")
        if overrides:
            self.overrides = {int(k): dict(v) for k, v in overrides.items()}

    # ------------------------------------------------------------------ build
    def _build(self):
        #: Frame step of the analysis (1: every frame; see the class docstring).
        self.every = default_every(self.model) if self._init_every is None else int(self._init_every)
        if self.every < 1:
            raise SaxsInputError(f"every must be a positive integer, got {self._init_every!r}",
                                 parameter="every")
        lo, hi = self.model.positive_range()
        xs, ys = bq.LinearScale(), bq.LogScale(min=lo, max=hi)
        self.curve = bq.Lines(
            x=self.q,
            y=np.full(self.q.size, hi),
            scales={"x": xs, "y": ys},
            colors=[ROLE["data"]],
            stroke_width=1.2,
        )
        self.markers = bq.Scatter(
            x=np.zeros(0),
            y=np.zeros(0),
            scales={"x": xs, "y": ys},
            colors=[ROLE["fit"]],
            marker="triangle-down",
            default_size=40,
        )
        self.labels = bq.Label(
            x=np.zeros(0),
            y=np.zeros(0),
            text=[],
            scales={"x": xs, "y": ys},
            colors=[ROLE["reference"]],
            default_size=11,
            y_offset=-12,
            align="middle",
        )
        fig = make_figure(
            [self.curve, self.markers, self.labels],
            xs,
            ys,
            x_label=f"q ({self.q_units})",
            y_label=f"I ({self.intensity_units})",
            title=self.title,
            height="300px",
            y_range=(lo, hi),
        )
        self.table = widgets.HTML("")
        # maps over the scan
        mx, my = bq.LinearScale(), bq.LinearScale()
        lx, ly = bq.LinearScale(), bq.LinearScale()
        self._phase_names = list(PHASES) + ["unassigned"]
        self.map_marks, self.trend_marks = {}, {}
        for ph in self._phase_names:
            colour = PHASE_COLOURS.get("" if ph == "unassigned" else ph, PHASE_COLOURS[""])
            m = bq.clickable_points({"x": mx, "y": my}, colour, ph, size=10, display_legend=False)
            t = bq.clickable_points({"x": lx, "y": ly}, colour, ph, size=14, display_legend=False)
            m.on_element_click(self._on_point_click)
            t.on_element_click(self._on_point_click)
            self.map_marks[ph], self.trend_marks[ph] = m, t
        self.map_current = bq.Lines(
            x=np.zeros(2),
            y=np.array([self.q[0], self.q[-1]]),
            scales={"x": mx, "y": my},
            colors=[ROLE["current"]],
            stroke_width=1.5,
        )
        self.trend_current = bq.Lines(
            x=np.zeros(2),
            y=np.zeros(2),
            scales={"x": lx, "y": ly},
            colors=[ROLE["current"]],
            stroke_width=1.5,
        )
        self.boundaries = bq.Lines(
            x=np.zeros((1, 2)),
            y=np.zeros((1, 2)),
            scales={"x": lx, "y": ly},
            colors=[ROLE["reference"]],
            line_style="dashed",
            stroke_width=1.0,
            visible=False,
        )
        mfig = make_figure(
            [*self.map_marks.values(), self.map_current],
            mx,
            my,
            x_label=self.scan_label,
            y_label=f"peak position q ({self.q_units})",
            title="tracked peaks by assigned phase (click a point)",
            height="260px",
            x_limits=self.scan_limits,
        )
        tfig = make_figure(
            [*self.trend_marks.values(), self.boundaries, self.trend_current],
            lx,
            ly,
            x_label=self.scan_label,
            y_label="lattice parameter (nm)",
            title="lattice parameter (d or a) and phase boundaries",
            height="260px",
            x_limits=self.scan_limits,
        )
        self.figures = [fig, mfig, tfig]
        #: The phase colour key under the maps (one code for every figure: PHASE_COLOURS).
        self.phase_key = widgets.HTML("")
        self.map_note = widgets.HTML("")
        # override controls
        self.phase_choice = widgets.Dropdown(
            options=[_AUTO, *PHASES], value=_AUTO, description="phase", layout=widgets.Layout(width="14em")
        )
        self.lattice_box = widgets.FloatText(
            value=0.0,
            description="lattice (nm, 0 = refit)",
            style={"description_width": "initial"},
            layout=widgets.Layout(width="16em"),
        )
        self.override_button = widgets.Button(
            description="Override this frame",
            icon="pencil",
            layout=widgets.Layout(width="auto"),
            tooltip="Record the chosen phase for the current frame",
        )
        self.clear_button = widgets.Button(
            description="Clear override", icon="undo", layout=widgets.Layout(width="auto")
        )
        self.override_button.on_click(lambda _b: self._override_from_controls())
        self.clear_button.on_click(lambda _b: self.clear_override())
        self.overrides_text = widgets.HTML("")
        controls = control_row([self.phase_choice, self.lattice_box, self.override_button, self.clear_button])
        #: Analyse every frame instead of every ``every``-th (shown only when thinned).
        self.every_button = widgets.Button(
            description="Analyse every frame", icon="list", layout=widgets.Layout(width="auto"),
            tooltip="Find, fit and index the peaks of every frame (in the background)",
        )
        self.every_button.on_click(lambda _b: self.analyse_every_frame())
        self.every_note = widgets.HTML("")
        self._analyse()
        return [fig, self.table, controls, self.overrides_text, mfig, tfig, self.phase_key, self.map_note,
                control_row([self.every_note, self.every_button])]

    def _show_every(self) -> None:
        n = self.n_frames
        if self.every == 1:
            self.every_note.value = ""
            self.every_button.layout.display = "none"
            return
        k = self.every
        self.every_note.value = (
            f"<small>Peaks found, fitted and indexed on one frame in {k} ({len(range(0, n, k))} of {n}; "
            "other frames show the nearest analysed one): </small>")
        self.every_button.layout.display = None

    def analyse_every_frame(self) -> None:
        """Find, fit and index the peaks of every frame (``every = 1``; in the background
        on a deferred model, the maps redrawn when done)."""
        if self.every == 1:
            return
        self.every = 1
        self.peaks = self.index = None
        self._lat_range = (None,)
        self.set_trait("result", None)
        self._analyse()
        self._apply()
        self._update()

    def _analysis_arrived(self, res, exc) -> None:
        index = self.model.peek("index_phases", **self._every(), **self._index_params())
        if exc is not None and index is None:
            self.report(exc, "peak search / indexing")
            self.table.value = ""
            return
        self._analyse()  # from the cache now
        self._apply()
        self._update()

    def _index_params(self, overrides=None) -> dict:
        """Arguments of ``model.result("index_phases", ...)``: the peaks by their options."""
        params = {"peaks": dict(self.find_options), **self.index_options}
        if overrides:  # frames of the series -> positions among the analysed frames
            params["overrides"] = {int(k) // self.every: dict(v) for k, v in overrides.items()}
        return params

    def _every(self) -> dict:
        return {} if self.every == 1 else {"every": self.every}

    def analysed_frame(self, frame: int | None = None) -> int:
        """The analysed frame shown for ``frame`` (default: the current one): itself on
        every frame, else the nearest multiple of ``every`` in the series."""
        i = self.frame if frame is None else int(frame)
        return self._row(i) * self.every

    def _row(self, i: int) -> int:
        """Position of the analysed frame nearest frame ``i`` in the (thinned) results."""
        if self.every == 1:
            return int(i)
        last = (self.n_frames - 1) // self.every
        return int(min(last, int(np.floor(i / self.every + 0.5))))

    def _analyse(self) -> None:
        self._show_every()
        pm = {"index": self._index_params(), **self._every()}
        if self.model.deferred and self.model.peek("phase_map", **pm) is None:
            # every frame's peaks, indexing and phase map in the background: the curve is
            # drawn now, the rest when they arrive
            which = "every frame" if self.every == 1 else f"one frame in {self.every}"
            self.table.value = (f"<small>&#8987; finding, fitting and indexing the peaks of {which} "
                                "in the background&hellip;</small>")
            self.model.when_ready("phase_map", self._analysis_arrived, **pm)
            return
        try:
            self.peaks = self.model.result("find_peaks", **self._every(), **self.find_options)
            self.index = self.model.result("index_phases", **self._every(), **self._index_params())
        except Exception as exc:  # shown in the status line
            self.report(exc, "peak search / indexing")
            return
        try:
            pmap = self.model.result("phase_map", index=self._index_params(), **self._every())
            self._transitions = json.loads(pmap.attrs.get("transitions", "[]"))
        except Exception as exc:
            self.report(exc, "phase map")
        self._pos = np.asarray(self.peaks["position"].values, dtype=float)
        n, rows = self.n_frames, self._pos.shape[0]
        step = max(1, int(np.ceil(rows / MAX_MAP_FRAMES)))
        self._map_rows = np.arange(0, rows, step)  # positions in the (thinned) results
        shown = step * self.every
        self.map_note.value = (
            f"<small>Maps show one frame in {shown} ({self._map_rows.size} of {n}).</small>"
            if shown > 1
            else ""
        )

    # ------------------------------------------------------------- overrides
    def override(self, frame: int, phase: str, lattice: float | None = None) -> None:
        """Record that ``frame`` is ``phase`` (lattice refitted, or the given value in nm).
        When every ``every``-th frame is analysed, the nearest analysed frame is set."""
        if phase not in PHASES:
            self.status = f"unknown phase {phase!r}; choose from {', '.join(PHASES)}"
            return
        new = {k: dict(v) for k, v in self.overrides.items()}
        lat = None if lattice is None else float(lattice)
        new[self.analysed_frame(frame)] = {"phase": phase, "lattice": lat}
        self.overrides = new

    def clear_override(self, frame: int | None = None) -> None:
        """Forget the override of ``frame`` (default: the current frame)."""
        f = self.analysed_frame(frame)
        if f in self.overrides:
            self.overrides = {k: dict(v) for k, v in self.overrides.items() if k != f}

    def _override_from_controls(self) -> None:
        phase = self.phase_choice.value
        if phase == _AUTO:
            self.clear_override()
            return
        lat = float(self.lattice_box.value)
        self.override(self.frame, phase, lat if lat > 0 else None)

    def _on_overrides(self, change) -> None:
        self._apply()
        self._update()

    def _apply(self) -> None:
        if self.index is None:
            return
        try:
            res = (self.model.result("index_phases", **self._every(), **self._index_params(self.overrides))
                   if self.overrides else self.index)
        except Exception as exc:
            self.report(exc, "override")
            return
        self._indexing_summary = indexing_summary(res["status"].values) if "status" in res else ""
        self._set_result(res)
        self._draw_maps()

    # ------------------------------------------------------------------- maps
    def _draw_maps(self) -> None:
        res = self.result
        rows = self._map_rows
        scan = np.asarray(self.scan_values, dtype=float)
        pos = self._pos[rows]
        pphase = np.asarray(res["peak_phase"].values)[rows] if "peak_phase" in res else np.full(pos.shape, "")
        frames = rows * self.every  # frames of the series
        frames_2d = np.broadcast_to(frames[:, None], pos.shape)
        lat = np.asarray(res["lattice"].values, dtype=float)[rows]
        lphase = np.asarray(res["phase"].values)[rows]
        frames_slot = np.broadcast_to(frames[:, None], lat.shape)
        present = []
        for ph in self._phase_names:
            key = "" if ph == "unassigned" else ph
            sel = np.isfinite(pos) & (pphase == key)
            m = self.map_marks[ph]
            self._set_points(m, scan[frames_2d[sel]], pos[sel])
            self._point_frames[id(m)] = frames_2d[sel]
            t = self.trend_marks[ph]
            tsel = np.isfinite(lat) & (lphase == key) if key else np.zeros(lat.shape, bool)
            self._set_points(t, scan[frames_slot[tsel]], lat[tsel])
            self._point_frames[id(t)] = frames_slot[tsel]
            if sel.any():
                present.append(ph)
        self.phase_key.value = key_html(
            [(PHASE_COLOURS.get("" if ph == "unassigned" else ph, PHASE_COLOURS[""]), "&#9679;", ph)
             for ph in present]
            + [(ROLE["reference"], "- -", "phase boundary"), (ROLE["current"], "&#9474;", "current frame")]
        )
        self._draw_boundaries(lat)

    def _draw_boundaries(self, lat) -> None:
        xs = sorted(
            {
                float(v)
                for t in self._transitions
                for k in ("appears", "vanishes")
                if (v := t.get(k)) is not None
            }
        )
        if not xs or not np.isfinite(lat).any():
            self.boundaries.visible = False
            return
        lo, hi = float(np.nanmin(lat)), float(np.nanmax(lat))
        with self.boundaries.hold_sync():
            self.boundaries.x = np.array([[x, x] for x in xs])
            self.boundaries.y = np.array([[lo, hi]] * len(xs))
            self.boundaries.visible = True

    # ----------------------------------------------------------------- update
    def _update(self) -> None:
        i = self.frame
        if self.result is None:
            self._apply()
        I = self.model.rows(i)[0]
        self._set_line(self.curve, self.q, I, positive=True)
        self.figure.title = pretty_label(f"{self.title}: {self.frame_label(i)}")
        v = float(self.scan_values[i])
        with self.map_current.hold_sync():
            self.map_current.x = np.array([v, v])
        res = self.result
        if res is None:
            return
        V = res.variables  # Variables, not DataArrays (this runs at every step)
        with self.trend_current.hold_sync():
            if getattr(self, "_lat_range", (None,))[0] is not res:  # once per result
                lat = np.asarray(V["lattice"].values, dtype=float)
                fin = lat[np.isfinite(lat)]
                self._lat_range = (res, np.array([fin.min(), fin.max()]) if fin.size else np.zeros(2))
            self.trend_current.x = np.array([v, v])
            self.trend_current.y = self._lat_range[1]
        r = self._row(i)  # i itself, or the nearest analysed frame's position
        pos = self._pos[r]
        hkl = np.asarray(V["hkl"].values[r]) if "hkl" in res else np.full(pos.shape, "")
        pphase = np.asarray(V["peak_phase"].values[r]) if "peak_phase" in res else np.full(pos.shape, "")
        # markers on the log axis: finite positions with a positive intensity only,
        # coloured by phase; labels of close peaks (coexisting phases) stacked upwards
        px, py, kept = finite_points(pos, curve_at(self.q, I, pos), positive=True)
        colours = phase_colours(pphase[kept])
        span = float(self.q.max() - self.q.min()) or 1.0
        level = label_levels(px, min_gap=0.035 * span)
        ly = py * (1.8 ** level) if px.size else py
        self._set_points(self.markers, px, py, colors=colours or [ROLE["fit"]])
        self._set_points(self.labels, px, ly, text=[str(h) for h in hkl[kept]],
                         colors=colours or [ROLE["reference"]])
        self.table.value = self._table_html(r)
        f = r * self.every
        self.phase_choice.value = self.overrides.get(f, {}).get("phase", _AUTO)
        status = str(V["status"].values[r])
        self.status = "" if status in ("ok", "override") else f"{self.frame_label(f)}: {status}"

    def _table_html(self, i: int) -> str:
        """The assignment table of position ``i`` of the (thinned) results."""
        res = self.result
        V = res.variables
        e = html.escape
        rows = []
        for s in range(res.sizes["slot"]):
            ph = str(V["phase"].values[i, s])
            if not ph:
                continue
            lat, sig = float(V["lattice"].values[i, s]), float(V["lattice_sigma"].values[i, s])
            score = float(V["score"].values[i, s])
            what = "d" if ph == "lamellar" else "a"
            lat_t = html.escape(format_value(lat, sig))
            rows.append(
                f"<tr><td>{e(ph)}</td><td>{what} = {lat_t} nm</td><td>{score:.2f}</td></tr>"
                if np.isfinite(score)
                else f"<tr><td>{e(ph)}</td><td>{what} = {lat_t} nm</td><td>n/a</td></tr>"
            )
        get = lambda k: str(V[k].values[i]) if k in res else ""  # noqa: E731
        status = get("status")
        # a frame without a phase says why in plain words (the code stays in result.status)
        why = "no phase assigned" if status in ("", *INDEXED) else status_message(status)
        body = "".join(rows) or f"<tr><td colspan=3><b>{e(why)}</b></td></tr>"
        extra = []
        if status and status != "ok" and rows:
            extra.append(f"status: {e(status_message(status))}")
        for k, label in (("alternative", "alternatives"), ("caveat", "caveat")):
            if get(k):
                extra.append(f"{label}: {e(get(k))}")
        n_pk = int(np.isfinite(self._pos[i]).sum())
        n_broad = int(V["n_broad"].values[i]) if "n_broad" in res else 0
        extra.append(
            f"{n_pk} peak(s) found" + (f", {n_broad} of them broad (not Bragg peaks)" if n_broad else "")
        )
        summary = self._indexing_summary
        if summary:
            extra.append(f"<b>{e(summary)}</b>: the lattice plot stays empty")
        f = i * self.every
        if f != self.frame:
            extra.insert(0, f"<b>peaks and phase of {e(self.frame_label(f))}</b>, the nearest analysed frame "
                            f"(one frame in {self.every} analysed)")
        style = "<style>.saxsnb-phases td, .saxsnb-phases th {padding: 0 1em 0 0; text-align: left}</style>"
        return (
            f"{style}<table class='saxsnb-phases'><tr><th>phase</th><th>lattice</th>"
            f"<th>score</th></tr>{body}</table><small>{'<br>'.join(extra)}</small>"
        )

    def _on_frame(self) -> None:
        self._update()

    # ------------------------------------------------------------------ code
    def _code_lines(self, target: str) -> list[str]:
        fo = ", ".join(f"{k}={v!r}" for k, v in sorted(self.find_options.items()))
        io = ", ".join(f"{k}={v!r}" for k, v in sorted(self.index_options.items()))
        found = "found_peaks" if target == "peaks" else f"{target}_peaks"
        src = "ds" if self.every == 1 else f"ds.isel(frame=slice(None, None, {self.every}))"
        if self.overrides:  # frames set by hand (positions among the analysed frames)
            ov = {
                int(k) // self.every: {"phase": v["phase"], "lattice": v.get("lattice")}
                for k, v in sorted(self.overrides.items())
            }
            io = ", ".join(x for x in (io, f"overrides={ov!r}") if x)
        lines = [f"# peaks of one frame in {self.every} (as the panel shows them)"] if self.every > 1 else []
        return lines + [
            f"{found} = {src}.saxs.find_peaks({fo})",
            f"{target} = {src}.saxs.index_phases({found}{', ' + io if io else ''})",
        ]
