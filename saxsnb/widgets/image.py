"""A panel that shows one frame of an image series: log colour, mask, rings, beam centre.

:class:`ImagePanel` is an ``ipywidgets.VBox`` whose state lives in traits:

``frame`` (int)
    The frame shown; link it to a curve panel with
    ``traitlets.link((image_panel, "frame"), (curve_panel, "frame"))``.
``log_scale`` (bool)
    Colour by log10(counts) (default) or by counts.
``show_mask`` (bool)
    Masked pixels are left blank (no colour) when True.
``rings_q`` (list of float)
    q values (1/nm) whose cones are drawn as rings (e.g. calibrant orders); their pixel
    positions come from :meth:`DetectorGeometry.ring <saxsnb.analysis.DetectorGeometry.ring>`.
``cursor`` (dict)
    ``x``, ``y`` (pixels), ``q`` (1/nm), ``chi`` (degrees) under the pointer, set on hover
    or by :meth:`point_at` (which a test calls as the browser would).
``status`` (str)
    The last error ("" when none).

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

import ipywidgets as widgets
import numpy as np
import traitlets

from ..analysis._geometry import DetectorGeometry
from ..errors import SaxsInputError
from . import _bq as bq

__all__ = ["ImagePanel"]


class ImagePanel(widgets.VBox):
    """One frame of an image series with its mask, rings and beam centre (module doc)."""

    frame = traitlets.Int(0)
    log_scale = traitlets.Bool(True)
    show_mask = traitlets.Bool(True)
    rings_q = traitlets.List(traitlets.Float())
    cursor = traitlets.Dict()
    status = traitlets.Unicode("")

    def __init__(self, images, geometry: DetectorGeometry | None = None, mask=None, *, rings_q=(),
                 max_side: int = 256, **kwargs):
        super().__init__(**kwargs)
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
        self.heatmap = bq.HeatMap(x=self._x, y=self._y, color=self._colour(),
                                  scales={"x": self.xs, "y": self.ys, "color": self.cs})
        self.ring_lines = bq.Lines(x=[], y=[], colors=["white"], stroke_width=1,
                                   scales={"x": self.xs, "y": self.ys})
        self.centre = bq.Scatter(x=[], y=[], marker="cross", colors=["red"],
                                 scales={"x": self.xs, "y": self.ys})
        axes = [bq.Axis(scale=self.xs, label="x (px)"), bq.Axis(scale=self.ys, side="left", label="y (px)"),
                bq.ColorAxis(scale=self.cs, side="right", label="log10 counts")]
        self.figure = bq.Figure(marks=[self.heatmap, self.ring_lines, self.centre], axes=axes,
                                fig_margin={"top": 20, "bottom": 50, "left": 60, "right": 80},
                                min_aspect_ratio=1, max_aspect_ratio=1)
        self.readout = widgets.HTML("")
        self.status_line = widgets.HTML("")
        self.heatmap.on_hover(self._on_hover)
        self.children = [self.figure, self.readout, self.status_line]
        self.observe(self._redraw, names=["frame", "log_scale", "show_mask"])
        self.observe(self._draw_rings, names=["rings_q"])
        self.rings_q = [float(q) for q in rings_q]
        self._draw_rings()

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

    def _redraw(self, change=None):
        try:
            colour = self._colour()
        except Exception as exc:   # shown, kept in status; never swallowed silently
            self.status = f"{type(exc).__name__}: {exc}"
            self.status_line.value = f"<span style='color:#b00'>{self.status}</span>"
            return
        self.status = ""
        self.status_line.value = ""
        with self.heatmap.hold_sync():
            self.heatmap.color = colour
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

    def _on_hover(self, mark, event):
        data = (event or {}).get("data", {})
        if "column" in data and "row" in data:
            self.point_at(self._x[int(data["column"])], self._y[int(data["row"])])
