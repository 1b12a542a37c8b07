"""saxsnb: series-native SAXS analysis for Jupyter.

>>> import numpy as np, saxsnb
>>> ds = saxsnb.from_arrays(np.linspace(0.1, 1, 4), np.ones((2, 4)), np.ones((2, 4)))
>>> ds.saxs.summary()["frames"]
2
"""

__version__ = "0.1.0"

from . import accessor as _accessor  # noqa: E402,F401  (registers ds.saxs)
from .accessor.preparation import calibrate_q, merge_ranges  # noqa: E402
from .analysis import water_cross_section  # noqa: E402
from .errors import InputError, SaxsError, SaxsFileError, SaxsFitError, SaxsInputError  # noqa: E402
from .series import from_arrays, validate  # noqa: E402


def __getattr__(name):
    # Readers and the dashboard are imported on first use, so `import saxsnb` stays light.
    if name in ("read_series", "open_series", "save_series", "write_text_series", "read_cansas_xml",
                "read_images"):
        from . import io

        return getattr(io, name)
    if name == "cluster":
        from ._cluster import cluster

        return cluster
    if name == "explore":
        from .widgets import explore

        return explore
    if name == "analysis":
        import importlib

        return importlib.import_module(".analysis", __name__)
    if name == "demo":
        import importlib

        return importlib.import_module(".demo", __name__)
    raise AttributeError(f"module 'saxsnb' has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(__all__))


__all__ = [
    "from_arrays",
    "validate",
    "water_cross_section",
    "calibrate_q",
    "merge_ranges",
    "read_series",
    "open_series",
    "save_series",
    "write_text_series",
    "read_cansas_xml",
    "explore",
    "cluster",
    "demo",
    "analysis",
    "InputError",
    "SaxsError",
    "SaxsInputError",
    "SaxsFileError",
    "SaxsFitError",
    "read_images",
]
