"""Import bqplot once, quietly.

bqplot 0.13 (through bqscales) declares a trait with constructor metadata that
traitlets reports as a DeprecationWarning at import time; it is not ours and not the
user's concern, so it is silenced for that import only.
"""

import warnings

with warnings.catch_warnings():
    warnings.simplefilter("ignore", DeprecationWarning)
    import bqplot  # noqa: F401
    import bqplot.interacts  # noqa: F401

from bqplot import (  # noqa: E402
    Axis,
    ColorAxis,
    ColorScale,
    Figure,
    GridHeatMap,
    HeatMap,
    Image,
    Label,
    LinearScale,
    Lines,
    LogScale,
    Scatter,
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
]


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
