"""A panel that shows one frame of an image series: log colour, mask, rings, beam centre.

:class:`ImagePanel` is an ``ipywidgets.VBox`` whose state lives in traits:

``frame`` (int)
    The frame shown; link it to a curve panel with
    ``traitlets.link((image_panel, "frame"), (curve_panel, "frame"))``.
``log_scale`` (bool)
    Colour by log10(counts) (default) or by counts.
``show_mask`` (bool)
    Masked pixels are covered by a translucent grey layer when True. (The colour image
    itself holds finite values only: one NaN makes the front end's colour range NaN and
    the whole image blank. ``image_values`` keeps the NaN of masked and empty pixels.)
``rings_q`` (list of float)
    q values (1/nm) whose cones are drawn as rings (e.g. calibrant orders); their pixel
    positions come from :meth:`DetectorGeometry.ring <saxsnb.analysis.DetectorGeometry.ring>`.
``cursor`` (dict)
    ``x``, ``y`` (pixels), ``q`` (1/nm), ``chi`` (degrees) of the pixel clicked on the
    image (bqplot's image mark reports clicks, not hovering), or set by :meth:`point_at`.
``q_band`` (list of 2 floats) and ``sector`` (list of 2 floats)
    The orientation selector: the q band (1/nm) whose azimuthal profile is analysed and
    a sector (degrees of chi) whose centre is the director of Hermans' f (the sector's
    width only marks it on the image). Set from the two range sliders under the image
    or from Python; ``q_band = []`` turns the orientation trend off.
``orientation`` (xarray.Dataset or None)
    ``images.saxs.orientation(q_band, director_deg=<sector centre>)`` for the whole
    series, recomputed when the selection changes, drawn as Hermans f, the 2D order
    parameter and the azimuthal FWHM against the scan coordinate (or the frame).
``status`` (str)
    The last error ("" when none).

"Export code" shows Python that recomputes ``orientation`` without widgets; "PNG" gives
a PNG of the image and the trends (matplotlib, :meth:`to_matplotlib`) to download.

Large images are shown with every ``stride``-th pixel (at most ``max_side`` per side);
the numbers of the analysis always use every pixel. No maths here: q and chi come from
the geometry, the counts from the series.

Examples
--------
>>> import numpy as np
>>> from saxsnb.analysis import DetectorGeometry
>>> from saxsnb.io.images import image_series
>>> g = DetectorGeometry(15.5, 15.5, 100.0, 0.2, 0.2, 0.1, shape=(32, 32))
>>> panel = ImagePanel(image_series(np.ones((2, 32, 32)), geometry=g), rings_q=[1.0])
>>> panel.point_at(25.5, 15.5)["chi"]
0.0
"""

from __future__ import annotations

import html

import ipywidgets as widgets
import numpy as np
import traitlets

from ..analysis._geometry import DetectorGeometry
from ..errors import SaxsInputError
from . import _bq as bq
from .base import _recipe_lines, caller_variable, download_link, figure_png
from .mpl import figure_to_matplotlib

__all__ = ["ImagePanel"]


class ImagePanel(widgets.VBox):
    """One frame of an image series with its mask, rings and beam centre (module doc)."""

    frame = traitlets.Int(0)
    log_scale = traitlets.Bool(True)
    show_mask = traitlets.Bool(True)
    rings_q = traitlets.List(traitlets.Float())
    cursor = traitlets.Dict()
    q_band = traitlets.List(traitlets.Float())
    sector = traitlets.List(traitlets.Float(), default_value=[0.0, 180.0])
    orientation = traitlets.Any(None, read_only=True)
    status = traitlets.Unicode("")

    def __init__(self, images, geometry: DetectorGeometry | None = None, mask=None, *, rings_q=(),
                 q_band=None, sector=None, n_chi: int = 72, series_name: str | None = None,
                 max_side: int = 256, **kwargs):
        super().__init__(**kwargs)
        self.series_name = series_name or caller_variable(images) or "images"
        self.n_chi = int(n_chi)
        self._user_mask = mask is not None
        shape = tuple(images.saxs._images().shape[1:])  # the accessor's check of an image series
        self.images = images
        if geometry is None:
            try:
                geometry = images.saxs.geometry()
            except SaxsInputError:  # no geometry stored: the image without q and chi
                geometry = None
        self.geometry = geometry
        m = np.zeros(shape, bool)
        if "mask" in images.data_vars:
            m |= np.asarray(images["mask"].values, bool)
        if mask is not None:
            m |= np.asarray(mask, bool)
        self.mask = m
        self.stride = max(1, int(np.ceil(max(shape) / max_side)))
        s = self.stride
        self._x = np.arange(0, shape[1], s, dtype=float)
        self._y = np.arange(0, shape[0], s, dtype=float)
        self.xs, self.ys = bq.LinearScale(min=-0.5, max=shape[1] - 0.5), bq.LinearScale(min=shape[0] - 0.5,
                                                                                        max=-0.5)
        self.cs = bq.ColorScale(scheme="viridis")
        # the frame as a PNG (colours mapped here): bqplot's HeatMap draws nothing with a
        # reversed y scale (row 0 on top) in the browser, its Image mark does
        extent = {"x": [-0.5, shape[1] - 0.5], "y": [shape[0] - 0.5, -0.5]}
        self.frame_layer = bq.Image(image=widgets.Image(value=b"", format="png"), **extent,
                                    scales={"x": self.xs, "y": self.ys})
        self.mask_layer = bq.Image(image=widgets.Image(value=_png_rgba(self._mask_rgba()), format="png"),
                                   x=[-0.5, shape[1] - 0.5], y=[shape[0] - 0.5, -0.5],
                                   scales={"x": self.xs, "y": self.ys})
        self._set_colour(self._colour())
        self.ring_lines = bq.Lines(x=[], y=[], colors=["white"], stroke_width=1,
                                   scales={"x": self.xs, "y": self.ys})
        self.centre = bq.Scatter(x=[], y=[], marker="cross", colors=["red"],
                                 scales={"x": self.xs, "y": self.ys})
        axes = [bq.Axis(scale=self.xs, label="x (px)"), bq.Axis(scale=self.ys, side="left", label="y (px)"),
                bq.ColorAxis(scale=self.cs, side="right", label="log10 counts")]
        marks = [self.frame_layer, self.mask_layer, self.ring_lines, self.centre]
        self.figure = bq.Figure(marks=marks, axes=axes,
                                fig_margin={"top": 20, "bottom": 50, "left": 60, "right": 110},
                                min_aspect_ratio=1, max_aspect_ratio=1)
        self.selection_lines = bq.Lines(x=[], y=[], colors=["orange"], stroke_width=1.5,
                                        line_style="dashed", scales={"x": self.xs, "y": self.ys})
        self.figure.marks = [*self.figure.marks, self.selection_lines]
        self.readout = widgets.HTML("")
        self.status_line = widgets.HTML("")
        self.frame_layer.on_element_click(self._on_click)
        self.mask_layer.on_element_click(self._on_click)
        n = images.sizes["frame"]
        self.frame_slider = widgets.IntSlider(0, min=0, max=max(n - 1, 0), description="frame",
                                              continuous_update=False)
        # one way from the slider, back only when in range (an out-of-range frame is reported)
        self.frame_slider.observe(lambda c: setattr(self, "frame", int(c["new"])), "value")
        self.observe(lambda c: 0 <= c["new"] < n and setattr(self.frame_slider, "value", c["new"]), "frame")
        self.log_box = widgets.Checkbox(self.log_scale, description="log colour", indent=False)
        widgets.link((self.log_box, "value"), (self, "log_scale"))
        self.mask_box = widgets.Checkbox(self.show_mask, description="mask", indent=False)
        widgets.link((self.mask_box, "value"), (self, "show_mask"))
        # orientation selector: q band and sector (the sector's centre is the director)
        q_lo, q_hi = self._q_limits()
        self.q_slider = widgets.FloatRangeSlider(value=(q_lo, q_hi), min=q_lo, max=q_hi,
                                                 step=(q_hi - q_lo) / 500 or 0.001, readout_format=".3f",
                                                 description="q band (1/nm)", continuous_update=False,
                                                 style={"description_width": "initial"},
                                                 layout=widgets.Layout(width="420px"))
        self.sector_slider = widgets.FloatRangeSlider(value=(0.0, 180.0), min=-180.0, max=180.0, step=1.0,
                                                      description="sector chi (deg)", continuous_update=False,
                                                      style={"description_width": "initial"},
                                                      layout=widgets.Layout(width="420px"))
        self.q_slider.observe(lambda c: setattr(self, "q_band", [float(v) for v in c["new"]]), "value")
        self.sector_slider.observe(lambda c: setattr(self, "sector", [float(v) for v in c["new"]]), "value")
        scan = self._scan_name()
        self.ts = bq.LinearScale()
        self.ts_f = bq.LinearScale()
        self.ts_w = bq.LinearScale()
        tlabel = scan if scan != "frame" else "frame"
        self.f_lines = bq.Lines(x=[], y=[], colors=["#1f77b4", "#2ca02c"], labels=["Hermans f", "2D order"],
                                display_legend=True, marker="circle", marker_size=16,
                                scales={"x": self.ts, "y": self.ts_f})
        self.f_now = bq.Scatter(x=[], y=[], colors=["red"], scales={"x": self.ts, "y": self.ts_f})
        self.trend_figure = bq.Figure(marks=[self.f_lines, self.f_now],
                                      axes=[bq.Axis(scale=self.ts, label=tlabel),
                                            bq.Axis(scale=self.ts_f, side="left", label="f (1)")],
                                      title="Orientation: Hermans f and 2D order parameter",
                                      legend_location="top-left",
                                      fig_margin={"top": 40, "bottom": 50, "left": 60, "right": 20},
                                      layout=widgets.Layout(height="260px"))
        self.w_lines = bq.Lines(x=[], y=[], colors=["#9467bd"], marker="circle", marker_size=16,
                                scales={"x": self.ts, "y": self.ts_w})
        self.width_figure = bq.Figure(marks=[self.w_lines],
                                      axes=[bq.Axis(scale=self.ts, label=tlabel),
                                            bq.Axis(scale=self.ts_w, side="left",
                                                    label="FWHM (deg)")],
                                      title="Azimuthal FWHM",
                                      fig_margin={"top": 40, "bottom": 50, "left": 60, "right": 20},
                                      layout=widgets.Layout(height="260px"))
        self.figure.add_class("saxsnb-image-figure")
        self.trend_figure.add_class("saxsnb-image-trend")
        self.width_figure.add_class("saxsnb-image-width")
        self.export_button = widgets.Button(description="Export code", icon="code",
                                            layout=widgets.Layout(width="auto"))
        self.png_button = widgets.Button(description="PNG", icon="download",
                                         layout=widgets.Layout(width="auto"))
        self.png_link = widgets.HTML("")
        self.code_area = widgets.Textarea("", layout=widgets.Layout(width="100%", height="9em",
                                                                     display="none"))
        self.export_button.on_click(lambda _b: self.show_code())
        self.png_button.on_click(lambda _b: self._png_from_button())
        self.children = [
            widgets.HBox([self.frame_slider, self.log_box, self.mask_box]),
            self.figure, self.readout,
            self.q_slider, self.sector_slider, self.trend_figure, self.width_figure,
            self.status_line,
            widgets.HBox([self.export_button, self.png_button, self.png_link]),
            self.code_area,
        ]
        self.add_class("saxsnb-image-panel")
        self.observe(self._redraw, names=["frame", "log_scale", "show_mask"])
        self.observe(self._draw_rings, names=["rings_q"])
        self.observe(self._update_orientation, names=["q_band", "sector"])
        self.observe(self._mark_frame, names=["frame"])
        self.rings_q = [float(q) for q in rings_q]
        self._draw_rings()
        if sector is not None:
            self.sector = [float(v) for v in sector]
        if q_band is not None:
            self.q_band = [float(v) for v in q_band]

    # ------------------------------------------------------------ drawing
    def _colour(self) -> np.ndarray:
        n = self.images.sizes["frame"]
        if not 0 <= self.frame < n:
            raise SaxsInputError(f"frame {self.frame} outside 0..{n - 1}", parameter="frame")
        s = self.stride
        img = np.asarray(self.images["counts"].isel(frame=self.frame).values[::s, ::s], float)
        if self.log_scale:
            with np.errstate(divide="ignore", invalid="ignore"):
                img = np.where(img > 0, np.log10(np.where(img > 0, img, 1.0)), np.nan)
        if self.show_mask:
            img = np.where(self.mask[::s, ::s], np.nan, img)
        return img

    def _mask_rgba(self) -> np.ndarray:
        s = self.stride
        m = self.mask[::s, ::s]
        rgba = np.zeros(m.shape + (4,), np.uint8)
        rgba[m] = (128, 128, 128, 200)
        return rgba

    def _set_colour(self, colour: np.ndarray) -> None:
        # finite values only (module doc): NaN (masked, or no counts on a log scale) are
        # drawn at the bottom of the colour range; the mask layer covers the masked ones
        self.image_values = colour
        finite = np.isfinite(colour)
        lo, hi = (float(colour[finite].min()), float(colour[finite].max())) if finite.any() else (0.0, 1.0)
        if hi <= lo:
            hi = lo + 1.0
        with self.cs.hold_sync():
            self.cs.min, self.cs.max = lo, hi
        self.colour_values = np.where(finite, colour, lo)
        # a new image widget each time: bqplot's Image mark redraws when its ``image`` is
        # replaced, not when the old widget's value changes
        old = self.frame_layer.image
        png = _png_rgba(_viridis((self.colour_values - lo) / (hi - lo)))
        self.frame_layer.image = widgets.Image(value=png, format="png")
        old.close()
        self.mask_layer.visible = bool(self.show_mask and self.mask.any())

    def _redraw(self, change=None):
        try:
            colour = self._colour()
        except Exception as exc:   # shown, kept in status; never swallowed silently
            self.status = f"{type(exc).__name__}: {exc}"
            self.status_line.value = f"<span style='color:#b00'>{self.status}</span>"
            return
        self.status = ""
        self.status_line.value = ""
        self._set_colour(colour)
        axis = self.figure.axes[2]
        axis.label = "log10 counts" if self.log_scale else "counts"

    def _draw_rings(self, change=None):
        g = self.geometry
        if g is None:
            return
        xs, ys = [], []
        for q in self.rings_q:
            rows, cols = g.ring(q, np.linspace(-180.0, 180.0, 361))
            xs.append(cols)
            ys.append(rows)
        with self.ring_lines.hold_sync():
            self.ring_lines.x = xs if xs else []
            self.ring_lines.y = ys if ys else []
            self.ring_lines.colors = ["white"] * max(len(xs), 1)
        self.centre.x, self.centre.y = [g.beam_center_x_px], [g.beam_center_y_px]

    # ------------------------------------------------------------ orientation
    def _q_limits(self) -> tuple[float, float]:
        if self.geometry is None:
            return 0.0, 1.0
        q = self.geometry.q_map(self.mask.shape)[~self.mask]
        return (float(q.min()), float(q.max())) if q.size else (0.0, 1.0)

    def _scan_name(self) -> str:
        for name, c in self.images.coords.items():
            if c.dims == ("frame",) and name != "frame" and np.issubdtype(c.dtype, np.number):
                return str(name)
        return "frame"

    def _scan_values(self) -> np.ndarray:
        name = self._scan_name()
        if name == "frame":
            return np.arange(self.images.sizes["frame"], dtype=float)
        return np.asarray(self.images[name].values, float)

    @property
    def director_deg(self) -> float:
        """The centre of the sector (degrees), the director of Hermans' f."""
        lo, hi = self.sector
        hi = hi if hi > lo else hi + 360.0
        return float((0.5 * (lo + hi) + 180.0) % 360.0 - 180.0)

    def _orientation_mask(self):
        return self.mask if self.mask.any() else None

    def _update_orientation(self, change=None):
        if self.q_slider.value != tuple(self.q_band) and len(self.q_band) == 2:
            with self.hold_trait_notifications():
                self.q_slider.value = tuple(self.q_band)
        if len(self.sector) == 2 and self.sector_slider.value != tuple(self.sector):
            self.sector_slider.value = tuple(self.sector)
        self._draw_selection()
        if len(self.q_band) != 2:
            self.set_trait("orientation", None)
            return
        try:
            out = self.images.saxs.orientation(tuple(self.q_band), self.geometry, self._orientation_mask(),
                                               director_deg=self.director_deg, n_chi=self.n_chi)
        except Exception as exc:   # shown, kept in status; never swallowed silently
            self._report(exc)
            return
        self._report(None)
        self.set_trait("orientation", out)
        t = self._scan_values()
        with self.f_lines.hold_sync():
            self.f_lines.x = t
            self.f_lines.y = np.vstack([out.hermans.values, out.order_2d.values])
        ok = np.asarray(out.fwhm_status.values) == "ok"     # frames whose arc width was resolved
        with self.w_lines.hold_sync():
            self.w_lines.x, self.w_lines.y = t[ok], np.asarray(out.fwhm_deg.values, float)[ok]
        self._mark_frame()

    def _mark_frame(self, change=None):
        out = self.orientation
        if out is None or not 0 <= self.frame < out.sizes["frame"]:
            return
        self.f_now.x = [float(self._scan_values()[self.frame])]
        self.f_now.y = [float(out.hermans.values[self.frame])]

    def _draw_selection(self):
        g = self.geometry
        if g is None or len(self.q_band) != 2:
            self.selection_lines.x, self.selection_lines.y = [], []
            return
        lo, hi = self.sector
        hi = hi if hi > lo else hi + 360.0
        chi = np.linspace(lo, hi, 91)
        xs, ys = [], []
        for q in self.q_band:
            r, c = g.ring(q, chi)
            xs.append(c)
            ys.append(r)
        for a in (lo, hi):       # the sector's edges across the band
            pts = [g.ring(q, [a]) for q in np.linspace(*self.q_band, chi.size)]   # same length as arcs
            xs.append(np.array([p[1][0] for p in pts]))
            ys.append(np.array([p[0][0] for p in pts]))
        with self.selection_lines.hold_sync():
            self.selection_lines.x = xs
            self.selection_lines.y = ys
            self.selection_lines.colors = ["orange"] * len(xs)

    def _report(self, exc):
        self.status = "" if exc is None else f"{type(exc).__name__}: {exc}"
        self.status_line.value = (f"<span style='color:#b00'>{html.escape(self.status)}</span>"
                                  if self.status else "")

    # ------------------------------------------------------------ export
    def to_code(self, target: str = "orientation") -> str:
        """Python that recomputes ``orientation`` for the current selection, without widgets."""
        name = self.series_name
        lines = ["import saxsnb  # noqa: F401  (registers ds.saxs)"]
        rec = _recipe_lines(self.images, name)
        if rec is None:
            lines.append(f"# {name}: no recipe from the image series' history (made in memory, or read "
                         "with arrays given): define it before this code")
        else:
            lines += rec
        mask = "None"
        if self.mask.any():
            mask = "mask"
            lines.append("# mask: the panel's mask (ImagePanel.mask, True = excluded): "
                         "define it before this code")
        if len(self.q_band) != 2:
            lines.append("# no q band selected")
            return "\n".join(lines) + "\n"
        qb = ", ".join(repr(round(v, 6)) for v in self.q_band)
        lines.append(f"{target} = {name}.saxs.orientation(({qb}), mask={mask}, "
                     f"director_deg={round(self.director_deg, 6)!r}, n_chi={self.n_chi})")
        return "\n".join(lines) + "\n"

    def show_code(self) -> str:
        """Show the exported code in the panel's text area (what "Export code" does)."""
        self.code_area.value = self.to_code()
        self.code_area.layout.display = None
        return self.code_area.value

    def to_matplotlib(self, *, width: float = 6.0):
        """The image (with rings, centre, selection) and the trends as a matplotlib Figure."""
        from matplotlib.figure import Figure as MplFigure

        trends = [self.trend_figure, self.width_figure] if self.orientation is not None else []
        figs = [self.figure, *trends]
        mfig = MplFigure(figsize=(width, width + 3.0 * (len(figs) - 1)), layout="constrained")
        heights = [width / 3.0] + [1.0] * (len(figs) - 1)
        axes = mfig.subplots(len(figs), 1, squeeze=False, height_ratios=heights)[:, 0]
        for ax, fig in zip(axes, figs):
            figure_to_matplotlib(fig, ax)   # lines and points (rings, centre, trends)
            ax.set_title(fig.title or "")
        shape = self.mask.shape
        extent = (-0.5, shape[1] - 0.5, shape[0] - 0.5, -0.5)
        im = axes[0].imshow(self.image_values, extent=extent, cmap="viridis", vmin=self.cs.min,
                            vmax=self.cs.max, interpolation="nearest", zorder=0)
        mfig.colorbar(im, ax=axes[0], label=self.figure.axes[2].label)
        if self.mask_layer.visible:
            axes[0].imshow(self._mask_rgba(), extent=extent, interpolation="nearest", zorder=0.5)
        axes[0].set_xlim(self.xs.min, self.xs.max)
        axes[0].set_ylim(self.ys.min, self.ys.max)
        axes[0].set_aspect("equal")
        return mfig

    def to_png(self, path=None, *, width_px: int = 1200) -> bytes:
        """A PNG of :meth:`to_matplotlib` (no browser needed); written atomically to ``path``."""
        return figure_png(self.to_matplotlib(), int(width_px) / 6.0, path)

    def _png_from_button(self) -> None:
        try:
            data = self.to_png()
        except Exception as exc:  # shown in the status line
            self._report(exc)
            return
        name = f"saxsnb-image-frame{self.frame}.png"
        self.png_link.value = download_link(name, data, "image/png")

    # ------------------------------------------------------------ pointer
    def point_at(self, x: float, y: float) -> dict:
        """Set ``cursor`` for the pixel position (x, y) and return it."""
        out = {"x": float(x), "y": float(y)}
        if self.geometry is not None:
            q, chi = self.geometry.q_chi([float(y)], [float(x)])
            out.update(q=float(q[0]), chi=float(chi[0]))
            self.readout.value = (f"x {x:.1f}, y {y:.1f} px: q = {out['q']:.4g} 1/nm, "
                                  f"chi = {out['chi']:.1f} deg")
        self.cursor = out
        return out

    def _on_click(self, mark, event):
        """A click on the image (bqplot sends the data coordinates): its q and chi."""
        data = (event or {}).get("data", {})
        if "click_x" in data and "click_y" in data:
            self.point_at(float(data["click_x"]), float(data["click_y"]))


def _viridis(v: np.ndarray) -> np.ndarray:
    """RGBA uint8 of values in [0, 1] with matplotlib's viridis colour map."""
    from matplotlib import colormaps

    return colormaps["viridis"](np.clip(v, 0.0, 1.0), bytes=True)


def _png_rgba(rgba: np.ndarray) -> bytes:
    """A PNG file (bytes) of an (rows, columns, 4) uint8 RGBA array (Pillow's encoder,
    which matplotlib already depends on)."""
    import io

    from PIL import Image

    buf = io.BytesIO()
    Image.fromarray(np.ascontiguousarray(rgba, dtype=np.uint8), mode="RGBA").save(buf, format="PNG")
    return buf.getvalue()
