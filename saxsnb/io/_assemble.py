"""Turn parsed curves (one per file or per entry) into one series Dataset.

Shared by the text, canSAS XML and NXcanSAS readers: q-unit resolution, grid checks
and explicit regridding, masking of unusable points, per-frame metadata from headers
and file names, sorting by the scan coordinate.
"""

from __future__ import annotations

import re
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import xarray as xr

from ..errors import SaxsFileError, SaxsInputError, SaxsWarning
from ..series import SCAN_UNITS, add_history, estimate_sigma, from_arrays, normalize_q_unit, q_unit_factor

__all__ = ["Curve", "build_series", "parse_header_value", "REGRID_STRATEGIES"]

REGRID_STRATEGIES = ("first", "log")
_RESERVED = {"q", "frame", "intensity", "sigma", "mask", "dq"}
_NUMBER = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*?)\s*$")
_UNIT = re.compile(r"^[\[(]?\s*([A-Za-z°µ%/][^\s\[\]()=:]*(?: ?[A-Za-z°µ%/^\-\d]+)?)\s*[\])]?$")


@dataclass
class Curve:
    """One curve as read from a file, before it joins a series.

    ``q``, ``intensity``, ``sigma`` and ``dq`` are 1-D arrays in the file's units;
    ``lines`` are the 1-based line numbers of the rows (for error messages).
    """

    name: str
    q: np.ndarray
    intensity: np.ndarray
    sigma: np.ndarray | None = None
    dq: np.ndarray | None = None
    q_unit: str | None = None
    intensity_unit: str | None = None
    meta: dict[str, str] = field(default_factory=dict)
    units: dict[str, str] = field(default_factory=dict)
    attrs: dict[str, Any] = field(default_factory=dict)
    lines: np.ndarray | None = None
    path: str | None = None
    mask: np.ndarray | None = None
    attr_lines: dict[str, int] = field(default_factory=dict)

    def where(self, row: int | None = None) -> dict[str, Any]:
        line = None
        if row is not None and self.lines is not None:
            line = int(self.lines[row])
        return {"path": self.path or self.name, "line": line}


def parse_header_value(value: str) -> tuple[float | None, str | None]:
    """Split ``"20.5 degC"`` into ``(20.5, "degC")``; non-numbers give ``(None, None)``.

    >>> parse_header_value("20.5 degC")
    (20.5, 'degC')
    >>> parse_header_value("-3e2")
    (-300.0, None)
    >>> parse_header_value("2024-01-05")
    (None, None)
    """
    m = _NUMBER.match(value)
    if not m:
        return None, None
    rest = m.group(2)
    if not rest:
        return float(m.group(1)), None
    u = _UNIT.match(rest)
    if not u:
        return None, None
    return float(m.group(1)), u.group(1)


def _normalized(c: Curve) -> str:
    try:
        return normalize_q_unit(c.q_unit)
    except SaxsInputError:
        raise SaxsFileError(
            f"unknown q unit {c.q_unit!r}; use one of '1/nm', '1/A' or '1/m'", path=c.path or c.name
        ) from None


def _resolve_q_unit(curves: Sequence[Curve], q_unit: str | None) -> str:
    known: dict[str, str] = {}  # each spelling normalised once (the first file with it named)

    def normalized(c: Curve) -> str:
        if c.q_unit not in known:
            known[c.q_unit] = _normalized(c)
        return known[c.q_unit]

    declared = [(c, normalized(c)) for c in curves if c.q_unit]
    if declared:
        first_c, first_u = declared[0]
        for c, u in declared[1:]:
            if u != first_u:
                raise SaxsFileError(
                    f"declares q in {u} but {first_c.name} declares {first_u}; a series "
                    "needs one q unit (convert the files first)",
                    path=c.path or c.name,
                )
        if len(declared) != len(curves) and q_unit is None:
            missing = next(c for c in curves if not c.q_unit)
            raise SaxsFileError(
                f"does not state its q unit while {first_c.name} does ({first_u}); pass "
                "q_unit= or add a 'q_unit = ...' header line",
                path=missing.path or missing.name,
            )
        if q_unit is not None and len(declared) != len(curves) and normalize_q_unit(q_unit) != first_u:
            raise SaxsInputError(
                f"q_unit={q_unit!r} disagrees with {first_u!r} declared in {first_c.name}",
                parameter="q_unit",
            )
        return first_u
    if q_unit is None:
        raise SaxsInputError(
            f"the files do not say which unit q is in (first file: {curves[0].name}); pass "
            "q_unit='1/nm' or q_unit='1/A'",
            parameter="q_unit",
        )
    return normalize_q_unit(q_unit)


def _part(c: Curve) -> str:
    """``"<entry name>: "`` when a curve is one part of a file, else ``""``."""
    base = (c.path or c.name).replace("\\", "/").rsplit("/", 1)[-1]
    return "" if c.name == base else f"{c.name}: "


def _check_q(c: Curve) -> Curve:
    q = c.q
    bad = ~np.isfinite(q)
    if bad.any():
        raise SaxsFileError("q is not a finite number", **c.where(int(np.argmax(bad))))
    bad = q <= 0
    if bad.any():
        raise SaxsFileError("q must be > 0", **c.where(int(np.argmax(bad))))
    d = np.diff(q)
    if np.all(d > 0):
        return c
    order = np.argsort(q, kind="stable")
    qs = q[order]
    dup = np.flatnonzero(np.diff(qs) == 0)
    if dup.size:
        row = int(order[dup[0] + 1])
        raise SaxsFileError(f"duplicate q value {q[row]!r}", **c.where(row))
    warnings.warn(
        f"{c.name}: q was not in increasing order; the rows were sorted by q",
        SaxsWarning,
        stacklevel=4,
    )

    def take(a):
        return None if a is None else a[order]

    return Curve(
        c.name,
        q[order],
        c.intensity[order],
        take(c.sigma),
        take(c.dq),
        c.q_unit,
        c.intensity_unit,
        c.meta,
        c.units,
        c.attrs,
        take(c.lines),
        c.path,
    )


def _intensity_unit(curves: Sequence[Curve]) -> str:
    """The one intensity unit the curves state ("arb" when none does); a file that states
    another one than the first is refused by name."""
    iu = [(c, c.intensity_unit) for c in curves if c.intensity_unit]
    for c, u in iu[1:]:
        if u != iu[0][1]:
            raise SaxsFileError(
                f"gives intensity in {u!r} but {iu[0][0].name} uses {iu[0][1]!r}", path=c.path or c.name
            )
    return iu[0][1] if iu else "arb"


def _same_grid(qa: np.ndarray, qb: np.ndarray) -> bool:
    return qa.shape == qb.shape and bool(np.allclose(qa, qb, rtol=1e-9, atol=0.0))


def _stack(curves, attr, n_q, fill=np.nan):
    values = [getattr(c, attr) for c in curves]
    if all(v is not None for v in values):  # the usual case: one copy
        return np.stack(values)
    out = np.full((len(curves), n_q), fill)
    for i, c in enumerate(curves):
        v = getattr(c, attr)
        if v is not None:
            out[i] = v
    return out


def _regrid(curves: list[Curve], strategy: str):
    if strategy == "first":
        grid = curves[0].q
        desc = {"strategy": "first", "reference": curves[0].name}
    else:
        lo = max(float(c.q[0]) for c in curves)
        hi = min(float(c.q[-1]) for c in curves)
        if not lo < hi:
            raise SaxsInputError(
                "the files' q ranges do not overlap, so no common log grid exists",
                parameter="regrid",
            )
        n = max(c.q.size for c in curves)
        grid = np.geomspace(lo, hi, n)
        desc = {"strategy": "log", "q_min": lo, "q_max": hi}
    n_q = grid.size
    I = np.full((len(curves), n_q), np.nan)
    S = np.full_like(I, np.nan)
    D = np.full_like(I, np.nan)
    for i, c in enumerate(curves):
        if _same_grid(c.q, grid):
            I[i] = c.intensity
            if c.sigma is not None:
                S[i] = c.sigma
            if c.dq is not None:
                D[i] = c.dq
            continue
        I[i] = np.interp(grid, c.q, c.intensity, left=np.nan, right=np.nan)
        if c.sigma is not None:
            S[i] = np.interp(grid, c.q, c.sigma, left=np.nan, right=np.nan)
        if c.dq is not None:
            D[i] = np.interp(grid, c.q, c.dq, left=np.nan, right=np.nan)
    desc["n_points"] = int(n_q)
    desc["note"] = "linear interpolation of intensity and sigma; points outside a file's range masked"
    return grid, I, S, D, desc


def _coordinates(curves: list[Curve], pattern: str | None) -> tuple[dict, dict]:
    """Per-frame coordinates (name -> (values, units)) and constant string attrs."""
    keys: list[str] = []
    seen: set[str] = set()
    for c in curves:
        for k in c.meta:
            if k not in seen:
                seen.add(k)
                keys.append(k)
    regex = None
    if pattern is not None:
        try:
            regex = re.compile(pattern)
        except re.error as exc:
            raise SaxsInputError(
                f"pattern is not a valid regular expression: {exc}", parameter="pattern"
            ) from None
        if not regex.groupindex:
            raise SaxsInputError(
                "pattern needs named groups, e.g. r'T(?P<temperature>[-\\d.]+)C'", parameter="pattern"
            )
        for c in curves:
            base = c.name.replace("\\", "/").rsplit("/", 1)[-1]
            m = regex.search(base)
            if m is None:
                raise SaxsFileError(
                    f"the file name does not match pattern {pattern!r}", path=c.path or c.name
                )
            for k, v in m.groupdict().items():
                c.meta[k] = "" if v is None else v
        for k in regex.groupindex:
            if k not in seen:
                seen.add(k)
                keys.append(k)
    coords: dict[str, tuple[np.ndarray, str]] = {}
    attrs: dict[str, Any] = {}
    for key in keys:
        raw = [c.meta.get(key) for c in curves]
        parsed = [parse_header_value(v) if v not in (None, "") else (None, None) for v in raw]
        numeric = all(p[0] is not None for p, v in zip(parsed, raw) if v not in (None, ""))
        present = [v not in (None, "") for v in raw]
        name = f"meta_{key}" if key in _RESERVED else key
        if numeric and any(present):
            values = np.array([np.nan if p[0] is None else p[0] for p in parsed], dtype=np.float64)
            unit = None
            unit_from = None
            for c, p in zip(curves, parsed):
                u = c.units.get(key) or p[1]
                if u is None:
                    continue
                if unit is None:
                    unit, unit_from = u, c.name
                elif u != unit:
                    raise SaxsFileError(
                        f"gives {key!r} in {u!r} but {unit_from} uses {unit!r}",
                        path=c.path or c.name,
                    )
            coords[name] = (values, unit if unit is not None else SCAN_UNITS.get(key, ""))
        elif all(present) and len(set(raw)) == 1:
            attrs[name] = raw[0]
        else:
            vals = np.array(["" if v is None else v for v in raw], dtype=object).astype(str)
            coords[name] = (vals, "")
    return coords, attrs


def _check_attr(c: Curve, key: str, value: Any) -> None:
    """Attrs with a meaning to saxsnb must have the type it needs."""
    line = getattr(c, "attr_lines", {}).get(key)
    where = {"path": c.path or c.name, "line": line}
    if key == "history" and not (isinstance(value, list) and all(isinstance(v, str) for v in value)):
        raise SaxsFileError("attr.history must be a list of strings", **where)
    if key == "scan" and not isinstance(value, str):
        raise SaxsFileError("attr.scan must be a string (the name of the scan coordinate)", **where)
    if key == "sigma_estimated" and value not in (0, 1):
        raise SaxsFileError("attr.sigma_estimated must be 0 or 1", **where)


def series_metadata(curves: Sequence[Curve], scan: str | None, pattern: str | None, attrs: dict):
    """Per-frame coordinates, attrs, history and frame order (by ``scan``, else None)
    of a series of curves: the part of :func:`build_series` that needs no arrays."""
    coords, const_attrs = _coordinates(curves, pattern)
    names = [c.name for c in curves]
    order = None
    if scan is not None:
        if scan not in coords:
            available = sorted(coords) or ["(none: the headers and file names gave no values)"]
            raise SaxsInputError(
                f"unknown scan coordinate {scan!r}; available: {', '.join(available)}", parameter="scan"
            )
        values = coords[scan][0]
        missing = (
            np.flatnonzero(values == "") if values.dtype.kind in "US" else np.flatnonzero(np.isnan(values))
        )
        if missing.size:
            c = curves[int(missing[0])]
            raise SaxsFileError(f"has no value for the scan coordinate {scan!r}", path=c.path or c.name)
        order = np.argsort(values, kind="stable")
    extra_attrs: dict[str, Any] = {}
    for c in curves:
        for k, v in c.attrs.items():
            _check_attr(c, k, v)
            extra_attrs.setdefault(k, v)
    attrs = {**extra_attrs, **const_attrs, **attrs}
    if order is not None:
        coords = {k: (v[order], u) for k, (v, u) in coords.items()}
        names = [names[i] for i in order]
        attrs["scan"] = scan
    attrs["source_files"] = names
    history = list(attrs.pop("history", []) or [])
    return coords, attrs, history, order


def build_series(
    curves: Sequence[Curve],
    *,
    scan: str | None = None,
    pattern: str | None = None,
    q_unit: str | None = None,
    regrid: str | None = None,
    origin: str = "read_series",
) -> xr.Dataset:
    """Assemble curves into one series (see :func:`saxsnb.io.read_series`)."""
    curves = list(curves)
    if not curves:
        raise SaxsInputError("no curves to assemble")
    if regrid is not None and regrid not in REGRID_STRATEGIES:
        raise SaxsInputError(
            f"unknown regrid strategy {regrid!r}; use one of {REGRID_STRATEGIES} or None",
            parameter="regrid",
        )
    unit = _resolve_q_unit(curves, q_unit)
    Q = None
    exact = False
    if len({c.q.size for c in curves}) == 1:
        # the common case, checked for all files at once; the loop only names the culprit
        Q = np.stack([c.q for c in curves])
        q0 = curves[0].q
        with np.errstate(invalid="ignore"):
            # one grid for all (the usual case): checking it once checks them all
            exact = bool((Q[1:] == q0).all())
            rows = Q[:1] if exact else Q
            fine = bool(np.isfinite(rows).all() and (rows > 0).all() and (np.diff(rows, axis=1) > 0).all())
    else:
        fine = False
    if not fine:
        curves = [_check_q(c) for c in curves]
        Q = None
        exact = False
    intensity_unit = _intensity_unit(curves)

    q0 = curves[0].q
    lengths = {c.q.size for c in curves}
    same = False
    if len(lengths) == 1:
        if Q is None:
            Q = np.stack([c.q for c in curves])
        close = np.ones(len(curves), dtype=bool) if exact else (Q == q0).all(axis=1)
        if not close.all():
            close = np.isclose(Q, q0, rtol=1e-9, atol=0.0).all(axis=1)
        same = bool(close.all())
        first_bad = None if same else int(np.argmin(close))
    else:
        first_bad = next(i for i, c in enumerate(curves) if c.q.size != q0.size)
    regrid_desc = None
    if same:
        grid = q0
        I = np.stack([c.intensity for c in curves])
        S = _stack(curves, "sigma", q0.size)
        D = _stack(curves, "dq", q0.size) if any(c.dq is not None for c in curves) else None
    elif regrid is None:
        bad = curves[first_bad]
        raise SaxsInputError(
            f"{bad.path or bad.name}: {_part(bad)}its q grid ({bad.q.size} points, "
            f"{bad.q[0]:.6g}..{bad.q[-1]:.6g}) differs from that of {curves[0].name} ({q0.size} points, "
            f"{q0[0]:.6g}..{q0[-1]:.6g}); pass regrid='first' (interpolate onto the first file's grid) "
            "or regrid='log' (common log grid)",
            parameter="regrid",
        )
    else:
        grid, I, S, D, regrid_desc = _regrid(curves, regrid)
        if not any(c.dq is not None for c in curves):
            D = None

    no_sigma = np.array([c.sigma is None for c in curves])
    file_bad = ~np.isfinite(I)
    with np.errstate(invalid="ignore"):
        if no_sigma.any():
            file_bad[~no_sigma] |= ~((S[~no_sigma] > 0) & np.isfinite(S[~no_sigma]))
        else:
            file_bad |= ~((S > 0) & np.isfinite(S))
    mask = file_bad
    if any(c.mask is not None for c in curves):
        # masks stored in the source (NXcanSAS Mask): applied without a warning
        known = np.zeros(I.shape, dtype=bool)
        for i, c in enumerate(curves):
            if c.mask is not None:
                if same:
                    known[i] = c.mask
                else:
                    known[i] = np.interp(grid, c.q, c.mask.astype(float), left=0.0, right=0.0) > 0
        file_bad &= ~known
        mask = file_bad | known
    if regrid_desc is not None:
        # points outside a file's own q range are NaN by construction: masked, not warned
        outside = np.zeros_like(file_bad)
        for i, c in enumerate(curves):
            outside[i] = (grid < c.q[0] * (1 - 1e-12)) | (grid > c.q[-1] * (1 + 1e-12))
        file_bad &= ~outside
        mask = mask | outside
    if file_bad.any():
        rows = np.flatnonzero(file_bad.any(axis=1))
        shown = ", ".join(curves[int(i)].name for i in rows[:5])
        more = f" and {rows.size - 5} more" if rows.size > 5 else ""
        warnings.warn(
            f"{int(file_bad.sum())} points with non-finite intensity or sigma, or sigma <= 0, "
            f"were masked, in {rows.size} of {len(curves)} curves: {shown}{more}",
            SaxsWarning,
            stacklevel=3,
        )
    attrs: dict[str, Any] = {}
    if no_sigma.any():
        with np.errstate(invalid="ignore"):
            S[no_sigma] = estimate_sigma(I[no_sigma])
        attrs["sigma_estimated"] = 1

    coords, attrs, history, order = series_metadata(curves, scan, pattern, attrs)
    if order is not None:
        I, S, mask = I[order], S[order], mask[order]
        D = None if D is None else D[order]
    ds = from_arrays(
        grid,
        I,
        S,
        scan={k: (v, u) for k, (v, u) in coords.items()},
        q_unit=unit,
        intensity_unit=intensity_unit,
        mask=mask if mask.any() else None,
        history=history,
    )
    # set after from_arrays: attrs names may clash with its keywords (e.g. "scan")
    ds.attrs.update(attrs)
    if D is not None:
        ds["dq"] = (("frame", "q"), D * q_unit_factor(unit), {"units": "1/nm", "long_name": "q resolution"})
    if regrid_desc is not None:
        ds = add_history(ds, "regrid", **regrid_desc)
    return ds
