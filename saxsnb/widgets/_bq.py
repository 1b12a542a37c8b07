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
    Label,
    LinearScale,
    Lines,
    LogScale,
    Scatter,
)
from bqplot.interacts import BrushIntervalSelector  # noqa: E402

__all__ = [
    "Axis",
    "ColorAxis",
    "ColorScale",
    "Figure",
    "GridHeatMap",
    "HeatMap",
    "Label",
    "Lines",
    "LinearScale",
    "LogScale",
    "Scatter",
    "BrushIntervalSelector",
    "clickable_points",
]


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
