"""The panel base class: shared current frame, status line, code and figure export.

Every panel of :mod:`saxsnb.widgets` is a :class:`PanelBase`, an ``ipywidgets.VBox``
whose state lives in traits:

``frame`` (int)
    The current frame (position along the ``frame`` dimension). :func:`explore` links
    the ``frame`` of all its panels, so stepping one steps them all.
``result`` (xarray.Dataset, read only)
    The analysis Dataset for the current choices, set by the panel only.
``status`` (str)
    The last error or warning of the panel ("" when none); a frame's analysis status
    keeps its code (e.g. ``"frame 3: too_few_points"``). The panel's status line
    (``panel.status_line``, an HTML widget) shows it in plain words
    (``panel.status_text``, via ``display.describe_status``).
``code`` (str, read only)
    Python source that reproduces ``result`` without widgets (see :meth:`to_code`).

Code convention: the exported code expects the series in a variable named ``ds``
(and, where a background is used, the background series in ``background``); it
starts with ``import saxsnb`` and assigns the result to ``result`` (or to the name
given to :meth:`to_code`). So ``exec(panel.to_code(), {"ds": ds})`` re-runs the
analysis exactly.

Adding a panel (e.g. for P(r)) is one new module: subclass :class:`PanelBase`, build
the figures in ``_build()``, compute in ``_update()`` and write ``_code_lines()``.
"""

from __future__ import annotations

import html
from collections.abc import Sequence

import ipywidgets as widgets
import numpy as np
import traitlets
import xarray as xr

from ..display import describe_status, drawable_line, log_ticks
from ..series import main_scan, validate
from . import _bq as bq
from .palette import ROLE

__all__ = ["PanelBase", "DatasetTrait", "make_figure", "figure_to_matplotlib"]

#: Margins of every figure, in pixels.
FIG_MARGIN = {"top": 30, "bottom": 48, "left": 64, "right": 16}


def make_figure(
    marks: Sequence,
    x_scale,
    y_scale,
    *,
    x_label: str,
    y_label: str,
    title: str = "",
    height: str = "300px",
    interaction=None,
    x_range: tuple[float, float] | None = None,
    y_range: tuple[float, float] | None = None,
    x_limits: tuple[float, float] | None = None,
) -> bq.Figure:
    """A bqplot Figure with labelled bottom and left axes and our margins.

    ``x_range`` / ``y_range`` (data ranges of log axes) give decade ticks instead of
    bqplot's crowded default; ``x_limits`` fixes the x range (trend plots span the
    whole scan whatever is drawn). No ``num_ticks``: bqplot 0.13 then spaces ticks
    evenly over the domain and fails to format them when the domain is a single value.
    """
    if x_limits is not None and all(np.isfinite(x_limits)):
        lo, hi = float(x_limits[0]), float(x_limits[1])
        pad = 0.02 * (hi - lo) if hi > lo else 0.5
        x_scale.min, x_scale.max = lo - pad, hi + pad
    xkw: dict = {}
    ykw: dict = {"label_offset": "50px"}
    for scale, rng, kw in ((x_scale, x_range, xkw), (y_scale, y_range, ykw)):
        if isinstance(scale, bq.LogScale) and rng is not None:
            ticks = log_ticks(*rng)
            if ticks.size >= 2:
                kw["tick_values"] = ticks
                kw["tick_format"] = "~g"
    axes = [
        bq.Axis(scale=x_scale, label=x_label, grid_lines="none", **xkw),
        bq.Axis(scale=y_scale, label=y_label, side="left", grid_lines="none", **ykw),
    ]
    kw = {"interaction": interaction} if interaction is not None else {}
    return bq.Figure(
        marks=list(marks),
        axes=axes,
        title=title,
        fig_margin=dict(FIG_MARGIN),
        animation_duration=0,
        layout=widgets.Layout(width="100%", height=height, min_width="260px"),
        **kw,
    )


def control_row(children: Sequence[widgets.Widget]) -> widgets.HBox:
    """A row of controls that wraps onto more lines in a narrow panel (no label is cut)."""
    return widgets.HBox(list(children), layout=widgets.Layout(flex_flow="row wrap", align_items="center"))


class DatasetTrait(traitlets.Instance):
    """An ``xarray.Dataset`` trait that notifies on every new object.

    traitlets compares old and new values with ``==`` before notifying; for a Dataset
    that is an element-wise comparison with alignment (milliseconds per step), so
    this trait compares identity only.
    """

    def __init__(self, **kwargs):
        super().__init__(xr.Dataset, **kwargs)

    def set(self, obj, value) -> None:
        new_value = self._validate(obj, value)
        old_value = obj._trait_values.get(self.name, self.default_value)
        obj._trait_values[self.name] = new_value
        if old_value is not new_value:
            obj._notify_trait(self.name, old_value, new_value)


class PanelBase(widgets.VBox):
    """Base class of the linked panels (see the module docstring).

    Parameters
    ----------
    ds : xarray.Dataset
        A series in the saxsnb layout (:func:`saxsnb.validate`); it is never modified.
    frame : int
        The initial current frame.
    """

    #: Key of the panel in :attr:`Dashboard.panels` and default code variable prefix.
    name = "panel"
    #: Short title shown above the panel.
    title = "Panel"

    frame = traitlets.Int(0)
    result = DatasetTrait(allow_none=True, read_only=True)
    status = traitlets.Unicode("")
    code = traitlets.Unicode("", read_only=True)

    def __init__(self, ds: xr.Dataset, *, frame: int = 0, **kwargs):
        self.ds = validate(ds)
        self.n_frames = int(ds.sizes["frame"])
        self.scan = main_scan(ds)
        if self.scan == "frame":
            self.scan_values = np.arange(self.n_frames, dtype=float)
            self.scan_units = ""
        else:
            self.scan_values = np.asarray(ds[self.scan].values)
            self.scan_units = str(ds[self.scan].attrs.get("units", ""))
        self.q = np.asarray(ds["q"].values, dtype=float)
        self.q_units = str(ds["q"].attrs.get("units", "1/nm"))
        self.intensity_units = str(ds["intensity"].attrs.get("units", "arb"))
        #: The exception behind the last error shown in ``status`` (None when none).
        self.last_error: BaseException | None = None
        super().__init__(**kwargs)
        self.figures: list[bq.Figure] = []
        self.heading = widgets.HTML(f"<b>{html.escape(self.title)}</b>")
        self.status_line = widgets.HTML("", layout=widgets.Layout(min_height="1.5em"))
        self.export_button = widgets.Button(
            description="Export code", icon="code", tooltip="Show Python code that reproduces this result"
        )
        self.code_area = widgets.Textarea(
            "",
            layout=widgets.Layout(width="100%", height="9em", display="none"),
        )
        self.png_button = widgets.Button(
            description="PNG", icon="download", tooltip="Save the main figure as PNG (in the browser)"
        )
        self.svg_button = widgets.Button(
            description="SVG", icon="download", tooltip="Save the main figure as SVG (in the browser)"
        )
        for b in (self.export_button, self.png_button, self.svg_button):
            b.layout = widgets.Layout(width="auto")
        self.export_button.on_click(lambda _b: self.show_code())
        self.png_button.on_click(lambda _b: self.save_png())
        self.svg_button.on_click(lambda _b: self.save_svg())
        body = self._build()
        tools = control_row([self.export_button, self.png_button, self.svg_button])
        self.children = [self.heading, *body, self.status_line, tools, self.code_area]
        self.observe(self._handle_frame, "frame")
        # CSS hooks for page tests and styling: the panel and each of its figures
        self.add_class("saxsnb-panel")
        self.add_class(f"saxsnb-{self.name}")
        for k, fig in enumerate(self.figures):
            fig.add_class(f"saxsnb-{self.name}-figure-{k}")
        self.layout.border = "1px solid #dddddd"
        self.layout.padding = "4px"
        if frame:
            self.frame = int(frame)
        else:
            self._update()

    # ------------------------------------------------------------- to override
    def _build(self) -> list[widgets.Widget]:
        """Create figures and controls; return the widgets of the panel body."""
        raise NotImplementedError

    def _update(self) -> None:
        """Recompute ``result`` for the current choices and redraw the marks."""
        raise NotImplementedError

    def _on_frame(self) -> None:
        """Called when ``frame`` changes; by default a full update."""
        self._update()

    def _code_lines(self, target: str) -> list[str]:
        """Lines of code assigning the result to ``target`` (``ds`` is the series)."""
        raise NotImplementedError

    # ----------------------------------------------------------------- frames
    @traitlets.validate("frame")
    def _check_frame(self, proposal):
        value = int(proposal["value"])
        if not 0 <= value < self.n_frames:
            raise traitlets.TraitError(f"frame {value} outside 0..{self.n_frames - 1}")
        return value

    def _handle_frame(self, change) -> None:
        self._on_frame()

    def frame_label(self, index: int | None = None) -> str:
        """Plain label of a frame, e.g. ``"temperature 45.5 degC (frame 51)"``."""
        i = self.frame if index is None else int(index)
        if self.scan == "frame":
            return f"frame {i}"
        v = self.scan_values[i]
        text = f"{v:.4g}" if np.issubdtype(np.asarray(v).dtype, np.number) else str(v)
        unit = f" {self.scan_units}" if self.scan_units else ""
        return f"{self.scan} {text}{unit} (frame {i})"

    @property
    def scan_limits(self) -> tuple[float, float]:
        """Smallest and largest scan value (for the x range of trend plots)."""
        v = np.asarray(self.scan_values, dtype=float)
        v = v[np.isfinite(v)]
        return (float(v.min()), float(v.max())) if v.size else (0.0, 1.0)

    @property
    def scan_label(self) -> str:
        """Axis label of the scan coordinate with its units."""
        if self.scan == "frame":
            return "frame"
        return f"{self.scan} ({self.scan_units})" if self.scan_units else self.scan

    # ------------------------------------------------------------- results
    def _set_result(self, result: xr.Dataset | None) -> None:
        self.set_trait("result", result)
        self.set_trait("code", self.to_code())
        if self.code_area.layout.display != "none":
            self.code_area.value = self.code

    @staticmethod
    def _set_line(mark, x, y, *, positive: bool = False, show: bool = True) -> bool:
        """Give a Lines mark new data ending on a drawable point (see
        ``display.drawable_line``); x is only resent when it changed.

        Returns False (and hides the mark, keeping its old data) when nothing is drawable.
        """
        out = drawable_line(x, y, positive=positive)
        with mark.hold_sync():
            if out is None:
                mark.visible = False
                return False
            lx, ly = out
            old = mark.x
            if old is None or old.shape != lx.shape or not np.array_equal(old, lx):
                mark.x = lx
            mark.y = ly
            if mark.visible != show:
                mark.visible = show
        return True

    @staticmethod
    def _set_points(mark, x, y, *, show: bool = True, **extra) -> bool:
        """Give a Scatter or Label mark new points; with no point the mark is hidden
        and keeps its old data (bqplot cannot compute an axis range from a mark that
        turns empty). ``extra`` sets other traits (e.g. ``text``) with the points.

        Returns False when there was nothing to draw.
        """
        with mark.hold_sync():
            if np.size(x) == 0:
                if mark.visible:
                    mark.visible = False
                return False
            mark.x, mark.y = x, y
            for k, v in extra.items():
                setattr(mark, k, v)
            if mark.visible != show:
                mark.visible = show
        return True

    def _on_point_click(self, mark, content) -> None:
        """Jump to the frame of a clicked point. Panels record, per mark, the frame of
        each drawn point in ``self._point_frames[id(mark)]``."""
        data = content.get("data") or {}
        idx = data.get("index") if isinstance(data, dict) else None
        frames = getattr(self, "_point_frames", {}).get(id(mark))
        if idx is not None and frames is not None and 0 <= int(idx) < len(frames):
            self.frame = int(frames[int(idx)])

    def report(self, exc: BaseException, what: str = "") -> None:
        """Show an exception in the status line and keep it in ``last_error``."""
        self.last_error = exc
        prefix = f"{what}: " if what else ""
        self.status = f"{prefix}{type(exc).__name__}: {exc}"

    def _status_context(self) -> dict:
        """Values filled into status messages (see ``display.status_message``)."""
        return {}

    @property
    def status_text(self) -> str:
        """``status`` in plain words: a trailing status code replaced by its message."""
        return describe_status(self.status, **self._status_context()) if self.status else ""

    @traitlets.observe("status")
    def _show_status(self, change) -> None:
        text = self.status_text
        if text:
            self.status_line.value = (
                f'<span style="color:{ROLE["warning"]}">&#9888; {html.escape(text)}</span>'
            )
        else:
            self.status_line.value = ""

    # ----------------------------------------------------------------- code
    def to_code(self, target: str = "result") -> str:
        """Python source that reproduces ``result`` without widgets.

        The code expects the series in a variable ``ds`` (and the background in
        ``background`` where the panel uses one) and assigns the result to ``target``.

        Returns
        -------
        str, ending with a newline.
        """
        lines = ["import saxsnb  # noqa: F401  (registers ds.saxs)", *self._code_lines(target)]
        return "\n".join(lines) + "\n"

    def show_code(self) -> str:
        """Show the exported code in the panel's text area (what "Export code" does)."""
        self.code_area.value = self.to_code()
        self.code_area.layout.display = None
        return self.code_area.value

    # -------------------------------------------------------------- figures
    @property
    def figure(self) -> bq.Figure:
        """The main figure of the panel."""
        return self.figures[0]

    def _file_stem(self) -> str:
        return f"saxsnb-{self.name}-frame{self.frame}"

    def save_png(self, filename: str | None = None) -> None:
        """Ask the browser to save the main figure as PNG (needs a live front end)."""
        self.figure.save_png(filename or self._file_stem() + ".png")

    def save_svg(self, filename: str | None = None) -> None:
        """Ask the browser to save the main figure as SVG (needs a live front end)."""
        self.figure.save_svg(filename or self._file_stem() + ".svg")

    def to_matplotlib(self, *, width: float = 6.0, height_per_plot: float = 3.2):
        """The panel's plots as a :class:`matplotlib.figure.Figure` for publication.

        Draws the current contents of each bqplot figure of the panel (same data,
        scales, labels and colours), one subplot per figure, without a browser and
        without pyplot's global state. Save it with ``fig.savefig("name.pdf")``.
        """
        from matplotlib.figure import Figure as MplFigure

        figs = [f for f in self.figures if f.layout.display != "none"]
        mfig = MplFigure(figsize=(width, height_per_plot * len(figs)), layout="constrained")
        axes = mfig.subplots(len(figs), 1, squeeze=False)[:, 0]
        for ax, fig in zip(axes, figs):
            figure_to_matplotlib(fig, ax)
        return mfig


def _scale_kind(scale) -> str:
    return "log" if isinstance(scale, bq.LogScale) else "linear"


def figure_to_matplotlib(fig: bq.Figure, ax) -> None:
    """Draw the marks of a bqplot Figure onto a matplotlib Axes."""
    for mark in fig.marks:
        if not mark.visible:
            continue
        if isinstance(mark, bq.HeatMap):
            c = np.asarray(mark.color, dtype=float)
            mesh = ax.pcolormesh(np.asarray(mark.x), np.asarray(mark.y), c, shading="nearest", cmap="viridis")
            ax.figure.colorbar(mesh, ax=ax, label="log10 I")
        elif isinstance(mark, bq.GridHeatMap):
            continue  # transparent click targets
        elif isinstance(mark, bq.Label):
            for x, y, t in zip(np.atleast_1d(mark.x), np.atleast_1d(mark.y), mark.text):
                ax.annotate(
                    str(t),
                    (float(x), float(y)),
                    fontsize=7,
                    ha="center",
                    va="bottom",
                    color=(mark.colors or ["black"])[0],
                )
        elif isinstance(mark, bq.Scatter):
            x, y = np.atleast_1d(mark.x), np.atleast_1d(mark.y)
            if x.size == 0:
                continue
            colors = list(mark.colors) or ["black"]
            if mark.color is not None and np.size(mark.color) == x.size and len(colors) > 1:
                idx = np.asarray(mark.color, dtype=int) % len(colors)
                col = [colors[i] for i in idx]
            else:
                col = colors[0]
            label = mark.labels[0] if mark.labels and mark.display_legend else None
            ax.scatter(x, y, s=max(12.0, 1.2 * mark.default_size), c=col, label=label)
        elif isinstance(mark, bq.Lines):
            x, y = np.asarray(mark.x, dtype=float), np.asarray(mark.y, dtype=float)
            if x.size == 0 or y.size == 0:
                continue
            ys = y if y.ndim == 2 else y[None, :]
            xs = x if x.ndim == 2 else np.broadcast_to(x, ys.shape)
            colors = list(mark.colors) or ["black"]
            style = {"solid": "-", "dashed": "--", "dotted": ":", "dash_dotted": "-."}[mark.line_style]
            for k, (xx, yy) in enumerate(zip(xs, ys)):
                label = mark.labels[k] if k < len(mark.labels) and mark.display_legend else None
                ax.plot(
                    xx,
                    yy,
                    style,
                    color=colors[k % len(colors)],
                    lw=1.2,
                    marker="o" if mark.marker else None,
                    ms=0.7 * np.sqrt(mark.marker_size),
                    label=label,
                )
    for axis in fig.axes:
        if isinstance(axis, bq.ColorAxis):
            continue
        if axis.side in ("left", "right"):
            ax.set_ylabel(axis.label)
            ax.set_yscale(_scale_kind(axis.scale))
        else:
            ax.set_xlabel(axis.label)
            ax.set_xscale(_scale_kind(axis.scale))
    if fig.title:
        ax.set_title(fig.title, fontsize=9)
    handles, _labels = ax.get_legend_handles_labels()
    if handles:
        ax.legend(fontsize=7)
