"""``ds.saxs.recipe()``: Python that rebuilds a series or a result from its files.

The code is written from the one history format (``attrs["history"]``): the read (or
the demo series), each preparation step with its parameters, the background's own
history inside a subtraction, and the analysis steps. Every value enters the code as a
Python literal (``repr``), never as raw text from a file or its metadata.
"""

from __future__ import annotations

import inspect
import json
import keyword

from ..errors import SaxsInputError
from ._core import AccessorBase

__all__ = ["RecipeMethods"]

#: History steps that happen inside ``read_series`` (not written as calls of their own).
_INSIDE_READ = ("convert_q_unit", "regrid", "estimate_sigma")
#: Parameters recorded for the reader's benefit only (not arguments of the call).
_RECORD_ONLY = {"background_frames", "background_sample", "background_history", "rod_length",
                "guinier", "porod"}
#: Steps whose result feeds the next step as a keyword: step -> (variable, keyword).
_FEEDS = {"find_peaks": ("peaks", "peaks"), "guinier": ("guinier_fit", "guinier")}


def _identifier(name: str) -> str:
    if not name.isidentifier() or keyword.iskeyword(name):
        raise SaxsInputError(f"{name!r} is not a Python variable name", parameter="name")
    return name


def _arguments(method: str, params: dict) -> str:
    """``k=repr(v), ...`` for the parameters the accessor method takes."""
    from . import SaxsAccessor

    func = getattr(SaxsAccessor, method, None)
    if func is None:
        raise SaxsInputError(f"the step {method!r} has no ds.saxs method; no recipe", parameter="history")
    sig = inspect.signature(func)
    out = []
    for k, v in sorted(params.items()):
        if k in _RECORD_ONLY or k not in sig.parameters:
            continue
        if v in ("per-frame", "given"):
            raise SaxsInputError(f"step {method!r} was given per-frame values for {k!r}, which the history "
                                 "does not hold; pass them again by hand", parameter="history")
        out.append(f"{k}={v!r}")
    return ", ".join(out)


def _series_lines(history: list[dict], name: str, depth: int = 0) -> list[str]:
    """Lines that rebuild the series described by ``history`` into variable ``name``."""
    starts = [k for k, h in enumerate(history)
              if h.get("operation") in ("read_series", "read_images", "demo.make_series")]
    history = history[starts[-1]:] if starts else history
    if not history:
        raise SaxsInputError("this Dataset has no history to start from (read it with saxsnb.read_series "
                             "or saxsnb.read_images, or make it with saxsnb.demo.make_series)",
                             parameter="history")
    first, rest = history[0], history[1:]
    p = dict(first.get("parameters", {}))
    op = first.get("operation")
    if op == "read_series":
        src = p.pop("source")
        args = "".join(f", {k}={v!r}" for k, v in sorted(p.items()))
        lines = [f"{name} = saxsnb.read_series({src!r}{args})"]
    elif op == "read_images":
        if p.get("given"):
            raise SaxsInputError(f"read_images was given {', '.join(p['given'])} as arrays; they are not in "
                                 "the history, so no recipe can be written", parameter="history")
        src = p.pop("source")
        args = "".join(f", {k}={v!r}" for k, v in sorted(p.items()))
        lines = [f"{name} = saxsnb.read_images({src!r}{args})"]
    elif op == "demo.make_series":
        part = 1 if p.get("part") == "background" else 0
        lines = [f"{name} = saxsnb.demo.make_series({p['name']!r}, seed={int(p.get('seed', 0))!r})[{part}]"]
    else:
        raise SaxsInputError(f"the history starts with {op!r}, not with a read; no recipe",
                             parameter="history")
    for step in rest:
        op, p = step.get("operation"), dict(step.get("parameters", {}))
        if op in _INSIDE_READ:
            continue
        if op == "subtract":
            bg = f"background{depth + 1}" if depth else "background"
            bh = [json.loads(h) for h in p.get("background_history", [])]
            lines += _series_lines(bh, bg, depth + 1)
            args = _arguments("subtract", p)
            lines.append(f"{name} = {name}.saxs.subtract({bg}{', ' + args if args else ''})")
        else:
            lines.append(f"{name} = {name}.saxs.{op}({_arguments(op, p)})")
    return lines


class RecipeMethods(AccessorBase):
    """Code that rebuilds a series or a result."""

    def recipe(self, name: str = "ds", *, result: str = "result") -> str:
        """Python that starts from the files and rebuilds this series or result.

        Parameters
        ----------
        name : str
            Variable of the series in the code (use your own, e.g. ``"ramp"``).
        result : str
            Variable the final result is assigned to (for a result Dataset).

        Returns
        -------
        str: code beginning with ``import saxsnb``; run in a fresh namespace it gives a
        Dataset identical to this one (``xarray.testing.assert_identical``) as long as
        the files are unchanged. Steps given per-frame arrays cannot be written from the
        history and raise :class:`~saxsnb.errors.SaxsInputError`.

        Examples
        --------
        >>> import saxsnb, xarray as xr
        >>> ds, bg = saxsnb.demo.make_series("unfolding", seed=1)
        >>> res = ds.saxs.subtract(bg).saxs.guinier(q_range=(0.1, 0.4))
        >>> code = res.saxs.recipe("protein")
        >>> for line in code.splitlines()[:4]:
        ...     print(line)
        import saxsnb
        protein = saxsnb.demo.make_series('unfolding', seed=1)[0]
        background = saxsnb.demo.make_series('unfolding', seed=1)[1]
        protein = protein.saxs.subtract(background, scale=1.0)
        >>> print(code.splitlines()[4][:39])
        result = protein.saxs.guinier(errors=...
        >>> ns = {}
        >>> exec(code, ns)
        >>> xr.testing.assert_identical(ns["result"], res)
        """
        name, result = _identifier(name), _identifier(result)
        history = [json.loads(h) for h in self._ds.attrs.get("history", [])]
        from_images = sorted({h.get("operation") for h in history} & set(_IMAGE_STEPS))
        if from_images:
            # their geometry and mask are recorded as a summary, not as arguments to replay
            raise SaxsInputError(f"no recipe for the image steps {from_images} yet: rebuild the curves "
                                 "from the images with the same geometry and mask", parameter="history")
        cut = len(history)
        while cut and history[cut - 1].get("operation") not in _SERIES_STEPS and "intensity" not in self._ds:
            cut -= 1
        lines = ["import saxsnb", *_series_lines(history[:cut], name)]
        tail = history[cut:]
        fed: dict[str, str] = {}
        for k, step in enumerate(tail):
            op, p = step.get("operation"), dict(step.get("parameters", {}))
            args = _arguments(op, p)
            for var, kw in fed.items():
                args = f"{kw}={var}" + (", " + args if args else "")
            last = k == len(tail) - 1
            target = result if last else _FEEDS.get(op, (op, None))[0]
            lines.append(f"{target} = {name}.saxs.{op}({args})")
            fed = {} if last or op not in _FEEDS else {_FEEDS[op][0]: _FEEDS[op][1]}
        return "\n".join(lines) + "\n"


#: Steps on detector images (:mod:`saxsnb.accessor.images`), which recipes do not replay.
_IMAGE_STEPS = ("integrate", "cake", "azimuthal_profile", "orientation")

#: Steps that return a series (everything else returns a result).
_SERIES_STEPS = ("read_series", "read_images", "demo.make_series",
                 "subtract", "to_q_unit", "rescale_q", "rebin", "average",
                 "absolute_scale", "per_concentration", "extrapolate_concentration", *_INSIDE_READ)
