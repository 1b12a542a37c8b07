"""Interactive linked panels (ipywidgets 8 + bqplot) over a SAXS series.

``saxsnb.explore(ds)`` shows all panels linked on one current frame; each panel also
works on its own. Every panel has the traits ``frame`` (int), ``result`` (read-only
Dataset), ``status`` (str, "" when no error) and ``code``, and ``to_code()`` returning
Python that reproduces ``result`` from a series bound to the name ``ds``.
Panels show and select; every number comes from :mod:`saxsnb.accessor` and
:mod:`saxsnb.analysis`.
"""

from .base import PanelBase
from .browser import SeriesBrowser
from .curve import CurvePanel
from .dashboard import Dashboard, PanelSet, explore

__all__ = [
    "explore",
    "Dashboard",
    "PanelSet",
    "PanelBase",
    "SeriesBrowser",
    "CurvePanel",
    "LinearFitPanel",
    "KratkyPanel",
    "PeaksPanel",
]


def __getattr__(name):
    # Panels whose analysis lands later are imported on first use.
    modules = {"LinearFitPanel": "linear", "KratkyPanel": "kratky", "PeaksPanel": "peaks"}
    if name in modules:
        import importlib

        return getattr(importlib.import_module(f".{modules[name]}", __name__), name)
    raise AttributeError(f"module 'saxsnb.widgets' has no attribute {name!r}")
