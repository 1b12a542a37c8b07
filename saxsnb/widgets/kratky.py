"""Kratky panel: plain q^2 I or dimensionless (q Rg)^2 I / I0, with reference levels."""

from __future__ import annotations

import html

import ipywidgets as widgets
import numpy as np
import traitlets
import xarray as xr

from ..display import (
    KRATKY_REFERENCES,
    errorbar_segments,
    format_value,
    pretty_label,
    scaled_q,
    scaled_sigma,
    value_range,
)
from ..display.overview import sample_frames
from . import _bq as bq
from .base import DatasetTrait, PanelBase, key_html, make_figure, set_ticks
from .palette import OKABE_ITO, ROLE

__all__ = ["KratkyPanel"]

#: Frames transformed per accessor call while stepping (see KratkyPanel._frame_transform).
BLOCK = 32


class KratkyPanel(PanelBase):
    """The Kratky plot of the current frame and the shape summary over the series.

    Parameters
    ----------
    source : xarray.Dataset or SeriesModel
        The series, or the model shared with other panels (whose automatic Guinier fit
        is used).
    normalize : None, "rg" or "auto"
        None: plain Kratky plot q^2 I against q. "rg": dimensionless (q Rg)^2 I / I0
        against q Rg, with Rg and I0 from the automatic Guinier fit
        (``ds.saxs.kratky(normalize="rg")``; Durand et al. 2010, J. Struct. Biol. 169, 45).
        "auto" (default): "rg" when the automatic Guinier fit succeeds for some frame,
        else None (e.g. a series of Bragg peaks without a Guinier region).
    frame : int, optional
        Initial frame (default: the model's).

    Traits
    ------
    normalize : None or "rg"  (also the toggle above the plot)
    summary : xarray.Dataset or None (read only)
        ``ds.saxs.kratky_summary()`` of the whole series (None when it failed).

    Attributes
    ----------
    curve : bqplot.Lines
        The current frame's Kratky curve.
    references : bqplot.Lines
        Dimensionless form only: the compact-globule (Guinier-form) peak at q Rg =
        sqrt(3), height 3/e, and the Gaussian-chain plateau 2 (Debye 1947).
    trend_peak, trend_level : bqplot.Scatter
        ``kratky_summary()`` over the series: peak height and high-q level of the
        dimensionless plot against the scan (click a point to jump to its frame).

    ``result`` is ``ds.isel(frame=[i]).saxs.kratky(normalize=...)`` as a Dataset with
    the variable ``kratky``, computed per frame (with the model's automatic Guinier
    fit of that frame): the transform of the whole series would be as large as the
    series itself.
    """

    name = "kratky"
    title = "Kratky plot"

    normalize = traitlets.Unicode(None, allow_none=True)
    summary = DatasetTrait(allow_none=True, read_only=True)

    def __init__(self, source, *, normalize: str | None = "auto", frame: int | None = None, **kwargs):
        self._init_normalize = normalize
        #: form ("plain" or "rg") whose fixed axis ranges are set (None: none yet)
        self._range_key: str | None = None
        #: ((normalize, first frame), transform) of the block of frames last drawn
        self._block: tuple | None = None
        super().__init__(source, frame=frame, **kwargs)
        self.observe(self._on_normalize, "normalize")

    @traitlets.validate("normalize")
    def _check_normalize(self, proposal):
        if proposal["value"] not in (None, "rg"):
            raise traitlets.TraitError(f"normalize must be None or 'rg', got {proposal['value']!r}")
        return proposal["value"]

    # ------------------------------------------------------------------ build
    def _build(self):
        self._built = False
        #: "auto" form waiting for the summary computed in the background
        self._auto_pending = False
        later = self.model.deferred and self.model.peek("kratky_summary") is None
        if not later:
            try:
                self.set_trait("summary", self.model.result("kratky_summary"))
            except Exception as exc:  # shown in the status line
                self.report(exc, "Kratky summary of the series")
        elif self._init_normalize == "auto":
            self._auto_pending, self._init_normalize = True, None  # plain until the summary is in
        if self._init_normalize == "auto":
            rg = None if self.summary is None else np.asarray(self.summary["rg"].values, dtype=float)
            self._init_normalize = "rg" if rg is not None and np.isfinite(rg).any() else None
        self.normalize = self._init_normalize
        xs, ys = bq.LinearScale(), bq.LinearScale()
        self._xs, self._ys = xs, ys
        self.curve = bq.Lines(
            x=self.q,
            y=np.zeros(self.q.size),
            scales={"x": xs, "y": ys},
            colors=[ROLE["data"]],
            stroke_width=1.5,
            labels=["current frame"],
        )
        # +-sigma of the current curve (sigma scaled as the intensity is)
        self.errorbars = bq.Lines(
            x=self.q,
            y=np.zeros(self.q.size),
            scales={"x": xs, "y": ys},
            colors=[ROLE["error"]],
            stroke_width=1.0,
            visible=False,
        )
        ref = KRATKY_REFERENCES
        self.references = bq.Lines(
            x=np.array([[0.0, 12.0], [ref["globule_peak_qrg"]] * 2, [0.0, 12.0]]),
            y=np.array(
                [
                    [ref["globule_peak_height"]] * 2,
                    [0.0, ref["globule_peak_height"]],
                    [ref["chain_plateau"]] * 2,
                ]
            ),
            scales={"x": xs, "y": ys},
            colors=[OKABE_ITO["orange"], OKABE_ITO["orange"], OKABE_ITO["black"]],
            line_style="dashed",
            stroke_width=1.0,
            labels=["globule peak height 3/e", "globule peak q Rg = sqrt(3)", "chain plateau 2"],
        )
        self.axis_note = widgets.HTML("")
        fig = make_figure(
            [self.references, self.errorbars, self.curve],
            xs,
            ys,
            x_label="q Rg",
            y_label="(q Rg)^2 I / I0",
            title=self.title,
            height="300px",
        )
        self._x_axis, self._y_axis = fig.axes
        tx, ty = bq.LinearScale(), bq.LinearScale()
        scan = np.asarray(self.scan_values, dtype=float)
        trend_scales = {"x": tx, "y": ty}
        self.trend_peak = bq.clickable_points(trend_scales, ROLE["trend"], "peak height")
        self.trend_level = bq.clickable_points(
            trend_scales, OKABE_ITO["blue"], "high-q level (q Rg 4.5-6)", marker="square"
        )
        self.trend_current = bq.Lines(
            x=np.zeros(2),
            y=np.array([0.0, 2.5]),
            scales={"x": tx, "y": ty},
            colors=[ROLE["current"]],
            stroke_width=1.5,
        )
        self.trend_refs = bq.Lines(
            x=np.array([[scan.min(), scan.max()]] * 2),
            y=np.array([[ref["globule_peak_height"]] * 2, [ref["chain_plateau"]] * 2]),
            scales={"x": tx, "y": ty},
            colors=[OKABE_ITO["orange"], OKABE_ITO["black"]],
            line_style="dashed",
            stroke_width=1.0,
        )
        for m in (self.trend_peak, self.trend_level):
            m.on_element_click(self._on_point_click)
        tfig = make_figure(
            [self.trend_refs, self.trend_peak, self.trend_level, self.trend_current],
            tx,
            ty,
            x_label=self.scan_label,
            y_label="dimensionless Kratky value",
            title="Kratky shape over the series (click a point)",
            height="250px",
            x_limits=self.scan_limits,
        )
        # the key sits under the plot (a legend box inside would hide points)
        key = [
            (ROLE["trend"], "&#9679;", "peak height"),
            (OKABE_ITO["blue"], "&#9632;", "high-q level (q Rg 4.5-6)"),
            (OKABE_ITO["orange"], "- -", "globule peak 3/e"),
            (OKABE_ITO["black"], "- -", "chain plateau 2"),
            (ROLE["current"], "&#9474;", "current frame"),
        ]
        if self._trend_note():
            key.append((ROLE["reference"], "", self._trend_note()))
        self.trend_key = widgets.HTML(key_html(key))
        self.figures = [fig, tfig]
        self.toggle = widgets.ToggleButtons(
            options=[("q^2 I", "plain"), ("(q Rg)^2 I / I0", "rg")],
            value="plain" if self._init_normalize is None else "rg",
            description="plot",
            style={"button_width": "auto"},
        )
        self.toggle.observe(self._on_toggle, "value")
        self.summary_text = widgets.HTML("")
        self._key_entries = key
        self._draw_summary()
        if later:
            self.trend_key.value = key_html([*key, (ROLE["reference"], "&#8987;",
                                                    "shape summary being computed in the background")])
            self.model.when_ready("kratky_summary", self._summary_arrived)
        self._built = True
        return [self.toggle, fig, self.summary_text, tfig, self.trend_key]

    def _draw_summary(self) -> None:
        if self.summary is None:
            return
        for mark, var in ((self.trend_peak, "peak_height"), (self.trend_level, "level_high")):
            x, y, frames = self._trend_points(self.summary[var].values)
            if self._set_points(mark, x, y):
                self._point_frames[id(mark)] = frames

    def _summary_arrived(self, res, exc) -> None:
        """The shape summary computed in the background: draw its trend and, for the
        "auto" form, switch to the dimensionless plot when some frame has an Rg."""
        self.trend_key.value = key_html(self._key_entries)
        if exc is not None:
            self.report(exc, "Kratky summary of the series")
            return
        self.set_trait("summary", res)
        self._draw_summary()
        if self._auto_pending:
            self._auto_pending = False
            if np.isfinite(np.asarray(res["rg"].values, dtype=float)).any():
                self.normalize = "rg"  # redraws
                return
        if self._built:
            self._update()

    def table_result(self):
        """``kratky_summary()`` of the whole series (the dashboard's table)."""
        return self.summary

    def _on_toggle(self, change) -> None:
        self.normalize = None if change["new"] == "plain" else "rg"

    def _on_normalize(self, change) -> None:
        self.toggle.value = "plain" if change["new"] is None else "rg"
        self._update()

    # ----------------------------------------------------------------- update
    def _guinier(self):
        """The model's automatic Guinier fit of every frame (None when it failed, or
        while a deferred model computes it in the background)."""
        if self.model.deferred:
            return self.model.peek("guinier")
        try:
            return self.model.result("guinier")
        except Exception as exc:  # shown in the status line
            self.report(exc, "automatic Guinier fit")
            return None

    def _rg_values(self) -> np.ndarray:
        """Rg of every frame (NaN where there is none)."""
        src = self.summary if self.summary is not None and "rg" in self.summary else self._guinier()
        if src is None:
            return np.full(self.n_frames, np.nan)
        return np.asarray(src["rg"].values, dtype=float)

    def _frame_transform(self, i: int) -> xr.DataArray:
        """``ds.isel(frame=[i]).saxs.kratky(normalize=...)``, with the cached Guinier fit.

        The transform is computed for a block of :data:`BLOCK` frames around ``i`` at a
        time (one accessor call per block while stepping, a block's rows in memory) and
        frame i taken from it: the same numbers and attrs (batch equals loop).
        """
        start = (i // BLOCK) * BLOCK
        key = (self.normalize, start)
        if self._block is None or self._block[0] != key:
            frames = slice(start, min(start + BLOCK, self.n_frames))
            part = self.model.part(frames)  # in memory (on a lazy series only these frames)
            if self.normalize != "rg":
                da = part.saxs.kratky(normalize=None)
            else:
                g = self._guinier()
                da = part.saxs.kratky(normalize="rg", guinier=None if g is None else g.isel(frame=frames))
            self._block = (key, da.compute())
        return self._block[1].isel(frame=slice(i - start, i - start + 1))  # = [i - start], faster

    def _update(self) -> None:
        i = self.frame
        try:
            one = self._frame_transform(i)
        except Exception as exc:
            self.report(exc, "Kratky transform")
            return
        self._set_result(one.to_dataset(name="kratky"))
        dimensionless = self.normalize == "rg"
        rg = np.nan
        if dimensionless:
            rg = float(self._rg_values()[i])
            x = scaled_q(self.q, np.array([rg]))[0]
        else:
            x = self.q
        y = np.asarray(one.values[0], dtype=float)
        # without Rg the dimensionless abscissa is undefined: the curve is hidden
        shown = self._set_line(self.curve, x, y)
        I, S = self.model.rows(i)
        sy = scaled_sigma(y, I, S)
        if shown and np.isfinite(sy).any():
            self._set_line(self.errorbars, *errorbar_segments(x, y, sy))
        elif self.errorbars.visible:
            self.errorbars.visible = False
        if dimensionless:
            self._set_axes("q Rg", "(q Rg)^2 I / I0", visible=True)
        else:
            self._set_axes(
                f"q ({self.q_units})", f"q^2 I ({self.intensity_units} {self.q_units}^2)", visible=False
            )
        self._set_ranges()
        with self.trend_current.hold_sync():
            v = float(self.scan_values[i])
            self.trend_current.x = np.array([v, v])
        self.figure.title = pretty_label(f"{self.title}: {self.frame_label(i)}")
        self.summary_text.value = self._summary_html(i, rg)
        self.status = (
            ""
            if not dimensionless or np.isfinite(rg)
            else (f"{self.frame_label(i)}: no Guinier Rg, the dimensionless plot is undefined")
        )

    def _set_ranges(self) -> None:
        """Fixed axis ranges per form, the same for every frame (curves compare while
        stepping; hidden reference lines do not stretch the plain plot). The transform
        of at most 256 evenly spaced frames (all of a shorter series; 16 of a lazy
        series) is computed for this once per form and not kept."""
        key = self.normalize or "plain"
        if self._range_key == key:
            return
        # from at most 256 evenly spaced frames (every frame of a shorter series; 16 of
        # a lazy one, whose chunks would each be read for it)
        sample = sample_frames(self.n_frames, 16 if self.model.lazy else 256)
        part = self.model.part(list(sample))
        g = self._guinier() if self.normalize == "rg" else None
        given = {} if g is None else {"guinier": g.isel(frame=sample)}
        da = part.saxs.kratky(normalize=self.normalize, **given)
        values = np.asarray(da.values, dtype=float)
        if key == "rg":
            rg = self._rg_values()
            top = float(self.q.max() * np.nanmax(rg)) if np.isfinite(rg).any() else 12.0
            xr_ = (0.0, min(top, 12.0))
            yr = value_range(values, include=(0.0, KRATKY_REFERENCES["chain_plateau"] * 1.1))
        else:
            xr_ = (0.0, float(self.q.max()) * 1.02)
            yr = value_range(values, upper=99.9, include=(0.0,))
        del values
        with self._xs.hold_sync():
            self._xs.min, self._xs.max = xr_
        with self._ys.hold_sync():
            self._ys.min, self._ys.max = yr
        set_ticks(self.figure, *yr)
        set_ticks(self.figure, *xr_, axis=0)
        self._range_key = key

    def _set_axes(self, xlabel: str, ylabel: str, *, visible: bool) -> None:
        xlabel, ylabel = pretty_label(xlabel), pretty_label(ylabel)
        if self._x_axis.label != xlabel:
            self._x_axis.label = xlabel
        if self._y_axis.label != ylabel:
            self._y_axis.label = ylabel
        if self.references.visible != visible:
            self.references.visible = visible

    def _summary_html(self, i: int, rg: float) -> str:
        s = self.summary
        if s is None:
            return ""
        get = lambda k: s[k].values[i] if k in s else np.nan  # noqa: E731
        cls = html.escape(str(get("shape_class")))
        f = lambda k: format_value(get(k), digits=3)  # noqa: E731
        return (
            f"shape: <b>{cls}</b>; peak at q Rg = {f('peak_qrg')}, height "
            f"{f('peak_height')} (globule 1.73, 1.10); "
            f"high-q level {f('level_high')} "
            f"(chain plateau 2)" + (f"; Rg = {format_value(rg, digits=3)} nm" if np.isfinite(rg) else "")
        )

    def _code_lines(self, target: str) -> list[str]:
        norm = "None" if self.normalize is None else repr(self.normalize)
        return [
            f"{target} = ds.isel(frame=[{self.frame}]).saxs.kratky(normalize={norm})"
            f".to_dataset(name='kratky')  # {self.code_comment()}"
        ]
