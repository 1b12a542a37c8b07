"""Curve panel: the current frame on log-log axes with error bars and overlays."""

from __future__ import annotations

import ipywidgets as widgets
import numpy as np
import traitlets

from ..display import drawable_lines, errorbar_segments, pretty_label
from ..errors import SaxsInputError
from ..series import validate
from . import _bq as bq
from .base import PanelBase, control_row, key_html, make_figure
from .palette import ROLE, SEQUENCE

__all__ = ["CurvePanel"]

#: Most overlay curves drawn at once (every n-th frame of a long series is thinned).
MAX_OVERLAYS = 40


class CurvePanel(PanelBase):
    """The current frame, I(q) +- sigma on log-log axes.

    Parameters
    ----------
    source : xarray.Dataset or SeriesModel
        The series, or the model shared with other panels.
    background : xarray.Dataset, optional
        A background series on the same q grid (one frame, or one per frame); the
        matching frame is drawn dashed in grey when ``show_background`` is on.
    frame : int, optional
        Initial frame (default: the model's).
    overlay : list of int
        Frames drawn in addition to the current one (``overlay`` trait).
    every : int
        Also draw every n-th frame (0 = off; ``every`` trait). At most
        ``MAX_OVERLAYS`` overlays are drawn; more are thinned evenly and the panel says so.

    Attributes
    ----------
    curve : bqplot.Lines
        The current frame (x = q, y = I).
    errorbars : bqplot.Lines
        +-sigma bars as one line with gaps (``display.errorbar_segments``).
    overlays, background_line : bqplot.Lines

    ``result`` is ``ds.isel(frame=[current, *overlay frames])``. The y range is fixed
    for the whole series so curves can be compared while stepping.
    """

    name = "curve"
    title = "Curve"

    overlay = traitlets.List(traitlets.Int())
    every = traitlets.Int(0)
    show_background = traitlets.Bool(True)

    def __init__(self, source, background=None, *, frame: int | None = None, overlay=(), every: int = 0,
                 **kwargs):
        self._given_background = background
        self.background = None
        self._background_note = ""
        self._init_overlay = [int(v) for v in overlay]
        self._init_every = int(every)
        super().__init__(source, frame=frame, **kwargs)
        self.observe(self._on_overlay, ["overlay", "every", "show_background"])
        if self._init_overlay or self._init_every:
            self._check_overlay({"value": self._init_overlay})  # raises before anything is drawn
            with self.hold_trait_notifications():
                self.overlay = self._init_overlay
                self.every = self._init_every

    def _background_dataset(self):
        return self._given_background

    def _check_background(self) -> None:
        bg = self._given_background
        if bg is None:
            return
        bg = validate(bg)
        q, n = self.q, self.n_frames
        if bg["q"].values.shape != q.shape or not np.allclose(bg["q"].values, q, rtol=1e-9):
            self._background_note = "the background has another q grid: not drawn (regrid it first)"
        elif bg.sizes["frame"] not in (1, n):
            self._background_note = (
                f"the background has {bg.sizes['frame']} frames (need 1 or {n}): not drawn"
            )
        else:
            self.background = bg

    def _build(self):
        self._check_background()
        lo, hi = self.model.positive_range()
        self._floor = lo
        xs = bq.LogScale() if np.all(self.q > 0) else bq.LinearScale()
        ys = bq.LogScale(min=lo, max=hi)
        self._xs, self._ys = xs, ys
        # every Lines mark ends on a drawable point at all times (the browser places
        # the line's label there): placeholders are finite, updates go through _set_line
        self.errorbars = bq.Lines(
            x=self.q,
            y=np.full(self.q.size, hi),
            scales={"x": xs, "y": ys},
            colors=[ROLE["error"]],
            stroke_width=1.0,
            labels=["+-sigma"],
        )
        self.curve = bq.Lines(
            x=self.q,
            y=np.full(self.q.size, hi),
            scales={"x": xs, "y": ys},
            colors=[ROLE["data"]],
            stroke_width=1.5,
            labels=["current frame"],
        )
        self.overlays = bq.Lines(
            x=self.q,
            y=np.full((1, self.q.size), hi),
            scales={"x": xs, "y": ys},
            colors=SEQUENCE[1:],
            stroke_width=1.0,
            opacities=[0.7],
            visible=False,
        )
        self.background_line = bq.Lines(
            x=self.q,
            y=np.full(self.q.size, hi),
            scales={"x": xs, "y": ys},
            colors=[ROLE["background"]],
            line_style="dashed",
            stroke_width=1.0,
            labels=["background"],
            visible=False,
        )
        fig = make_figure(
            [self.overlays, self.background_line, self.errorbars, self.curve],
            xs,
            ys,
            x_label=f"q ({self.q_units})",
            y_label=f"I ({self.intensity_units})",
            title="current frame",
            height="320px",
            x_range=(float(self.q[self.q > 0].min()), float(self.q.max())) if np.any(self.q > 0) else None,
            y_range=(lo, hi),
        )
        self.figures = [fig]
        self.overlay_text = widgets.Text(
            value="",
            placeholder="e.g. 0, 10, 20",
            description="overlay frames",
            continuous_update=False,
            style={"description_width": "initial"},
            layout=widgets.Layout(width="18em", min_width="12em"),
        )
        self.every_box = widgets.BoundedIntText(
            value=0,
            min=0,
            max=max(self.n_frames, 1),
            description="every n-th (0 off)",
            style={"description_width": "initial"},
            layout=widgets.Layout(width="13em", min_width="13em"),
        )
        self.background_box = widgets.Checkbox(
            value=True,
            description="background",
            disabled=self.background is None,
            indent=False,
            layout=widgets.Layout(width="auto", min_width="8em"),
        )
        self.overlay_text.observe(self._parse_overlay, "value")
        widgets.link((self.every_box, "value"), (self, "every"))
        widgets.link((self.background_box, "value"), (self, "show_background"))
        self.overlay_note = widgets.HTML("")
        #: The key of the plot, under it (a legend inside would cover the curves).
        self.key = widgets.HTML("")
        # the row wraps in narrow panels instead of cutting labels off
        controls = control_row([self.overlay_text, self.every_box, self.background_box])
        self._draw_background()
        return [fig, self.key, controls, self.overlay_note]

    # ------------------------------------------------------------- overlays
    def _parse_overlay(self, change) -> None:
        text = change["new"].replace(";", ",").replace(" ", ",")
        try:
            frames = [int(t) for t in text.split(",") if t.strip()]
        except ValueError as exc:
            self.report(exc, "overlay frames must be integers separated by commas")
            return
        try:
            self.overlay = frames
        except SaxsInputError as exc:  # typed in the browser: said in the status line
            self.report(exc, "overlay")
            return
        if self.status.startswith("overlay"):
            self.status = self._background_note

    @traitlets.validate("overlay")
    def _check_overlay(self, proposal):
        bad = [int(v) for v in proposal["value"] if not 0 <= int(v) < self.n_frames]
        if bad:
            raise SaxsInputError(
                f"overlay frame(s) {bad} outside the series (frames 0..{self.n_frames - 1})",
                parameter="overlay", frame=bad[0],
            )
        return [int(v) for v in proposal["value"]]

    @traitlets.validate("every")
    def _check_every(self, proposal):
        if int(proposal["value"]) < 0:
            raise traitlets.TraitError("every must be 0 (off) or positive")
        return int(proposal["value"])

    def overlay_frames(self) -> list[int]:
        """Overlay frames in drawing order (no duplicates; independent of ``frame``)."""
        frames = list(self.overlay)
        if self.every:
            frames += list(range(0, self.n_frames, self.every))
        seen: set[int] = set()
        out = []
        for f in frames:
            if f not in seen:
                seen.add(f)
                out.append(f)
        if len(out) > MAX_OVERLAYS:
            pick = np.linspace(0, len(out) - 1, MAX_OVERLAYS).round().astype(int)
            out = [out[k] for k in pick]
        return out

    def shown_frames(self) -> list[int]:
        """The current frame followed by the overlay frames (without repeating it)."""
        return [self.frame, *(f for f in self.overlay_frames() if f != self.frame)]

    def _on_overlay(self, change=None) -> None:
        self._draw_overlays()
        self._set_result(self.model.part(self.shown_frames()))

    def _draw_overlays(self) -> None:
        frames = self.overlay_frames()
        lines = drawable_lines(self.q, self.model.rows(frames)[0], positive=True) if frames else None
        with self.overlays.hold_sync():
            if lines is not None:
                self.overlays.x, self.overlays.y = lines
                self.overlays.labels = [self.frame_label(f) for f in frames]
                self.overlays.visible = True
            else:
                self.overlays.visible = False
        asked = len(self.overlay) + (len(range(0, self.n_frames, self.every)) if self.every else 0)
        self.overlay_note.value = (
            f"<small>{len(frames)} overlay curve(s) shown of {asked} asked (at most {MAX_OVERLAYS})</small>"
            if asked > MAX_OVERLAYS
            else ""
        )
        self._draw_background()
        self._draw_key()

    def _draw_key(self) -> None:
        entries = [(ROLE["data"], "&#9473;", pretty_label(self.frame_label())),
                   (ROLE["error"], "&#9474;", "\u00b1\u03c3")]
        if self.background_line.visible:
            entries.append((ROLE["background"], "- -", "background"))
        if self.overlays.visible:
            colours = list(self.overlays.colors)
            frames = self.overlay_frames()
            shown = frames[:8]
            entries += [(colours[k % len(colours)], "&#9473;", pretty_label(self.frame_label(f)))
                        for k, f in enumerate(shown)]
            if len(frames) > len(shown):
                entries.append((ROLE["reference"], "", f"and {len(frames) - len(shown)} more overlays"))
        value = key_html(entries)
        if self.key.value != value:
            self.key.value = value

    def _draw_background(self) -> None:
        bg = self.background
        if bg is None or not self.show_background:
            self.background_line.visible = False
            return
        k = self.frame if bg.sizes["frame"] == self.n_frames else 0
        self._set_line(self.background_line, self.q, bg["intensity"].values[k], positive=True)

    # ----------------------------------------------------------------- frame
    def _update(self) -> None:
        i = self.frame
        I, S = self.model.rows(i)
        ex, ey = errorbar_segments(self.q, I, S, floor=self._floor)
        self._set_line(self.curve, self.q, I, positive=True)
        self._set_line(self.errorbars, ex, ey, positive=True)
        self.figure.title = pretty_label(self.frame_label(i))
        if self.background is not None and self.show_background and self.background.sizes["frame"] > 1:
            self._draw_background()
        self._draw_key()
        self._set_result(self.model.part(self.shown_frames()))
        self.status = self._background_note

    def _code_lines(self, target: str) -> list[str]:
        frames = self.shown_frames()
        return [f"{target} = ds.isel(frame={frames})  # current frame first, then the overlays"]
