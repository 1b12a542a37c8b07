"""Linear-fit panel: Guinier (compact, rod, sheet) and Porod with a draggable q range."""

from __future__ import annotations

import html

import ipywidgets as widgets
import numpy as np
import traitlets

from ..analysis._linear import LINEAR_PLOTS, linearize
from ..display import (
    errorbar_segments,
    finite_points,
    format_value,
    line_coefficients,
    line_residuals,
    linear_x,
    pretty_label,
    pretty_unit,
    q_from_linear_x,
    value_range,
)
from ..display.report import frame_lines
from ..errors import SaxsInputError
from . import _bq as bq
from .base import PanelBase, checked_range, control_row, key_html, make_figure, set_ticks
from .kratky import BLOCK
from .palette import OKABE_ITO, ROLE

__all__ = ["LinearFitPanel"]


def _number(v: float, unit: str = "") -> str:
    return format_value(v, unit=unit)


class LinearFitPanel(PanelBase):
    """Fit a straight line in a linearised plot over a q range chosen by dragging.

    Parameters
    ----------
    source : xarray.Dataset or SeriesModel
        The series, or the model shared with other panels (whose cached fits are used).
    kind : {"guinier", "rod", "sheet", "porod"}
        ``"guinier"``: ln I against q^2 (compact particle, ``ds.saxs.guinier(shape=
        "compact")``); ``"rod"``: ln(q I) against q^2 (cross-section); ``"sheet"``:
        ln(q^2 I) against q^2 (thickness); ``"porod"``: q^4 I against q^4, where
        I = Kp / q^4 + B is the straight line q^4 I = Kp + B q^4 (``ds.saxs.porod``,
        background fitted).
    frame : int, optional
        Initial frame (default: the model's).
    q_range : (float, float) or None
        Initial range in 1/nm; None chooses it automatically per frame.

    Traits
    ------
    q_range : (float, float) or None
        The fit range in q (1/nm), kept in sync with :attr:`selector` both ways: a drag
        sets it when ``selector.brushing`` turns False (or when ``selector.selected``
        is set from Python); setting it moves the selector. None = automatic range.
    apply_to_all : bool
        False: ``result`` is the fit of the current frame. True: ``result`` is the fit
        of every frame with the same range (the "Apply range to all frames" button).

    Attributes
    ----------
    selector : bqplot.interacts.BrushIntervalSelector
        On the x scale of the linearised plot, whose values are q^2 (q^4 for Porod):
        ``selector.selected = [q_lo**2, q_hi**2]``.
    data, data_points, in_range, fit_line, residuals, trend, trend_fixed, trend_current : bqplot marks
        ``data`` is a faint line through the points, ``data_points`` the points drawn
        over the (dashed) fit line so they stay visible.
    result_text : ipywidgets.HTML
        The frame's lines of ``result.saxs.report(frame=...)``
        (``display.report.frame_lines``: status, size +- sigma, I0 +- sigma, reduced
        chi2), the q range, and q_max R coloured by the validity limit.
    """

    name = "guinier"
    title = "Guinier fit"

    q_range = traitlets.Tuple(traitlets.Float(), traitlets.Float(), default_value=None, allow_none=True)
    apply_to_all = traitlets.Bool(False)

    def __init__(self, source, kind: str = "guinier", *, frame: int | None = None, q_range=None, **kwargs):
        plot = LINEAR_PLOTS.get(kind)
        if plot is None or plot.analysis is None:
            kinds = [k for k, p in LINEAR_PLOTS.items() if p.analysis]
            raise SaxsInputError(f"unknown kind {kind!r}; use one of {kinds}", parameter="kind")
        self.kind, self.plot = kind, plot
        self.method, self.shape, self.transform = plot.analysis, plot.shape, plot.name
        self.y_label = plot.y_label
        self.size_var, self.size_label = plot.size, plot.size_label
        self.name = kind
        self.title = plot.title
        self._syncing = False
        #: (q_range, apply_to_all, frame) behind the current ``result`` (None before the first).
        self._result_choice: tuple | None = None
        self._auto_series = None
        #: ((q_range, first frame), fit) of the block of frames last fitted alone (see _frame_fit)
        self._fit_block: tuple | None = None
        self._init_range = None if q_range is None else tuple(float(v) for v in q_range)
        super().__init__(source, frame=frame, **kwargs)
        self.observe(self._on_choice, ["q_range", "apply_to_all"])
        if self._init_range is not None:
            self.q_range = self._init_range

    # ---------------------------------------------------------------- analysis
    def _call_code(self, source: str, q_range) -> str:
        qr = "None" if q_range is None else f"({q_range[0]!r}, {q_range[1]!r})"
        if self.method == "porod":
            return f"{source}.saxs.porod(q_range={qr})"
        return f"{source}.saxs.guinier(q_range={qr}, shape={self.shape!r})"

    def _code_lines(self, target: str) -> list[str]:
        # the choices behind the current ``result`` (a range the analysis rejected is
        # shown in ``status`` but is not part of the result, nor of its code)
        choice = self._result_choice
        if choice is None:
            choice = (self.q_range, self.apply_to_all, self.frame)
        q_range, every, frame = choice
        if every:
            return [f"{target} = {self._call_code('ds', q_range)}  # every frame"]
        call = self._call_code(f"ds.isel(frame=[{frame}])", q_range)
        return [f"{target} = {call}  # {self.code_comment(frame)}"]

    # ------------------------------------------------------------------- build
    def _build(self):
        xs, ys = bq.LinearScale(), bq.LinearScale()
        self._xs, self._ys = xs, ys
        self.data = bq.Lines(
            x=np.zeros(1),
            y=np.zeros(1),
            scales={"x": xs, "y": ys},
            colors=[ROLE["data"]],
            stroke_width=1.0,
            opacities=[0.5],
            labels=["data"],
        )
        # the data points, drawn over the fit line (which stays the last Lines mark)
        self.data_points = bq.Scatter(
            x=np.zeros(0),
            y=np.zeros(0),
            scales={"x": xs, "y": ys},
            colors=[ROLE["data"]],
            default_size=10,
            labels=["data points"],
        )
        self.in_range = bq.Scatter(
            x=np.zeros(0),
            y=np.zeros(0),
            scales={"x": xs, "y": ys},
            colors=[ROLE["selected"]],
            default_size=16,
            labels=["fitted points"],
        )
        # +-sigma of the fitted points (sigma of the linearised y, as the fit weights them)
        self.in_range_bars = bq.Lines(
            x=np.zeros(2),
            y=np.zeros(2),
            scales={"x": xs, "y": ys},
            colors=[ROLE["selected"]],
            stroke_width=1.0,
            visible=False,
        )
        self.fit_line = bq.Lines(
            x=np.zeros(2),
            y=np.zeros(2),
            scales={"x": xs, "y": ys},
            colors=[ROLE["fit"]],
            stroke_width=1.5,
            line_style="dashed",
            opacities=[0.85],
            labels=["fit"],
        )
        self.selector = bq.BrushIntervalSelector(scale=xs, marks=[self.data], color=ROLE["selected"])
        xq = self.plot.x_label
        qu = self.q_units
        xunit = f"({pretty_unit(f'({qu})^{self.plot.x_power}')})"
        fig = make_figure(
            [self.data, self.in_range_bars, self.fit_line, self.data_points, self.in_range],
            xs,
            ys,
            x_label=f"{xq} {xunit}",
            y_label=self.y_label,
            title=self.title,
            interaction=self.selector,
            height="300px",
        )
        rxs, rys = bq.LinearScale(), bq.LinearScale()
        self._rxs, self._rys = rxs, rys
        self.residuals = bq.Scatter(
            x=np.zeros(0), y=np.zeros(0), scales={"x": rxs, "y": rys}, colors=[ROLE["data"]], default_size=12
        )
        self.zero_line = bq.Lines(
            x=np.zeros(2),
            y=np.zeros(2),
            scales={"x": rxs, "y": rys},
            colors=[ROLE["reference"]],
            stroke_width=1.0,
            line_style="dashed",
        )
        rfig = make_figure(
            [self.zero_line, self.residuals],
            rxs,
            rys,
            x_label=f"{xq} {xunit}",
            y_label="residual / sigma",
            height="190px",
        )
        # trend of the result against the scan (all frames, automatic range: computed once)
        tx, ty = bq.LinearScale(), bq.LinearScale()
        trend_scales = {"x": tx, "y": ty}
        self.trend = bq.clickable_points(trend_scales, ROLE["trend"], "automatic range")
        self.trend_fixed = bq.clickable_points(
            trend_scales, OKABE_ITO["orange"], "range applied to all", marker="square",
            unselected_style={}, visible=False,
        )
        # never empty (an axis with no data at all breaks bqplot's tick format):
        # hidden instead when the current value is undefined
        self.trend_current = bq.Scatter(
            x=np.array([float(self.scan_limits[0])]),
            y=np.zeros(1),
            scales={"x": tx, "y": ty},
            colors=[ROLE["current"]],
            default_size=80,
            marker="diamond",
        )
        # +-sigma of the trend points (the fit's standard error)
        self.trend_bars = bq.Lines(
            x=np.zeros(2), y=np.zeros(2), scales=trend_scales, colors=[ROLE["trend"]], stroke_width=1.0,
            visible=False,
        )
        for m in (self.trend, self.trend_fixed):
            m.on_element_click(self._on_point_click)
        unit = self._size_unit()
        tfig = make_figure(
            [self.trend_bars, self.trend, self.trend_fixed, self.trend_current],
            tx,
            ty,
            x_label=self.scan_label,
            y_label=f"{self.size_label} ({unit})",
            title=f"{self.size_label} over the series (click a point)",
            height="250px",
            x_limits=self.scan_limits,
        )
        self.figures = [fig, rfig, tfig]
        self.trend_key = widgets.HTML(self._key())

        self.auto_button = widgets.Button(
            description="Automatic range",
            icon="magic",
            tooltip="Choose the range automatically for each frame",
            layout=widgets.Layout(width="auto"),
        )
        self.apply_button = widgets.ToggleButton(
            value=False,
            description="Apply range to all frames",
            icon="list",
            layout=widgets.Layout(width="auto"),
            tooltip="Fit every frame with this range",
        )
        self.auto_button.on_click(lambda _b: setattr(self, "q_range", None))
        widgets.link((self.apply_button, "value"), (self, "apply_to_all"))
        self.result_text = widgets.HTML("")
        self.selector.observe(self._on_brushing, "brushing")
        self.selector.observe(self._on_selected, "selected")
        self._compute_trend()
        return [fig, rfig, self.result_text, control_row([self.auto_button, self.apply_button]), tfig,
                self.trend_key]

    def _status_context(self) -> dict:
        if self.plot.limit is not None:
            return {"size": self.size_label, "limit": self.plot.limit}
        return {}

    def _size_unit(self) -> str:
        if self.kind == "porod":
            return f"{self.intensity_units} nm^-4"
        return "nm"

    def _analysis(self, q_range) -> tuple[str, dict]:
        key = None if q_range is None else (float(q_range[0]), float(q_range[1]))
        if self.method == "porod":
            return "porod", {"q_range": key}
        return "guinier", {"q_range": key, "shape": self.shape}

    def series_result(self, q_range=None):
        """The fit of every frame with ``q_range`` (None: automatic), from the model's
        cache (``model.result``: computed once, also for a dask series).

        A frame's fit equals that frame of the series fit (batch equals loop), so a
        frame step only indexes it; a new range fits the whole series once.
        """
        analysis, params = self._analysis(q_range)
        return self.model.result(analysis, **params)

    def _series_now(self, q_range):
        """The series fit if it is ready; on a deferred model it is started in the
        background (the panel redraws when it arrives) and None is returned. A fixed
        range on an in-memory series is fitted at once (one vectorised fit)."""
        if not self.model.deferred or (q_range is not None and not self.model.lazy):
            return self.series_result(q_range)
        analysis, params = self._analysis(q_range)
        res = self.model.peek(analysis, **params)
        if res is None:
            self.model.when_ready(analysis, lambda r, e: self._series_arrived(q_range, r, e), **params)
        return res

    def _series_arrived(self, q_range, res, exc) -> None:
        if exc is None:
            self._fit_block = None  # frames are indexed from the series fit from now on
        if q_range is None:
            self._auto_arrived(res, exc)
        if q_range == self.q_range:
            self._update()

    def _frame_fit(self, i: int, q_range):
        """The fit of frame ``i`` while the series fit is computed in the background:
        ``(fit, k)``, frame ``i`` being position ``k`` of ``fit``.

        The fit is made for a block of :data:`~saxsnb.widgets.kratky.BLOCK` frames around
        ``i`` at a time (``ds.isel(frame=block).saxs.<fit>``: one accessor call per block
        while stepping, not one per step) and kept until the step leaves the block;
        each frame of it equals that frame of the series fit (batch equals loop)."""
        start = (i // BLOCK) * BLOCK
        key = (q_range, start)
        if self._fit_block is None or self._fit_block[0] != key:
            analysis, params = self._analysis(q_range)
            part = self.model.part(slice(start, min(start + BLOCK, self.n_frames)))
            self._fit_block = (key, getattr(part.saxs, analysis)(**params).compute())
        return self._fit_block[1], i - start

    def table_result(self):
        """The fit of every frame with the current range (the dashboard's table)."""
        try:
            return self.series_result(self.q_range)
        except Exception:  # the range was refused: the status line says why
            return self._auto_series

    def _compute_trend(self) -> None:
        analysis, params = self._analysis(None)
        if not self.model.when_ready(analysis, self._auto_arrived, **params):
            self.trend_key.value = self._key(pending=True)

    def _key(self, pending: bool = False) -> str:
        entries = [
            (ROLE["trend"], "&#9679;", f"automatic range (\u00b1\u03c3{self.size_label})"),
            (OKABE_ITO["orange"], "&#9632;", "range applied to all frames"),
            (ROLE["current"], "&#9670;", "current frame"),
        ]
        if pending:
            entries.append((ROLE["reference"], "&#8987;", "every frame is being fitted in the background"))
        if self._trend_note():
            entries.append((ROLE["reference"], "", self._trend_note()))
        return key_html(entries)

    def _auto_arrived(self, res, exc) -> None:
        if exc is not None:
            self.report(exc, "automatic fit of the series")
            return
        if res is self._auto_series:
            return
        self._auto_series = res
        self.trend_key.value = self._key()
        values = self._auto_series[self.size_var].values
        self._draw_points(self.trend, values)
        sig = f"{self.size_var}_sigma"
        if sig in self._auto_series:
            x, y, kept = self._trend_points(values)
            s_ = np.asarray(self._auto_series[sig].values, dtype=float)[kept]
            bx, by = errorbar_segments(x, y, s_)
            self._set_line(self.trend_bars, bx, by)
            if x.size:
                lo, hi = value_range(np.concatenate([y - s_, y + s_]), lower=0, upper=100)
                set_ticks(self.figures[2], lo, hi)

    # --------------------------------------------------------------- selector
    @traitlets.validate("q_range")
    def _check_range(self, proposal):
        return checked_range(proposal["value"])

    def _commit_selector(self) -> None:
        if self._syncing:
            return
        sel = self.selector.selected
        if sel is None or np.size(sel) < 2:
            return
        x0, x1 = np.sort(np.asarray(sel, dtype=float).ravel()[:2])
        q0, q1 = q_from_linear_x(np.array([max(x0, 0.0), max(x1, 0.0)]), self.transform)
        new = (float(q0), float(q1))
        if new != self.q_range:
            self.q_range = new

    def _move_selector(self, q_lo: float, q_hi: float) -> None:
        if not (np.isfinite(q_lo) and np.isfinite(q_hi)):
            # no range to show (the automatic search failed): clear the brush
            if self.selector.selected is not None:
                self._syncing = True
                try:
                    self.selector.selected = None
                finally:
                    self._syncing = False
            return
        target = linear_x(np.array([q_lo, q_hi]), self.transform)
        cur = self.selector.selected
        if cur is not None and np.size(cur) == 2 and np.allclose(cur, target, rtol=1e-12, atol=0):
            return
        self._syncing = True
        try:
            self.selector.selected = target
        finally:
            self._syncing = False

    def _draw_points(self, mark, values) -> bool:
        """Draw per-frame values against the scan (finite points only; a browser
        cannot place a NaN), remembering which frame each drawn point is."""
        x, y, frames = self._trend_points(values)
        shown = self._set_points(mark, x, y)
        self._point_frames[id(mark)] = frames if shown else np.zeros(0, dtype=int)
        return shown

    # ----------------------------------------------------------------- update
    def _on_choice(self, change) -> None:
        self._update()

    def _on_frame(self) -> None:
        self._update(frame_only=True)

    def _update(self, frame_only: bool = False) -> None:
        i = self.frame
        try:
            series = self._series_now(self.q_range)
            if series is None:  # the series fit is being computed: this frame's block alone
                one, k = self._frame_fit(i, self.q_range)
            else:
                one, k = series, i
        except Exception as exc:
            self.report(exc, "fit")
            return
        self._result_choice = (self.q_range, self.apply_to_all, i)
        if self.apply_to_all:
            if series is not None and (not frame_only or self.result is not series):
                self._set_result(series)
                self._draw_fixed_trend(series)
        else:
            self._set_result(one.isel(frame=slice(k, k + 1)))  # = isel(frame=[k]), twice as fast
            if not frame_only and self.trend_fixed.visible:
                self.trend_fixed.visible = False
        var = one.variables
        vals = {name: float(var[name].values[k]) for name in one.data_vars if var[name].dtype.kind in "fiu"}
        fstatus = str(var["status"].values[k]) if "status" in one.data_vars else "ok"
        self._draw(i, vals)
        self.result_text.value = self._result_html(one, k, vals)
        self.status = "" if fstatus == "ok" else f"{self.frame_label(i)}: {fstatus}"

    def _draw_fixed_trend(self, res_all) -> None:
        self._draw_points(self.trend_fixed, res_all[self.size_var].values)

    def _draw(self, i: int, vals: dict) -> None:
        q = self.q
        q_lo, q_hi = vals.get("q_min", np.nan), vals.get("q_max", np.nan)
        if self.q_range is not None:
            q_lo, q_hi = self.q_range
        # view: from 0 (extrapolation to q = 0) to twice the range for Guinier plots,
        # the measured high-q end for Porod
        if self.transform == "porod":
            lo_view = q_lo / 1.5 if np.isfinite(q_lo) else q[0]
            hi_view = q[-1]
        else:
            lo_view = 0.0
            hi_view = min(q[-1], 2.0 * q_hi) if np.isfinite(q_hi) else q[min(q.size - 1, q.size // 4)]
        view = (q >= lo_view) & (q <= hi_view)
        # this frame only
        lx, ly, lsy = linearize(self.q, *self.model.rows(i), kind=self.transform)
        x, y, _ = finite_points(lx[view], ly[view])
        self._set_line(self.data, x, y)
        self._set_points(self.data_points, x, y)
        inside = (
            (q >= q_lo) & (q <= q_hi) if np.isfinite(q_lo) and np.isfinite(q_hi) else np.zeros_like(q, bool)
        )
        xin, yin, kept = finite_points(lx[inside], ly[inside])
        syin = lsy[inside][kept]
        a, b = line_coefficients(self.kind, vals)
        x_end = linear_x(max(hi_view, q_hi if np.isfinite(q_hi) else hi_view), self.transform)
        x_start = linear_x(lo_view, self.transform) if self.transform == "porod" else 0.0
        line, _ = line_residuals(np.array([x_start, x_end]), np.zeros(2), None, a, b)
        _, res = line_residuals(xin, yin, syin, a, b)
        self._set_points(self.in_range, xin, yin)
        if xin.size and np.isfinite(syin).any():
            self._set_line(self.in_range_bars, *errorbar_segments(xin, yin, syin))
        elif self.in_range_bars.visible:
            self.in_range_bars.visible = False
        fx, fy, _ = finite_points(np.array([x_start, x_end]), line)
        self._set_line(self.fit_line, fx, fy)
        rx, ry, _ = finite_points(xin, res)
        self._set_points(self.residuals, rx, ry)
        if xin.size:
            with self.zero_line.hold_sync():
                self.zero_line.x = np.array([xin[0], xin[-1]])
        # the view is set explicitly: marks hidden for lack of data keep their old
        # points, which must not stretch the axes
        self._set_view(self._xs, (x_start, x_end), pad=0.02)
        self._set_view(self._ys, value_range(np.concatenate([y, fy]), lower=0, upper=100, pad=0.05))
        fig, rfig = self.figures[0], self.figures[1]
        set_ticks(fig, self._xs.min, self._xs.max, axis=0)
        set_ticks(fig, self._ys.min, self._ys.max, axis=1)
        if rx.size:
            self._set_view(self._rxs, (float(rx.min()), float(rx.max())), pad=0.03)
            self._set_view(self._rys, value_range(ry, lower=0, upper=100, pad=0.1, include=(0.0,)))
            set_ticks(rfig, self._rxs.min, self._rxs.max, axis=0)
        self._move_selector(q_lo, q_hi)
        cx, cy, _ = finite_points([float(self.scan_values[i])], [vals.get(self.size_var, np.nan)])
        self._set_points(self.trend_current, cx, cy)
        self.figure.title = pretty_label(f"{self.title}: {self.frame_label(i)}")

    @staticmethod
    def _set_view(scale, rng, pad: float = 0.0) -> None:
        lo, hi = float(rng[0]), float(rng[1])
        if not (np.isfinite(lo) and np.isfinite(hi)):
            return
        span = hi - lo if hi > lo else max(abs(hi), 1.0)
        lo, hi = lo - pad * span, hi + pad * span
        if scale.min != lo or scale.max != hi:
            with scale.hold_sync():
                scale.min, scale.max = lo, hi

    def _labels(self) -> dict[str, str]:
        """Result variable -> the name shown (HTML) for it in the result text."""
        out = {self.size_var: f"<b>{html.escape(self.size_label)}</b>", "chi2_reduced": "reduced chi2"}
        if self.plot.intercept_label:
            out["i0"] = html.escape(self.plot.intercept_label)
        return out

    def _result_html(self, series, i: int, vals: dict) -> str:
        """``frame_lines(series, i)`` (what ``result.saxs.report(frame=...)`` says) as
        HTML, with the q range and the coloured q_max R validity hint."""
        labels = self._labels()
        rows = []
        for line in frame_lines(series, i):
            name, sep, value = line.partition(" = ")
            if name == "qrg_max":
                continue  # shown coloured below
            text = html.escape(pretty_unit(value)).replace(" +- ", " &plusmn; ")  # units as nm⁻¹
            rows.append(f"{labels.get(name, html.escape(name))} = {text}" if sep else html.escape(line))
        rng = "automatic" if self.q_range is None else "fixed"
        v = lambda k: vals.get(k, np.nan)  # noqa: E731
        n_points = int(v("n_points")) if np.isfinite(v("n_points")) else 0
        q_unit = html.escape(pretty_unit(self.q_units))
        rows.append(
            f"q range ({rng}) = {_number(v('q_min'))} .. {_number(v('q_max'), q_unit)}, "
            f"{n_points} points"
        )
        if self.plot.limit is not None:
            qr = v("qrg_max")
            soft, hard = self.plot.soft_limit, self.plot.limit
            colour = ROLE["ok"] if np.isfinite(qr) else ROLE["reference"]
            note = ""
            if np.isfinite(qr) and qr > hard:
                colour, note = ROLE["warning"], f" past the validity limit {hard}"
            elif np.isfinite(qr) and qr > soft:
                colour, note = (
                    OKABE_ITO["orange"],
                    f" (valid for compact particles; elongated ones need <= {soft})",
                )
            rows.append(f'<span style="color:{colour}">q_max {self.size_label} = {_number(qr)}{note}</span>')
        return "<br>".join(rows)
