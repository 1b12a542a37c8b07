"""The panel base class: shared current frame, status line, code and figure export.

Every panel of :mod:`saxsnb.widgets` is a :class:`PanelBase`, an ``ipywidgets.VBox``
over a :class:`~saxsnb.widgets.model.SeriesModel` (``panel.model``: the series, its
masked arrays once, the cached whole-series results, the shared frame), whose state
lives in traits:

``frame`` (int)
    The current frame (position along the ``frame`` dimension), linked to the model's
    ``frame``: panels on one model (all panels of :func:`explore`) step together.
``result`` (xarray.Dataset, read only)
    The analysis Dataset for the current choices, set by the panel only.
``status`` (str)
    The last error or warning of the panel ("" when none); a frame's analysis status
    keeps its code (e.g. ``"frame 3: too_few_points"``). The panel's status line
    (``panel.status_line``, an HTML widget) shows it in plain words
    (``panel.status_text``, via ``display.describe_status``).
``code`` (str, read only)
    Python source that reproduces ``result`` without widgets (see :meth:`to_code`).
``last_error`` (exception or None)
    The exception behind the last error shown in ``status``.

Code convention: the exported code starts with ``import saxsnb``, then rebuilds the
series from its files with :meth:`ds.saxs.recipe <saxsnb.accessor.recipe.RecipeMethods.recipe>`
(the read, the subtraction with the background's own files, ...) under the user's
own variable name (``explore(ramp)`` writes code about ``ramp``: the name is found in
the caller's variables by identity; pass ``series_name=`` to a panel, ``name=`` to
:func:`explore` or to :meth:`to_code` where it cannot be found), and assigns the
result to ``result`` (or to the name given to :meth:`to_code`). Run in a fresh
namespace it gives ``result`` identically. A series without a history of files
(made in memory, e.g. ``saxsnb.from_arrays``) cannot be rebuilt: the code then
expects it in ``ds`` (and the background in ``background``), as its first comment
says. Panels write their steps about ``ds`` / ``background`` in ``_code_lines``; the
shared :func:`export_code` renames them and puts the recipe in front.

Adding a panel (e.g. for P(r)) is one new module: subclass :class:`PanelBase`, build
the figures in ``_build()``, compute in ``_update()`` (whole-series results from
``self.model.result(...)``, never a masked copy of its own) and write ``_code_lines()``.
"""

from __future__ import annotations

import functools
import html
import io
import keyword
import sys
import tokenize
from collections.abc import Sequence

import ipywidgets as widgets
import numpy as np
import traitlets
import xarray as xr

from ..display import describe_status, drawable_line, finite_points, log_ticks, pretty_label, tick_format
from ..errors import SaxsInputError
from . import _bq as bq
from .model import SeriesModel, as_model
from .mpl import figure_to_matplotlib
from .palette import ROLE

__all__ = ["PanelBase", "DatasetTrait", "make_figure", "figure_to_matplotlib", "caller_variable",
           "export_code"]

#: Margins of every figure, in pixels.
FIG_MARGIN = {"top": 30, "bottom": 48, "left": 64, "right": 16}
#: Most points a trend plot (per-frame values against the scan) draws: a longer series
#: draws one frame in k (k = ceil(frames / MAX_TREND_POINTS), said under the plot); the
#: results and tables keep every frame. Some thousands of points show a trend as well
#: as 10^5 do, which a browser would draw slowly and which would be sent whole.
MAX_TREND_POINTS = 4000


def figure_png(fig, dpi: float, path=None) -> bytes:
    """The PNG bytes of a matplotlib figure at ``dpi``; written atomically to ``path``
    when given."""
    from ..io._atomic import atomic_write_bytes

    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    data = buf.getvalue()
    if path is not None:
        atomic_write_bytes(path, data)
    return data


def download_link(name: str, data: bytes, mime: str, style: str = "") -> str:
    """An HTML link that saves ``data`` as the file ``name`` in the browser."""
    import base64

    extra = f' style="{style}"' if style else ""
    return (f'<a download="{html.escape(name)}" href="data:{mime};base64,'
            f'{base64.b64encode(data).decode("ascii")}" class="saxsnb-download"{extra}>'
            f"&#11015; {html.escape(name)}</a>")


def trend_step(n_frames: int) -> int:
    """The frame step of trend plots of a series of ``n_frames`` (see :data:`MAX_TREND_POINTS`)."""
    return max(1, -(-int(n_frames) // MAX_TREND_POINTS))


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
    for scale, kw in ((x_scale, xkw), (y_scale, ykw)):
        if not isinstance(scale, bq.LogScale) and scale.min is not None and scale.max is not None:
            kw["tick_format"] = tick_format(scale.min, scale.max)
    axes = [
        bq.Axis(scale=x_scale, label=pretty_label(x_label), grid_lines="none", **xkw),
        bq.Axis(scale=y_scale, label=pretty_label(y_label), side="left", grid_lines="none", **ykw),
    ]
    kw = {"interaction": interaction} if interaction is not None else {}
    return bq.Figure(
        marks=list(marks),
        axes=axes,
        title=pretty_label(title),
        fig_margin=dict(FIG_MARGIN),
        animation_duration=0,
        layout=widgets.Layout(width="100%", height=height, min_width="260px"),
        **kw,
    )


def set_ticks(fig, lo: float, hi: float, *, axis: int = 1) -> None:
    """Give a linear axis of ``fig`` (0: x, 1: y) the tick format of a ``lo .. hi``
    range (``display.tick_format``: exponents for tiny or huge values)."""
    ax = fig.axes[axis]
    if isinstance(ax.scale, bq.LogScale) or lo is None or hi is None:
        return
    fmt = tick_format(lo, hi)
    if ax.tick_format != fmt:
        ax.tick_format = fmt


def key_html(entries) -> str:
    """A key under a plot (a legend box inside would hide points and block clicks):
    ``entries`` are (colour, symbol, text); text is escaped."""
    return (
        "<small>"
        + " &nbsp; ".join(f'<span style="color:{c}">{sym}</span> {html.escape(t)}' for c, sym, t in entries)
        + "</small>"
    )


def control_row(children: Sequence[widgets.Widget]) -> widgets.HBox:
    """A row of controls that wraps onto more lines in a narrow panel (no label is cut)."""
    return widgets.HBox(list(children), layout=widgets.Layout(flex_flow="row wrap", align_items="center"))


def _is_name(name) -> bool:
    return isinstance(name, str) and name.isidentifier() and not keyword.iskeyword(name)


def checked_name(name: str | None, parameter: str = "name") -> str | None:
    """``name`` if it is a Python variable name (or None), else a SaxsInputError."""
    if name is not None and not _is_name(name):
        raise SaxsInputError(f"{name!r} is not a Python variable name", parameter=parameter)
    return name


def caller_variable(obj) -> str | None:
    """The user's variable name of ``obj``: the first name bound to this very object
    (identity, not equality) in the locals, then the globals, of the first calling frame
    outside saxsnb (a notebook cell, a script, a test). Names starting with ``_``
    (IPython's ``_``, ``_3``, ...) are skipped; None when no variable holds it."""
    if obj is None:
        return None
    f = sys._getframe(1)
    while f is not None and str(f.f_globals.get("__name__", "")).split(".")[0] == "saxsnb":
        f = f.f_back
    if f is None:
        return None
    for scope in (f.f_locals, f.f_globals):
        for k, v in list(scope.items()):
            if v is obj and _is_name(k) and not k.startswith("_"):
                return k
    return None


def _rename(code: str, names: dict[str, str]) -> str:
    """``code`` with the variables ``names`` (old -> new) renamed: Python tokens only,
    so comments, strings and attributes (``x.ds``) are left alone."""
    names = {k: v for k, v in names.items() if k != v}
    if not names:
        return code
    return _rename_tokens(code, tuple(sorted(names.items())))


@functools.lru_cache(maxsize=256)
def _rename_tokens(code: str, pairs: tuple) -> str:
    """:func:`_rename` of ``code`` (the code of a frame step recurs: kept, not re-tokenized)."""
    names = dict(pairs)
    lines = code.splitlines(keepends=True)
    edits = []
    prev = None
    for tok in tokenize.generate_tokens(io.StringIO(code).readline):
        attribute = prev is not None and prev.string == "."
        if tok.type == tokenize.NAME and tok.string in names and not attribute:
            edits.append((tok.start, tok.end, names[tok.string]))
        if tok.type not in (tokenize.NL, tokenize.COMMENT):
            prev = tok
    for (r, c0), (_r, c1), new in reversed(edits):
        line = lines[r - 1]
        lines[r - 1] = line[:c0] + new + line[c1:]
    return "".join(lines)


@functools.lru_cache(maxsize=256)
def _names_in(code: str) -> frozenset[str]:
    tokens = tokenize.generate_tokens(io.StringIO(code).readline)
    return frozenset(t.string for t in tokens if t.type == tokenize.NAME)


def _recipe_lines(ds, name: str) -> list[str] | None:
    """The lines of ``ds.saxs.recipe(name)`` after ``import saxsnb`` (None: no history)."""
    try:
        code = ds.saxs.recipe(name)
    except SaxsInputError:
        return None
    return [line for line in code.splitlines() if line.strip() and line != "import saxsnb"]


def _cached_recipe(model: SeriesModel, ds, name: str) -> list[str] | None:
    """:func:`_recipe_lines`, kept per model (the recipe of a series never changes; it is
    asked for at every frame step, as ``code`` follows ``result``)."""
    cache = model.__dict__.setdefault("_recipe_cache", {})
    key = (id(ds), name)
    if key not in cache:
        cache[key] = (ds, _recipe_lines(ds, name))  # the Dataset is kept: its id stays its own
    return cache[key][1]


def export_code(model: SeriesModel, steps: Sequence[str], *, background=None, name: str | None = None,
                background_name: str | None = None) -> str:
    """The code of one or more panels: the recipe of the series (and of the background
    where the steps use it) from the files, then ``steps`` (lines about ``ds`` and
    ``background``) renamed to the user's variables.

    ``name`` / ``background_name`` default to the model's (found by
    :func:`caller_variable` or given by the user); a series without a history of files
    keeps ``ds`` (``background``) unless a name was given, and the code says to define it.
    """
    body = "\n".join(steps) + "\n"
    uses_bg = "background" in body and "background" in _names_in(body)  # tokenized only when it may
    out = ["import saxsnb  # noqa: F401  (registers ds.saxs)"]
    series = checked_name(name) or model.name or "ds"
    rec = _cached_recipe(model, model.ds, series)
    if rec is None:
        series = checked_name(name) or (model.name if model.name_given else None) or "ds"
        out.append(f"# {series}: the series was made in memory (no history of files to rebuild it "
                   "from): define it before this code")
    else:
        out += rec
    bg_name = checked_name(background_name, "background_name")
    if bg_name is None:
        bg_name = model.background_name or "background"
    if bg_name == series:
        bg_name = f"{series}_background"
    if uses_bg:
        bg = model.background if background is None else background
        brec = None if bg is None else _cached_recipe(model, bg, bg_name)
        if brec is None:
            if not (background_name or model.background_name_given):
                bg_name = "background" if series != "background" else "ds_background"
            out.append(f"# {bg_name}: the background series was made in memory (no history of files): "
                       "define it before this code")
        elif set(brec) <= set(rec or ()):
            pass  # already read by the series' own recipe under this name
        elif bg_name != "background" and set(_cached_recipe(model, bg, "background") or ()) <= set(rec or ()):
            out.append(f"{bg_name} = background")  # the background the series' recipe read
        else:
            out += brec
    out.append(_rename(body, {"ds": series, "background": bg_name}).rstrip("\n"))
    return "\n".join(out) + "\n"


class DatasetTrait(traitlets.TraitType):
    """An ``xarray.Dataset`` trait (or None) that notifies whenever a different object is set.

    traitlets decides whether to notify with ``bool(old == new)``; for Datasets that is
    an element-wise comparison with alignment (milliseconds per step) whose truth value
    only says whether the comparison has variables, so a plain trait would stay silent
    on a new result. This trait compares identity instead. It keeps its value in the
    owner's ``__dict__`` and notifies through the public ``HasTraits.notify_change``,
    so it relies on no private part of traitlets.
    """

    info_text = "an xarray.Dataset or None"

    def __init__(self, **kwargs):
        kwargs.setdefault("default_value", None)
        super().__init__(**kwargs)

    def validate(self, obj, value):
        if isinstance(value, xr.Dataset) or (value is None and self.allow_none):
            return value
        self.error(obj, value)

    def _slot(self) -> str:
        return f"_saxsnb_{self.name}_value"

    def get(self, obj, cls=None):
        return obj.__dict__.get(self._slot(), self.default_value)

    def set(self, obj, value) -> None:
        new = self.validate(obj, value)
        old = self.get(obj)
        obj.__dict__[self._slot()] = new
        if new is not old:
            obj.notify_change(_Change(name=self.name, old=old, new=new, owner=obj, type="change"))


def checked_range(value):
    """A q range trait value: None, or (low, high) floats, finite, in increasing order."""
    if value is None:
        return None
    lo, hi = (float(v) for v in value)
    if not (np.isfinite(lo) and np.isfinite(hi)):
        raise traitlets.TraitError(f"q_range {value!r} must be finite")
    return (min(lo, hi), max(lo, hi))


class _Change(dict):
    """A change record as traitlets hands to observers: a dict with attribute access."""

    __getattr__ = dict.__getitem__


class PanelBase(widgets.VBox):
    """Base class of the linked panels (see the module docstring).

    Parameters
    ----------
    source : xarray.Dataset or SeriesModel
        A series in the saxsnb layout (:func:`saxsnb.validate`; never modified), or the
        :class:`~saxsnb.widgets.model.SeriesModel` shared with other panels (what
        :func:`explore` passes). A Dataset gets a model of its own.
    frame : int, optional
        The initial current frame (default: the model's current frame). Setting it
        moves every panel on the same model.
    """

    #: Key of the panel in :attr:`Dashboard.panels` and default code variable prefix.
    name = "panel"
    #: Short title shown above the panel.
    title = "Panel"

    frame = traitlets.Int(0)
    result = DatasetTrait(allow_none=True, read_only=True)
    status = traitlets.Unicode("")
    code = traitlets.Unicode("", read_only=True)
    #: The exception behind the last error shown in ``status`` (None when none).
    last_error = traitlets.Any(None, allow_none=True)

    def __init__(self, source, *, frame: int | None = None, series_name: str | None = None,
                 background_name: str | None = None, **kwargs):
        #: The shared :class:`SeriesModel` (series, masked arrays, cached results, frame).
        self.model = as_model(source)
        # the user's variable names for the exported code (see the module docstring)
        self.model.set_names(series_name, background_name)
        if not isinstance(source, SeriesModel) and self.model.name is None:
            self.model.name = caller_variable(source)
        bg = self._background_dataset()
        if bg is not None:
            if self.model.background is None:
                self.model.background = bg
            if self.model.background_name is None and self.model.background is bg:
                self.model.background_name = caller_variable(bg)
        #: Per clickable mark (by id), the frame of each drawn point (see _on_point_click).
        self._point_frames: dict[int, np.ndarray] = {}
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
            description="PNG", icon="download",
            tooltip="A PNG of the whole panel (all its figures, 1800 px wide) to download",
        )
        #: The download link of the last whole-panel PNG ("PNG" button; a data: URI).
        self.png_link = widgets.HTML("")
        self.svg_button = widgets.Button(
            description="SVG", icon="download", tooltip="Save the main figure as SVG (in the browser)"
        )
        for b in (self.export_button, self.png_button, self.svg_button):
            b.layout = widgets.Layout(width="auto")
        self.export_button.on_click(lambda _b: self.show_code())
        self.png_button.on_click(lambda _b: self._png_from_button())
        self.svg_button.on_click(lambda _b: self.save_svg())
        self.set_trait("frame", self.model.frame)  # no observer yet: nothing is drawn twice
        body = self._build()
        tools = control_row([self.export_button, self.png_button, self.svg_button, self.png_link])
        self.children = [self.heading, *body, self.status_line, tools, self.code_area]
        # CSS hooks for page tests and styling: the panel and each of its figures
        self.add_class("saxsnb-panel")
        self.add_class(f"saxsnb-{self.name}")
        for k, fig in enumerate(self.figures):
            fig.add_class(f"saxsnb-{self.name}-figure-{k}")
        self.layout.border = "1px solid #dddddd"
        self.layout.padding = "4px"
        # the panel's frame follows the model's (both ways): stepping one panel steps all
        self._frame_link = traitlets.link((self.model, "frame"), (self, "frame"))
        self.observe(self._handle_frame, "frame")
        if frame is not None and int(frame) != self.frame:
            self.frame = int(frame)
        else:
            self._update()

    # ------------------------------------------------------------ the series
    @property
    def ds(self) -> xr.Dataset:
        """The series (the model's validated Dataset)."""
        return self.model.ds

    @property
    def n_frames(self) -> int:
        return self.model.n_frames

    @property
    def q(self) -> np.ndarray:
        return self.model.q

    @property
    def q_units(self) -> str:
        return self.model.q_units

    @property
    def intensity_units(self) -> str:
        return self.model.intensity_units

    @property
    def scan(self) -> str:
        return self.model.scan

    @property
    def scan_values(self) -> np.ndarray:
        return self.model.scan_values

    @property
    def scan_units(self) -> str:
        return self.model.scan_units

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
        """Lines of code assigning the result to ``target`` (``ds`` is the series,
        ``background`` the background; :func:`export_code` renames both)."""
        raise NotImplementedError

    def _background_dataset(self):
        """The background series the panel's code uses as ``background`` (None: none)."""
        return None

    def table_result(self):
        """The result tabulated by the dashboard's "Write results tables" (one row per
        frame): ``result`` by default; fit panels give their whole-series result."""
        return self.result

    # ----------------------------------------------------------------- frames
    @traitlets.validate("frame")
    def _check_frame(self, proposal):
        value = int(proposal["value"])
        if not 0 <= value < self.n_frames:
            raise traitlets.TraitError(f"frame {value} outside 0..{self.n_frames - 1}")
        return value

    def _handle_frame(self, change) -> None:
        self._on_frame()

    def code_comment(self, index: int | None = None) -> str:
        """:meth:`frame_label` safe to put after ``#`` in exported code: scan names and
        units come from file metadata, and a line break in them would end the comment
        (every non-printable character becomes a space)."""
        return "".join(ch if ch.isprintable() else " " for ch in self.frame_label(index))

    def frame_label(self, index: int | None = None) -> str:
        """Plain label of a frame, e.g. ``"temperature 45.5 degC (frame 51)"``."""
        return self.model.frame_label(self.frame if index is None else index)

    @property
    def scan_limits(self) -> tuple[float, float]:
        """Smallest and largest scan value (for the x range of trend plots)."""
        return self.model.scan_limits

    @property
    def scan_label(self) -> str:
        """Axis label of the scan coordinate with its units."""
        return self.model.scan_label

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

    def _trend_points(self, values):
        """``finite_points(scan, values)`` of the frames a trend plot draws (one in
        :func:`trend_step`): x, y and the frame of each point."""
        k = trend_step(self.n_frames)
        x, y, idx = finite_points(self.scan_values[::k], np.asarray(values)[::k])
        return x, y, idx * k

    def _trend_note(self) -> str:
        """The key entry saying that trend plots draw one frame in k ("" when all)."""
        k, n = trend_step(self.n_frames), self.n_frames
        return "" if k == 1 else f"one frame in {k} drawn ({len(range(0, n, k))} of {n})"

    # a panel with a brush selector commits it when a drag ends (or from Python)
    def _on_brushing(self, change) -> None:
        if not change["new"]:
            self._commit_selector()

    def _on_selected(self, change) -> None:
        if not self.selector.brushing:
            self._commit_selector()

    def _commit_selector(self) -> None:
        """Turn ``self.selector.selected`` into the panel's ``q_range`` (brush panels)."""
        raise NotImplementedError

    def _on_point_click(self, mark, content) -> None:
        """Jump to the frame of a clicked point. Panels record, per mark, the frame of
        each drawn point in ``self._point_frames[id(mark)]``."""
        data = content.get("data") or {}
        idx = data.get("index") if isinstance(data, dict) else None
        frames = self._point_frames.get(id(mark))
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
    def to_code(self, target: str = "result", *, name: str | None = None,
                background_name: str | None = None) -> str:
        """Python source that rebuilds ``result`` from the files, without widgets.

        The code reads the series (and the background where the panel uses one) as
        its recipe says (``ds.saxs.recipe``), under the user's variable names (or
        ``name`` / ``background_name``), then repeats the panel's choices and assigns
        the result to ``target``. Run in a fresh namespace it gives ``result``
        identically (see the module docstring for a series made in memory).

        Returns
        -------
        str, ending with a newline.
        """
        checked_name(target, "target")
        return export_code(self.model, self._code_lines(target), background=self._background_dataset(),
                           name=name, background_name=background_name)

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
        """Ask the browser to save the main figure as PNG (needs a live front end);
        :meth:`to_png` makes a PNG of the whole panel without a browser."""
        self.figure.save_png(filename or self._file_stem() + ".png")

    def to_png(self, path=None, *, width_px: int = 1800, width: float = 8.0) -> bytes:
        """A PNG of the whole panel (every figure shown, stacked), ``width_px`` wide.

        Drawn by :meth:`to_matplotlib` (no browser needed), at ``width_px / width``
        dots per inch. With ``path`` it is also written there, atomically.

        Returns
        -------
        bytes of the PNG file.
        """
        if int(width_px) < 1:
            raise SaxsInputError("width_px must be positive", parameter="width_px")
        return figure_png(self.to_matplotlib(width=width), int(width_px) / float(width), path)

    def _png_from_button(self) -> None:
        try:
            data = self.to_png()
        except Exception as exc:  # shown in the status line
            self.report(exc, "PNG")
            return
        name = self._file_stem() + ".png"
        self.png_link.value = download_link(name, data, "image/png")

    def save_svg(self, filename: str | None = None) -> None:
        """Ask the browser to save the main figure as SVG (needs a live front end)."""
        self.figure.save_svg(filename or self._file_stem() + ".svg")

    def to_matplotlib(self, *, width: float = 6.0, height_per_plot: float = 3.2, dpi: float | None = None):
        """The panel's plots as a :class:`matplotlib.figure.Figure` for publication.

        Draws the current contents of each bqplot figure of the panel (same data,
        scales, labels with their symbols and units, colours, error bars), one subplot
        per figure, without a browser and without pyplot's global state. Save it with
        ``fig.savefig("name.pdf")`` (vector) or ``fig.savefig("name.png")``; ``dpi``
        (e.g. 300 for print) is the figure's resolution, used by ``savefig`` too.
        """
        from matplotlib.figure import Figure as MplFigure

        figs = [f for f in self.figures if f.layout.display != "none"]
        kw = {} if dpi is None else {"dpi": float(dpi)}
        mfig = MplFigure(figsize=(width, height_per_plot * len(figs)), layout="constrained", **kw)
        axes = mfig.subplots(len(figs), 1, squeeze=False)[:, 0]
        for ax, fig in zip(axes, figs):
            figure_to_matplotlib(fig, ax)
        return mfig
