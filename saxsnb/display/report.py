"""Reports of a series or of any result Dataset: text, HTML and a JSON-safe summary.

``ds.saxs.report()`` and ``result.saxs.report()`` call these, and the panels show the
same lines for their current frame (:func:`frame_lines`), so a notebook, a saved file
and a panel say the same thing (as lmfit's ``fit_report`` and ``_repr_html_`` do).
"""

from __future__ import annotations

import html
import json
from typing import Any

import numpy as np

from .._jsonsafe import to_json_safe
from .text import format_value, phase_map_report, status_message

__all__ = ["report_summary", "report_text", "report_html", "frame_lines", "ASSUMPTIONS"]

#: What each analysis assumes, said beside its numbers.
ASSUMPTIONS = {
    "guinier": "Guinier approximation ln I = ln I0 - (q Rg)^2 / 3 (rod, sheet: cross-section forms), valid "
               "for q_max R below the stated limit; a flat, correctly subtracted background. Sigmas "
               "are multiplied by sqrt(chi2_reduced) where the fit misses the data (sigma_scale > 1); "
               "the automatic range's sigma includes the spread over the acceptable ranges.",
    "porod": "sharp interfaces (I ~ Kp / q^4) plus a flat background over the chosen q range.",
    "invariant": "Guinier extrapolation below the measured range and a Kp / q^4 tail above it; absolute "
                 "values only as good as the intensity calibration.",
    "kratky_summary": "dimensionless Kratky plot from the Guinier Rg and I0 of each frame.",
    "find_peaks": "peaks over a smooth baseline, profile as stated, prominence in noise units.",
    "index_phases": "a phase assignment from few peaks is a hypothesis: read 'alternative' and 'caveat'.",
    "phase_map": "transitions are located to half a scan step; phases from the indexing above.",
}

#: Analyses whose numbers assume the solvent/cell background has been subtracted.
_NEED_SUBTRACTED = ("guinier", "invariant", "kratky_summary", "distance_distribution")
NO_SUBTRACTION = ("no background subtraction recorded since the files were read: {op} assumes a "
                  "subtracted curve; unless the files were subtracted before, run "
                  "ds.saxs.subtract(background) first (a background left in biases Rg and I0 high)")

_MAIN = {
    "guinier": ("rg", "rc", "rt", "radius", "length", "thickness", "i0", "qrg_max", "chi2_reduced"),
    "porod": ("porod_constant", "background", "exponent", "chi2_reduced"),
    "invariant": ("invariant", "porod_volume", "surface_to_volume", "specific_surface"),
    "kratky_summary": ("peak_qrg", "peak_height", "level_high"),
    "find_peaks": ("n_peaks",),
    "index_phases": ("lattice",),
}


def _is_series(ds) -> bool:
    return "intensity" in ds.data_vars and "q" in ds.dims


def _main_vars(ds) -> list[str]:
    op = str(ds.attrs.get("operation", ""))
    names = _MAIN.get(op)
    if names is None:
        var = ds.variables
        names = [k for k in ds.data_vars
                 if var[k].dims == ("frame",) and var[k].dtype.kind == "f" and not k.endswith("_sigma")]
    return [n for n in names if n in ds.data_vars]


def _stats(values) -> dict:
    v = np.asarray(values, dtype=float).ravel()
    v = v[np.isfinite(v)]
    if v.size == 0:
        return {"n": 0, "median": None, "min": None, "max": None}
    return {"n": int(v.size), "median": float(np.median(v)), "min": float(v.min()), "max": float(v.max())}


def report_summary(ds) -> dict[str, Any]:
    """A JSON-safe summary of a series or a result Dataset.

    Examples
    --------
    >>> import numpy as np, saxsnb
    >>> q = np.linspace(0.02, 1.0, 100)
    >>> I = np.exp(-np.outer([2.0, 3.0], q) ** 2 / 3)
    >>> res = saxsnb.from_arrays(q, I, 0.01 * I, sample="demo").saxs.guinier()
    >>> s = report_summary(res)
    >>> s["operation"], s["status"], round(s["values"]["rg"]["median"], 3), s["sample"]
    ('guinier', {'ok': 2}, 2.5, 'demo')
    """
    out: dict[str, Any] = {"frames": int(ds.sizes.get("frame", 0))}
    if "sample" in ds.attrs:
        out["sample"] = str(ds.attrs["sample"])
    history = [json.loads(h) for h in ds.attrs.get("history", []) if isinstance(h, str)]
    out["steps"] = [h.get("operation") for h in history]
    if _is_series(ds):
        out["operation"] = "series"
        out["q"] = {"min": float(ds["q"].min()), "max": float(ds["q"].max()),
                    "units": ds["q"].attrs.get("units", "")}
        out["intensity_units"] = ds["intensity"].attrs.get("units", "")
        return to_json_safe(out)
    op = str(ds.attrs.get("operation", ""))
    out["operation"] = op
    out["parameters"] = json.loads(ds.attrs.get("parameters", "{}"))
    if "status" in ds.data_vars:
        codes, counts = np.unique(np.asarray(ds["status"].values).astype(str), return_counts=True)
        out["status"] = {str(c): int(n) for c, n in zip(codes, counts)}
    out["values"] = {}
    for name in _main_vars(ds):
        st = _stats(ds[name].values)
        st["units"] = ds[name].attrs.get("units", "")
        if f"{name}_sigma" in ds.data_vars:
            st["median_sigma"] = _stats(ds[f"{name}_sigma"].values)["median"]
        out["values"][name] = st
    if op in ASSUMPTIONS:
        out["assumptions"] = ASSUMPTIONS[op]
    steps = [str(x) for x in out["steps"]]
    if op in _NEED_SUBTRACTED and steps and steps[0].startswith("read") and "subtract" not in steps:
        out["cautions"] = [NO_SUBTRACTION.format(op=op)]
    return to_json_safe(out)


def _fmt(v, unit="", sigma=None) -> str:
    """``display.text.format_value`` (the one number formatter), ASCII "+-"."""
    if v is None or not np.isfinite(v):
        return "n/a"
    return format_value(v, sigma, unit if unit != "1" else "", pm=" +- ")  # "1": dimensionless


def frame_lines(ds, index: int) -> list[str]:
    """The lines a panel shows for frame position ``index`` of a result.

    >>> import numpy as np, saxsnb
    >>> q = np.linspace(0.02, 1.0, 100)
    >>> res = saxsnb.from_arrays(q, np.exp(-(2 * q) ** 2 / 3), np.full(100, 0.01)).saxs.guinier()
    >>> frame_lines(res, 0)[:2]
    ['status: ok', 'rg = 2.000 +- 0.017 nm']
    """
    lines = []
    var = ds.variables  # Variables, not DataArrays: this runs at every frame step of a panel
    if "status" in ds.data_vars:
        code = str(np.asarray(var["status"].values)[index])
        lines.append(f"status: {code}" if code == "ok" else f"status: {code} ({status_message(code)})")
    for name in _main_vars(ds):
        v = var[name]
        if v.dims != ("frame",):
            continue
        sig = var[f"{name}_sigma"].values[index] if f"{name}_sigma" in ds.data_vars else None
        lines.append(f"{name} = {_fmt(float(v.values[index]), v.attrs.get('units', ''), sig)}")
    return lines


def report_text(ds, *, frame: int | None = None) -> str:
    """A short text report of a series or a result (one frame with ``frame=``).

    >>> import numpy as np, saxsnb
    >>> q = np.linspace(0.02, 1.0, 100)
    >>> res = saxsnb.from_arrays(q, np.exp(-(2 * q) ** 2 / 3), np.full(100, 0.01)).saxs.guinier()
    >>> print(report_text(res).splitlines()[0])
    guinier of 1 frame(s): ok 1
    """
    s = report_summary(ds)
    if s["operation"] == "series":
        lines = [f"SAXS series: {s['frames']} frames, q {s['q']['min']:.4g}..{s['q']['max']:.4g} "
                 f"{s['q']['units']}, intensity in {s['intensity_units'] or 'arb'}"]
    else:
        counts = ", ".join(f"{k} {v}" for k, v in s.get("status", {}).items())
        lines = [f"{s['operation']} of {s['frames']} frame(s)" + (f": {counts}" if counts else "")]
        if frame is not None:
            lines += ["  " + line for line in frame_lines(ds, frame)]
        else:
            for name, st in s["values"].items():
                if st["n"]:
                    sig = f", typical sigma {st['median_sigma']:.2g}" if st.get("median_sigma") else ""
                    unit = "" if st["units"] in ("", "1") else f" {st['units']}"
                    lines.append(f"  {name}: median {st['median']:.4g}{unit} "
                                 f"(range {st['min']:.4g}..{st['max']:.4g}{sig}) over {st['n']} frames")
        for code in s.get("status", {}):
            if code != "ok":
                lines.append(f"  {code}: {status_message(code)}")
        if s["operation"] == "phase_map" and "transitions" in ds.attrs:
            res = {k: json.loads(ds.attrs[k]) for k in ("transitions", "coexistence", "bonnet")}
            lines += ["  " + t for t in phase_map_report(res, scan=ds.attrs.get("scan", "scan"),
                                                       units=ds.attrs.get("scan_units", "")).splitlines()]
        if s.get("parameters"):
            lines.append(f"  parameters: {json.dumps(s['parameters'], sort_keys=True)}")
        if s.get("assumptions"):
            lines.append(f"  assumes: {s['assumptions']}")
        lines += [f"  caution: {c}" for c in s.get("cautions", [])]
    if "sample" in s:
        lines.append(f"  sample: {s['sample']}")
    if s["steps"]:
        lines.append(f"  history: {' -> '.join(str(x) for x in s['steps'])}")
    return "\n".join(lines)


def report_html(ds, *, frame: int | None = None) -> str:
    """:func:`report_text` as HTML (first line bold, the rest a list)."""
    lines = report_text(ds, frame=frame).splitlines()
    items = "".join(f"<li>{html.escape(line.strip())}</li>" for line in lines[1:])
    return f"<div><b>{html.escape(lines[0])}</b><ul>{items}</ul></div>"
