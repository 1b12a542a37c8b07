"""Import bqplot once, quietly, and send mark data to the browser as float32.

bqplot 0.13 (through bqscales) declares a trait with constructor metadata that
traitlets reports as a DeprecationWarning at import time; it is not ours and not the
user's concern, so it is silenced for that import only.

The marks the panels use (``Lines``, ``Scatter``, ``Label``, ``HeatMap``) are bqplot's
own with one change: their data arrays (x, y, color) go to the browser as float32
(:func:`wire_array`), half the bytes of float64, while the Python side keeps the
arrays as given (tests and the exported figures read the exact values). A browser
plot draws to a pixel, so 7 significant digits (float32: relative rounding below
6e-8) change nothing visible; an array whose values float32 cannot hold (beyond
3.4e38, or nonzero below 1.2e-38) is sent as float64.
"""

import warnings

with warnings.catch_warnings():
    warnings.simplefilter("ignore", DeprecationWarning)
    import bqplot  # noqa: F401
    import bqplot.interacts  # noqa: F401

import copy  # noqa: E402

import numpy as np  # noqa: E402
from bqplot import (  # noqa: E402
    Axis,
    ColorAxis,
    ColorScale,
    Figure,
    GridHeatMap,
    Image,
    LinearScale,
    LogScale,
)
from bqplot.interacts import BrushIntervalSelector  # noqa: E402
from bqplot.traits import array_from_json, array_to_json  # noqa: E402
from traittypes import Array  # noqa: E402

__all__ = [
    "Axis",
    "ColorAxis",
    "ColorScale",
    "Figure",
    "GridHeatMap",
    "HeatMap",
    "Image",
    "Label",
    "Lines",
    "LinearScale",
    "LogScale",
    "Scatter",
    "BrushIntervalSelector",
    "CellTargets",
    "clickable_points",
    "wire_array",
]

#: Smallest normal float32: nonzero values below it would be flushed towards 0.
_F32_TINY = float(np.finfo(np.float32).tiny)
_F32_MAX = float(np.finfo(np.float32).max)


def wire_array(ar):
    """The float32 copy of a float64 array when float32 holds every value (finite
    values within its range, nonzero ones above its smallest normal number), else
    the array itself. NaN and infinities stay what they are."""
    if ar is None or getattr(ar, "dtype", None) != np.float64 or ar.size == 0:
        return ar
    a = np.abs(ar)
    fin = a[np.isfinite(a)]
    if fin.size and (fin.max() > _F32_MAX or ((fin > 0) & (fin < _F32_TINY)).any()):
        return ar
    return ar.astype(np.float32)


def _to_json32(ar, obj=None, force_contiguous=True):
    return array_to_json(wire_array(ar), obj, force_contiguous)


def _float32_marks(base, names):
    """A subclass of the bqplot mark ``base`` whose traits ``names`` are sent as float32."""
    body = {}
    for name in names:
        trait = copy.copy(base.class_traits()[name])
        trait.metadata = dict(trait.metadata, to_json=_to_json32)
        body[name] = trait
    body["__doc__"] = f"bqplot's {base.__name__}, its {', '.join(names)} sent as float32 (see the module)."
    body["__module__"] = __name__
    return type(base.__name__, (base,), body)


Lines = _float32_marks(bqplot.Lines, ("x", "y"))
Scatter = _float32_marks(bqplot.Scatter, ("x", "y"))
Label = _float32_marks(bqplot.Label, ("x", "y"))
HeatMap = _float32_marks(bqplot.HeatMap, ("x", "y", "color"))


def _cells_from_json(value, obj=None):
    """A selection of grid cells from the page: an int array of (row, column) pairs.

    bqplot reads the page's list of [row, column] lists as an object-typed array,
    which it cannot serialise again: the widget's state would then break a second
    view or a reload of the page ("Loading widget" for good).
    """
    import numpy as np

    if isinstance(value, list):
        return np.asarray(value, dtype=np.int64).reshape(-1, 2)
    return array_from_json(value, obj)


class CellTargets(GridHeatMap):
    """A GridHeatMap whose ``selected`` cells stay an int array (always serialisable)."""

    selected = Array(None, allow_none=True).tag(sync=True, from_json=_cells_from_json, to_json=array_to_json)


def clickable_points(scales, colour, label, *, size=16, marker="circle", **options):
    """An empty Scatter whose points can be clicked (to jump to a frame), drawn fully
    opaque whether selected or not."""
    import numpy as np

    options.setdefault("interactions", {"click": "select"})
    options.setdefault("unselected_style", {"opacity": 1.0})
    return Scatter(
        x=np.zeros(0),
        y=np.zeros(0),
        scales=scales,
        colors=[colour],
        default_size=size,
        marker=marker,
        labels=[label],
        **options,
    )
