"""P(r) panel: the current frame's pair-distance distribution, its fit and the series trends."""

from __future__ import annotations

import html

import ipywidgets as widgets
import numpy as np
import traitlets

from ..display import errorbar_segments, finite_points, format_value, value_range
from . import _bq as bq
from .base import DatasetTrait, PanelBase, checked_range, control_row, key_html, make_figure
from .palette import OKABE_ITO, ROLE

__all__ = ["DistancePanel"]

#: Log-evidence units shown below the best Dmax candidate in the evidence plot.
EVIDENCE_SPAN = 60.0


#: Most frames whose automatic p(r) (Dmax and weight chosen by the evidence: seconds per
#: frame) a deferred model (:func:`saxsnb.explore` on a big or lazy series) computes for
#: the trends by default: a longer series gets one frame in k, k = ceil(frames /
#: DISTANCE_FRAMES), said under the trends. The current frame is always its own.
DISTANCE_FRAMES = 100


def distance_every(model) -> int:
    """The frame step of the distance panel's automatic trends on ``model``."""
    n = int(model.n_frames)
    return 1 if not model.deferred or n <= DISTANCE_FRAMES else int(np.ceil(n / DISTANCE_FRAMES))


class DistancePanel(PanelBase):
    """The pair-distance distribution p(r) of the current frame and its series trends.

    Every number comes from ``ds.saxs.distance_distribution`` (the regularised indirect
    Fourier transform, Glatter 1977, J. Appl. Cryst. 10, 415; weight and, when asked,
    Dmax chosen by the Bayesian evidence, Hansen 2000, J. Appl. Cryst. 33, 1415).

    Parameters
    ----------
    source : xarray.Dataset or SeriesModel
        The series, or the model shared with other panels.
    dmax, weight : float or None
        Fixed Dmax (nm) and regularisation weight; None (default) chooses them per frame.
    q_range : (float, float) or None
        q range (1/nm) of the transform; None uses every point.
    frame : int, optional
        Initial frame (default: the model's).

    Traits
    ------
    q_range : (float, float) or None
        Synced both ways with :attr:`selector` (a brush on the I(q) plot).
    dmax, weight : float or None
        None = automatic (the "auto" boxes).
    apply_to_all : bool
        False: ``result`` is ``ds.isel(frame=[i]).saxs.distance_distribution(...)``,
        recomputed for the current frame only on every change. True: ``result`` is the
        whole series with the same choices (from the model's cache) and the trends show it.
    series : xarray.Dataset or None (read only)
        The whole-series result drawn in the trends (the automatic one unless
        ``apply_to_all``).

    Examples
    --------
    >>> import saxsnb
    >>> from saxsnb.widgets import DistancePanel
    >>> panel = DistancePanel(saxsnb.demo.example_series("spheres"), dmax=6.0)
    >>> panel.result.dmax.values.tolist(), panel.result.status.values.tolist()
    ([6.0], ['ok'])
    """

    name = "distance"
    title = "Distance distribution p(r)"

    q_range = traitlets.Tuple(traitlets.Float(), traitlets.Float(), default_value=None, allow_none=True)
    dmax = traitlets.Float(None, allow_none=True)
    weight = traitlets.Float(None, allow_none=True)
    apply_to_all = traitlets.Bool(False)
    series = DatasetTrait(allow_none=True, read_only=True)

    def __init__(self, source, *, dmax=None, weight=None, q_range=None, frame: int | None = None, **kwargs):
        self._syncing = False
        self._choice = None  # (q_range, dmax, weight, apply_to_all, frame) behind ``result``
        self._ready = False
        self._weight_range_set = False
        self._series_params = None  # choices behind ``series`` (None: automatic)
        super().__init__(source, frame=None, **kwargs)
        with self.hold_trait_notifications():
            self.dmax = None if dmax is None else float(dmax)
            self.weight = None if weight is None else float(weight)
            self.q_range = None if q_range is None else tuple(float(v) for v in q_range)
        self._ready = True
        self.observe(self._on_choice, ["q_range", "dmax", "weight", "apply_to_all"])
        if frame is not None and int(frame) != self.frame:
            self.frame = int(frame)
        else:
            self._update()

    # ------------------------------------------------------------------ build
    def _build(self):
        qs, ys = bq.LogScale(), bq.LogScale()
        self._qs, self._ys = qs, ys
        sc = {"x": qs, "y": ys}
        self.data = bq.Scatter(x=self.q, y=np.ones(self.q.size), scales=sc, colors=[ROLE["data"]],
                               default_size=8, labels=["data"])
        self.fit_line = bq.Lines(x=self.q, y=np.ones(self.q.size), scales=sc, colors=[ROLE["fit"]],
                                 stroke_width=1.8, labels=["p(r) fit"])
        self.selector = bq.BrushIntervalSelector(scale=qs, marks=[self.data], color=ROLE["selected"])
        qlo, qhi = float(np.nanmin(self.q[self.q > 0])), float(np.nanmax(self.q))
        fig = make_figure([self.data, self.fit_line], qs, ys, x_label=f"q ({self.q_units})",
                          y_label=f"I ({self.intensity_units})", title=self.title, height="280px",
                          interaction=self.selector, x_range=(qlo, qhi), y_range=self.model.positive_range())
        rqs, rys = bq.LogScale(), bq.LinearScale()
        self.residuals = bq.Scatter(x=self.q, y=np.zeros(self.q.size), scales={"x": rqs, "y": rys},
                                    colors=[ROLE["data"]], default_size=6, labels=["(I - fit) / sigma"])
        self.zero_line = bq.Lines(x=np.array([qlo, qhi]), y=np.zeros(2), scales={"x": rqs, "y": rys},
                                  colors=[ROLE["reference"]], line_style="dashed", stroke_width=1.0)
        rfig = make_figure([self.zero_line, self.residuals], rqs, rys, x_label=f"q ({self.q_units})",
                           y_label="(I - fit) / sigma", title="normalised residuals", height="160px",
                           x_range=(qlo, qhi))
        self._rqs = rqs
        rs, ps = bq.LinearScale(), bq.LinearScale()
        self.band = bq.Lines(x=np.zeros(2), y=np.zeros((2, 2)), scales={"x": rs, "y": ps},
                             colors=[ROLE["error"], ROLE["error"]], fill="between",
                             fill_colors=[ROLE["error"]], fill_opacities=[0.35], stroke_width=0.5,
                             labels=["p + sigma", "p - sigma"])
        self.p_line = bq.Lines(x=np.zeros(2), y=np.zeros(2), scales={"x": rs, "y": ps}, colors=[ROLE["data"]],
                               stroke_width=2.0, labels=["p(r)"])
        self.p_zero = bq.Lines(x=np.zeros(2), y=np.zeros(2), scales={"x": rs, "y": ps},
                               colors=[ROLE["reference"]], line_style="dashed", stroke_width=1.0)
        pfig = make_figure([self.p_zero, self.band, self.p_line], rs, ps, x_label="r (nm)",
                           y_label=f"p(r) ({self.intensity_units}/nm)", title="p(r) \u00b1 \u03c3",
                           height="260px")
        self._rs, self._ps = rs, ps
        es, ss = bq.LinearScale(), bq.LinearScale()
        self.score = bq.Lines(x=np.zeros(2), y=np.zeros(2), scales={"x": es, "y": ss}, colors=[ROLE["trend"]],
                              marker="circle", marker_size=20, labels=["log evidence - chosen"])
        self.score_pick = bq.Lines(x=np.zeros(2), y=np.array([-1.0, 0.0]), scales={"x": es, "y": ss},
                                   colors=[ROLE["selected"]], stroke_width=1.5)
        efig = make_figure([self.score, self.score_pick], es, ss, x_label="Dmax candidate (nm)",
                           y_label="log evidence (rel.)", height="200px",
                           title="evidence of each Dmax (automatic Dmax; top 60 units)")
        self._es, self._ss = es, ss
        # trends over the series
        tx, ty = bq.LinearScale(), bq.LinearScale()
        tsc = {"x": tx, "y": ty}
        self.trend_rg = bq.clickable_points(tsc, ROLE["trend"], "Rg from p(r)")
        self.trend_guinier = bq.clickable_points(tsc, OKABE_ITO["blue"], "Guinier Rg", marker="square",
                                                 size=12)
        self.trend_current = bq.Lines(x=np.zeros(2), y=np.array([0.0, 1.0]), scales=tsc,
                                      colors=[ROLE["current"]], stroke_width=1.5)
        # +-sigma bars of the trend points (the transform's standard errors)
        self.rg_bars = self._bars(tsc, ROLE["trend"])
        tfig = make_figure([self.rg_bars, self.trend_rg, self.trend_guinier, self.trend_current], tx, ty,
                           x_label=self.scan_label, y_label="Rg (nm)",
                           title="Rg from p(r) and from Guinier (click a point)",
                           height="220px", x_limits=self.scan_limits)
        dx, dy = bq.LinearScale(), bq.LinearScale()
        self.trend_dmax = bq.clickable_points({"x": dx, "y": dy}, ROLE["trend"], "Dmax")
        self.dmax_current = bq.Lines(x=np.zeros(2), y=np.array([0.0, 1.0]), scales={"x": dx, "y": dy},
                                     colors=[ROLE["current"]], stroke_width=1.5)
        self.dmax_bars = self._bars({"x": dx, "y": dy}, ROLE["trend"])
        dfig = make_figure([self.dmax_bars, self.trend_dmax, self.dmax_current], dx, dy,
                           x_label=self.scan_label,
                           y_label="Dmax (nm)", title="Dmax over the series", height="200px",
                           x_limits=self.scan_limits)
        ix, iy = bq.LinearScale(), bq.LinearScale()
        self.trend_i0 = bq.clickable_points({"x": ix, "y": iy}, OKABE_ITO["reddish_purple"], "I0 from p(r)")
        self.i0_current = bq.Lines(x=np.zeros(2), y=np.array([0.0, 1.0]), scales={"x": ix, "y": iy},
                                   colors=[ROLE["current"]], stroke_width=1.5)
        self.i0_bars = self._bars({"x": ix, "y": iy}, OKABE_ITO["reddish_purple"])
        ifig = make_figure([self.i0_bars, self.trend_i0, self.i0_current], ix, iy, x_label=self.scan_label,
                           y_label=f"I0 ({self.intensity_units})", title="I0 from p(r) over the series",
                           height="200px", x_limits=self.scan_limits)
        for m in (self.trend_rg, self.trend_guinier, self.trend_dmax, self.trend_i0):
            m.on_element_click(self._on_point_click)
        self.figures = [fig, rfig, pfig, efig, tfig, dfig, ifig]
        # controls
        self.dmax_text = widgets.BoundedFloatText(value=10.0, min=0.0, max=1e6, step=0.5,
                                                  description="Dmax (nm)")
        self.dmax_text.layout = widgets.Layout(width="190px")
        self.dmax_auto = widgets.Checkbox(value=True, description="auto Dmax", indent=False,
                                          layout=widgets.Layout(width="auto"))
        self.weight_slider = widgets.FloatLogSlider(value=1.0, base=10, min=-6, max=6, step=0.1,
                                                    description="weight", readout_format=".3g")
        self.weight_auto = widgets.Checkbox(value=True, description="auto weight", indent=False,
                                            layout=widgets.Layout(width="auto"))
        self.range_button = widgets.Button(description="All q", icon="arrows-h",
                                           layout=widgets.Layout(width="auto"),
                                           tooltip="Use every q point (clear the brush)")
        self.range_button.on_click(lambda _b: setattr(self, "q_range", None))
        self.apply_button = widgets.ToggleButton(value=False, description="Apply to all frames", icon="list",
                                                 layout=widgets.Layout(width="auto"),
                                                 tooltip="Transform every frame with these choices")
        widgets.link((self.apply_button, "value"), (self, "apply_to_all"))
        self.dmax_text.observe(self._on_controls, "value")
        self.dmax_auto.observe(self._on_controls, "value")
        self.weight_slider.observe(self._on_controls, "value")
        self.weight_auto.observe(self._on_controls, "value")
        self.selector.observe(self._on_brushing, "brushing")
        self.selector.observe(self._on_selected, "selected")
        self.result_text = widgets.HTML("")
        self.trend_note = widgets.HTML("")
        #: The key of the trend plots (under them: a legend box inside would hide points).
        self.trend_key = widgets.HTML(key_html([
            (ROLE["trend"], "&#9679;", "Rg, Dmax from p(r) (\u00b1\u03c3)"),
            (OKABE_ITO["blue"], "&#9632;", "Guinier Rg"),
            (OKABE_ITO["reddish_purple"], "&#9679;", "I0 from p(r) (\u00b1\u03c3)"),
            (ROLE["current"], "&#9474;", "current frame"),
        ]))
        #: Frame step of the automatic series trends (1: every frame; see DISTANCE_FRAMES).
        self.every = distance_every(self.model)
        self._guinier_rg = self._guinier()
        self._series_for(None)
        controls = [control_row([self.dmax_text, self.dmax_auto, self.weight_slider, self.weight_auto]),
                    control_row([self.range_button, self.apply_button])]
        return [*controls, fig, rfig, self.result_text, pfig, efig, self.trend_note, tfig, dfig, ifig,
                self.trend_key]

    @staticmethod
    def _bars(scales, colour):
        return bq.Lines(x=np.zeros(2), y=np.zeros(2), scales=scales, colors=[colour], stroke_width=1.0,
                        visible=False)

    def _guinier(self) -> np.ndarray:
        if self.model.deferred and self.model.peek("guinier") is None:  # drawn when it arrives
            self.model.when_ready("guinier", self._guinier_arrived)
            return np.full(self.n_frames, np.nan)
        try:
            return np.asarray(self.model.result("guinier")["rg"].values, dtype=float)
        except Exception as exc:  # shown in the status line
            self.report(exc, "automatic Guinier fit")
            return np.full(self.n_frames, np.nan)

    # ------------------------------------------------------------- choices
    def _params(self) -> dict:
        qr = None if self.q_range is None else (float(self.q_range[0]), float(self.q_range[1]))
        return {"dmax": self.dmax, "weight": self.weight, "q_range": qr}

    def series_result(self, **params):
        """The whole-series ``ds.saxs.distance_distribution(**params)`` from the model's cache."""
        return self.model.result("distance_distribution", **params)

    def _guinier_arrived(self, res, exc) -> None:
        if exc is None:
            self._guinier_rg = np.asarray(res["rg"].values, dtype=float)
            self._draw_points(self.trend_guinier, self._guinier_rg)

    def _series_for(self, params) -> None:
        """Draw the trends of the series result with ``params`` (None: automatic, on one
        frame in ``every``; computed in the background on a deferred model)."""
        every = self.every if params is None else 1
        extra = {} if every == 1 else {"every": every}
        pending = self.model.deferred and self.model.peek("distance_distribution", **extra) is None
        if params is None and pending:
            which = "every frame" if every == 1 else f"one frame in {every}"
            self.trend_note.value = (f"<small>&#8987; p(r) of {which} (automatic Dmax and weight) "
                                     "being computed in the background</small>")
            self._series_params = None
            self.model.when_ready("distance_distribution", self._auto_arrived, **extra)
            return
        try:
            res = self.series_result(**extra, **(params or {}))
        except Exception as exc:  # shown in the status line
            self.report(exc, "p(r) of the series")
            return
        self._draw_series(res, params, every)

    def _auto_arrived(self, res, exc) -> None:
        if exc is not None:
            self.report(exc, "p(r) of the series")
        elif self._series_params is None:  # still showing the automatic trends
            self._draw_series(res, None, self.every)

    def _draw_series(self, res, params, every: int = 1) -> None:
        self.set_trait("series", res)
        self._series_params = params
        trends = ((self.trend_rg, self.rg_bars, "rg"), (self.trend_dmax, self.dmax_bars, "dmax"),
                  (self.trend_i0, self.i0_bars, "i0"))
        scan = self.scan_values[::every]
        for mark, bars, var in trends:
            self._draw_points(mark, res[var].values, every)
            sig = f"{var}_sigma"
            x, y, kept = finite_points(scan, res[var].values)
            s_ = np.asarray(res[sig].values, dtype=float)[kept] if sig in res else np.zeros(0)
            if x.size and np.isfinite(s_).any():
                self._set_line(bars, *errorbar_segments(x, y, s_))
            elif bars.visible:
                bars.visible = False
        self._draw_points(self.trend_guinier, self._guinier_rg)
        bad = [f"{k}: {v}" for k, v in zip(*np.unique(res["status"].values, return_counts=True)) if k != "ok"]
        what = "with the panel's choices" if params else "automatic Dmax and weight"
        if every > 1:
            what += f", one frame in {every}: {res.sizes['frame']} of {self.n_frames}"
        self.trend_note.value = (f"<small>series ({what}): frames not 'ok': "
                                 f"{', '.join(bad) if bad else 'none'}</small>")

    def _draw_points(self, mark, values, every: int = 1) -> None:
        """Per-frame values of one frame in ``every`` against the scan (``values`` holds
        those frames only when ``every`` > 1)."""
        x, y, frames = finite_points(self.scan_values[::every], values)
        shown = self._set_points(mark, x, y)
        self._point_frames[id(mark)] = frames * every if shown else np.zeros(0, dtype=int)

    @traitlets.validate("q_range")
    def _check_range(self, proposal):
        return checked_range(proposal["value"])

    def _commit_selector(self) -> None:
        if self._syncing:
            return
        sel = self.selector.selected
        if sel is None or np.size(sel) < 2:
            return
        q0, q1 = np.sort(np.asarray(sel, dtype=float).ravel()[:2])
        new = (float(q0), float(q1))
        if new != self.q_range:
            self.q_range = new

    def _move_selector(self) -> None:
        target = None if self.q_range is None else np.asarray(self.q_range, dtype=float)
        cur = self.selector.selected
        if target is None and cur is None:
            return
        if target is not None and cur is not None and np.size(cur) == 2 and np.allclose(cur, target):
            return
        self._syncing = True
        try:
            self.selector.selected = target
        finally:
            self._syncing = False

    def _on_controls(self, change) -> None:
        if self._syncing:
            return
        self.dmax = None if self.dmax_auto.value else float(self.dmax_text.value)
        self.weight = None if self.weight_auto.value else float(self.weight_slider.value)

    def _sync_controls(self, one) -> None:
        """Controls show the traits; in automatic mode the value chosen for this frame."""
        self._syncing = True
        try:
            chosen_d = float(one["dmax"].values[0]) if one is not None else np.nan
            chosen_w = float(one["weight"].values[0]) if one is not None else np.nan
            d = self.dmax if self.dmax is not None else chosen_d
            w = self.weight if self.weight is not None else chosen_w
            self.dmax_auto.value = self.dmax is None
            self.weight_auto.value = self.weight is None
            if np.isfinite(d) and d >= 0:
                self.dmax_text.value = min(float(d), self.dmax_text.max)
            if np.isfinite(w) and w > 0:
                lw = float(np.log10(w))
                # the weight's scale follows the intensity units: the slider spans +-6 decades
                # around the first weight it shows, and widens when one falls outside
                sl = self.weight_slider
                if not sl.min <= lw <= sl.max or not self._weight_range_set:
                    lo, hi = (min(sl.min, np.floor(lw) - 6), max(sl.max, np.ceil(lw) + 6)) \
                        if self._weight_range_set else (np.floor(lw) - 6, np.ceil(lw) + 6)
                    if lo > sl.max:
                        sl.max, sl.min = float(hi), float(lo)
                    else:
                        sl.min, sl.max = float(lo), float(hi)
                    self._weight_range_set = True
                sl.value = 10.0 ** lw
            self.dmax_text.disabled = self.dmax is None
            self.weight_slider.disabled = self.weight is None
        finally:
            self._syncing = False

    def _on_choice(self, change) -> None:
        if self._ready:
            self._update(series_changed=True)

    # ----------------------------------------------------------------- update
    def _update(self, series_changed: bool = False) -> None:
        if not getattr(self, "_ready", False):
            return
        i = self.frame
        params = self._params()
        self._move_selector()
        try:
            if self.apply_to_all:
                res = self.series_result(**params)
                if series_changed or self.result is not res:
                    self._series_for(params)
                one = res.isel(frame=[i])
            else:
                if self._series_params is not None:
                    self._series_for(None)
                res = self.ds.isel(frame=[i]).saxs.distance_distribution(**params)
                one = res
        except Exception as exc:  # a bad Dmax or range: a status, never an exception
            self.report(exc, f"{self.frame_label(i)}: p(r)")
            self._sync_controls(None)
            return
        self._choice = (params, self.apply_to_all, i)
        self._set_result(res)
        self._draw(i, one)
        self._sync_controls(one)
        st = str(one["status"].values[0])
        self.status = "" if st == "ok" else f"{self.frame_label(i)}: {st}"

    def _draw(self, i: int, one) -> None:
        I, S = self.model.rows(i)
        fit = np.asarray(one["fit"].values[0], dtype=float)
        x, y, _ = finite_points(self.q, I, positive=True)
        self._set_points(self.data, x, y)
        used = np.isfinite(fit)
        fx, fy, _ = finite_points(self.q[used], fit[used], positive=True)
        self._set_line(self.fit_line, fx, fy, positive=True)
        with np.errstate(invalid="ignore", divide="ignore"):
            res = (I - fit) / S
        if self.q_range is not None:  # residuals of the fitted points only
            res = np.where((self.q >= self.q_range[0]) & (self.q <= self.q_range[1]), res, np.nan)
        rx, ry, _ = finite_points(self.q, res)
        self._set_points(self.residuals, rx, ry)
        if ry.size:
            with self.residuals.scales["y"].hold_sync():
                lo, hi = value_range(ry, lower=0, upper=100, pad=0.1, include=(0.0,))
                self.residuals.scales["y"].min, self.residuals.scales["y"].max = lo, hi
        r = np.asarray(one["r"].values[0], dtype=float)
        p = np.asarray(one["p"].values[0], dtype=float)
        ps = np.asarray(one["p_sigma"].values[0], dtype=float)
        ok = np.isfinite(r) & np.isfinite(p)
        if ok.sum() >= 2:
            s = np.where(np.isfinite(ps[ok]), ps[ok], 0.0)
            with self.p_line.hold_sync():
                self.p_line.x, self.p_line.y = r[ok], p[ok]
                self.p_line.visible = True
            with self.band.hold_sync():
                self.band.x = r[ok]
                self.band.y = np.vstack([p[ok] + s, p[ok] - s])
                self.band.visible = True
            with self.p_zero.hold_sync():
                self.p_zero.x = np.array([0.0, float(r[ok].max())])
            lo, hi = value_range(np.concatenate([p[ok] + s, p[ok] - s]), lower=0, upper=100, pad=0.05,
                                 include=(0.0,))
            with self._ps.hold_sync():
                self._ps.min, self._ps.max = lo, hi
            with self._rs.hold_sync():
                self._rs.min, self._rs.max = 0.0, float(r[ok].max()) * 1.02
        else:
            self.p_line.visible = False
            self.band.visible = False
        cand = np.asarray(one["dmax_candidates"].values[0], dtype=float)
        score = np.asarray(one["dmax_score"].values[0], dtype=float)
        cx, cy, _ = finite_points(cand, score)
        shown = cx.size >= 2 and self.dmax is None
        if shown:
            self._set_line(self.score, cx, cy)
            d = float(one["dmax"].values[0])
            # the near candidates matter: far ones sit thousands of log units below
            top = float(cy.max())
            lo = max(float(cy.min()), top - EVIDENCE_SPAN)
            with self._ss.hold_sync():
                self._ss.min, self._ss.max = lo - 0.05 * (top - lo + 1.0), top + 0.05 * (top - lo + 1.0)
            with self.score_pick.hold_sync():
                self.score_pick.x = np.array([d, d])
                self.score_pick.y = np.array([lo, top])
                self.score_pick.visible = bool(np.isfinite(d))
        else:
            self.score.visible = False
            self.score_pick.visible = False
        v = float(self.scan_values[i])
        for line, mark in ((self.trend_current, self.trend_rg), (self.dmax_current, self.trend_dmax),
                           (self.i0_current, self.trend_i0)):
            yv = np.asarray(mark.y, dtype=float) if mark.visible and mark.y is not None else np.zeros(0)
            yv = yv[np.isfinite(yv)]
            lo, hi = (float(yv.min()), float(yv.max())) if yv.size else (0.0, 1.0)
            with line.hold_sync():
                line.x = np.array([v, v])
                line.y = np.array([lo, hi])
        self.figure.title = f"{self.title}: {self.frame_label(i)}"
        self.result_text.value = self._result_html(i, one)

    def _result_html(self, i: int, one) -> str:
        g = lambda k: one[k].values[0]  # noqa: E731
        grg = self._guinier_rg[i] if i < self._guinier_rg.size else np.nan
        chan = float(g("shannon_channels"))
        note = ""
        if np.isfinite(chan) and chan < 5:
            note = (" <i>(few Shannon channels: Dmax and the shape of p(r) are poorly determined; "
                    "Rg and I0 are the robust numbers)</i>")
        fmt = format_value
        fixed_d = "" if self.dmax is None else " (fixed)"
        fixed_w = "" if self.weight is None else " (fixed)"
        return (
            f"Rg = {fmt(g('rg'), g('rg_sigma'), 'nm')} (Guinier {fmt(grg, unit='nm')}); "
            f"I0 = {fmt(g('i0'), g('i0_sigma'))}; Dmax = {fmt(g('dmax'), g('dmax_sigma'), 'nm')}{fixed_d}; "
            f"weight {fmt(g('weight'))}{fixed_w}; chi2_red {fmt(g('chi2_reduced'))}; "
            f"Shannon channels {fmt(chan)}; status <b>{html.escape(str(g('status')))}</b>{note}"
        ).replace(" ± ", " &plusmn; ")

    def _code_lines(self, target: str) -> list[str]:
        if self._choice is None:
            params, every, frame = self._params(), self.apply_to_all, self.frame
        else:
            params, every, frame = self._choice
        qr = params["q_range"]
        args = (f"{params['dmax']!r}, weight={params['weight']!r}, "
                f"q_range={'None' if qr is None else f'({qr[0]!r}, {qr[1]!r})'}")
        if every:
            return [f"{target} = ds.saxs.distance_distribution({args})  # every frame"]
        return [f"{target} = ds.isel(frame=[{frame}]).saxs.distance_distribution({args})"
                f"  # {self.code_comment(frame)}"]
