"""Text for people: status messages, indexing summaries and result reports.

The codes and their messages come from the one status table
(:data:`saxsnb.analysis._status.STATUS`); the analysis layer never formats text.
"""

from __future__ import annotations

import numpy as np

from ..analysis._status import INDEXED, STATUS

__all__ = ["status_message", "describe_status", "indexing_summary", "phase_map_report", "format_value",
           "pretty_unit", "pretty_label"]

#: Most decimals shown in fixed notation (beyond, a relative uncertainty is shown).
_MAX_DECIMALS = 6


def _sci(v: float, digits: int) -> str:
    m, e = f"{v:.{digits - 1}e}".split("e")
    m = m.rstrip("0").rstrip(".") if "." in m else m
    return f"{m}e{int(e)}"


def format_value(value, sigma=None, unit: str = "", *, digits: int = 4, pm: str = " ± ") -> str:
    """A number, or a number with its uncertainty, with sensible significant figures.

    The one number formatter of the panels and reports. Alone, a value keeps
    ``digits`` significant figures (scientific notation below 1e-3 or from 1e5). With
    an uncertainty, sigma keeps two significant figures and the value is rounded to
    the same decimal place (common practice), in a shared power of ten when the
    numbers are very small or large; a sigma far below the last digit that matters is
    given as a relative uncertainty instead of a long tail of digits.

    Examples
    --------
    >>> format_value(5.0, 3.3e-05)
    '5.000000 ± 0.000033'
    >>> format_value(2.0, 3e-9)
    '2.0000 (± 1.5e-7 %)'
    >>> format_value(27.71234, 0.4321, "nm")
    '27.71 ± 0.43 nm'
    >>> format_value(1.234e-6, 4.1e-8, "cm⁻¹")
    '(1.234 ± 0.041)e-6 cm⁻¹'
    >>> format_value(0.000012345), format_value(12345.678), format_value(float("nan"), 1.0)
    ('1.235e-5', '1.235e4', 'n/a')
    >>> format_value(3.0, float("nan"), "M"), format_value(12, 0)
    ('3 M', '12')
    """
    u = f" {unit}" if unit else ""
    try:
        v = float(value)
    except (TypeError, ValueError):
        return f"{value}{u}"
    if not np.isfinite(v):
        return "n/a"
    s = None if sigma is None else float(sigma)
    if s is None or not np.isfinite(s) or s <= 0:
        a = abs(v)
        if a != 0 and (a < 1e-3 or a >= 1e5):
            return _sci(v, digits) + u
        text = f"{v:.{digits}g}"
        return text + u
    e_s = int(np.floor(np.log10(s)))
    a = abs(v)
    e_v = int(np.floor(np.log10(a))) if a > 0 else e_s
    if a != 0 and (a < 1e-3 or a >= 1e5) and e_v >= e_s:
        # a shared power of ten: (m ± sm)e<k>
        scale = 10.0**e_v
        dec = max(0, 1 - (e_s - e_v))
        if dec <= _MAX_DECIMALS:
            return f"({v / scale:.{dec}f}{pm}{s / scale:.{dec}f})e{e_v}{u}"
    dec = max(0, 1 - e_s)
    if dec > _MAX_DECIMALS and a > 0:
        return f"{v:.{digits}f}{u} ({pm.strip()} {_sci(100 * s / a, 2)} %)"
    return f"{v:.{dec}f}{pm}{s:.{dec}f}{u}"


_SUPERSCRIPT = str.maketrans("0123456789-+", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻⁺")


def pretty_unit(unit: str) -> str:
    """A unit in print form: ``"1/nm"`` -> ``"nm⁻¹"``, ``"degC"`` -> ``"°C"``,
    ``"(1/nm)^2"`` -> ``"nm⁻²"``, ``"1/cm nm^-4"`` -> ``"cm⁻¹ nm⁻⁴"``.

    >>> [pretty_unit(u) for u in ("1/nm", "(1/nm)^2", "degC", "1/cm nm^-4", "arb", "nm^2")]
    ['nm⁻¹', 'nm⁻²', '°C', 'cm⁻¹ nm⁻⁴', 'arb', 'nm²']
    """
    import re

    u = str(unit)
    u = re.sub(r"\(1/([A-Za-z\u00c5]+)\)\^(\d+)", lambda m: f"{m.group(1)}^-{m.group(2)}", u)
    u = re.sub(r"\b1/([A-Za-z\u00c5]+)(\^(\d+))?", lambda m: f"{m.group(1)}^-{m.group(3) or 1}", u)
    u = re.sub(r"\bdeg ?C\b", "\u00b0C", u)
    u = re.sub(r"\^(-?\d+)", lambda m: m.group(1).translate(_SUPERSCRIPT), u)
    return u


def pretty_label(label: str) -> str:
    """An axis label in print form: powers as superscripts (``q^2`` -> ``q²``), units
    through :func:`pretty_unit`, ``sqrt`` as ``√``, ``log10`` as ``log₁₀``.

    >>> pretty_label("q^2 (1/nm)^2"), pretty_label("temperature (degC)")
    ('q² (nm⁻²)', 'temperature (°C)')
    >>> pretty_label("q^2 I (1/cm 1/nm^2)"), pretty_label("(q Rg)^2 I / I0")
    ('q² I (cm⁻¹ nm⁻²)', '(q Rg)² I / I₀')
    """
    import re

    # "(1/nm)^2" in a label is the unit in brackets: "(nm^-2)"
    text = re.sub(r"\(1/([A-Za-z\u00c5]+)\)\^(\d+)", lambda m: f"({m.group(1)}^-{m.group(2)})", str(label))
    text = pretty_unit(text)
    text = re.sub(r"\blog10\b", "log\u2081\u2080", text)
    text = re.sub(r"\bI0\b", "I\u2080", text)
    text = re.sub(r"\bsqrt\(", "\u221a(", text)
    return re.sub(r"\^(-?\d+)", lambda m: m.group(1).translate(_SUPERSCRIPT), text)


def status_message(code: str, *, size: str = "Rg", limit: float = 1.3) -> str:
    """Plain-language text of a ``status`` code (the code itself when unknown).

    >>> status_message("too_few_points")
    'too few usable points in the q range for this fit: widen the range'
    >>> status_message("qrg_limit_exceeded", size="Rc", limit=1.0)
    'q_max\u00b7Rc above the validity limit 1.0: the range is too long for a Guinier fit'
    >>> status_message("something_new")
    'something_new'
    """
    st = STATUS.get(str(code))
    return str(code) if st is None else st.message.format(size=size, limit=limit)


def describe_status(text: str, **context) -> str:
    """A panel's status line with a trailing status code replaced by its message.

    ``"position 2 mm (frame 1): too_few_points"`` becomes
    ``"position 2 mm (frame 1): too few usable points ..."``; other text (error
    messages) is returned unchanged. ``context`` goes to :func:`status_message`.

    >>> describe_status("frame 3: no_peaks")
    'frame 3: no Bragg peaks found in this frame'
    >>> describe_status("fit: SaxsInputError: bad q_range")
    'fit: SaxsInputError: bad q_range'
    """
    head, sep, tail = str(text).rpartition(": ")
    code = tail.strip()
    if code in STATUS and code != "ok":
        return f"{head}{sep}{status_message(code, **context)}"
    return str(text)


def indexing_summary(status) -> str:
    """One line on a series where no frame has a phase: "" when some frame has one.

    Parameters
    ----------
    status : array (n_frames,) of str
        The ``status`` of ``ds.saxs.index_phases`` (or with overrides applied).

    Returns
    -------
    str, e.g. ``"no frame could be indexed: no Bragg peaks found in this frame (3 of 4
    frames); ..."``, reasons by decreasing count.

    >>> for part in indexing_summary(np.array(["no_peaks", "no_peaks", "no_phase_found"])).split("; "):
    ...     print(part)
    no frame could be indexed: no Bragg peaks found (2 of 3 frames)
    the peaks fit none of the known phases (1 of 3 frames)
    >>> indexing_summary(np.array(["ok", "no_peaks"]))
    ''
    """
    st = np.asarray(status).astype(str).ravel()
    if st.size == 0 or np.isin(st, INDEXED).any():
        return ""
    codes, counts = np.unique(st, return_counts=True)
    order = np.argsort(-counts, kind="stable")
    parts = [
        f"{status_message(codes[k]).replace(' in this frame', '')} ({counts[k]} of {st.size} frames)"
        for k in order
    ]
    return "no frame could be indexed: " + "; ".join(parts)


def phase_map_report(result: dict, *, scan: str = "scan", units: str = "", step: float | None = None,
                     caveats: dict | None = None) -> str:
    """A short text report of :func:`phase_map` output.

    ``caveats`` (optional, as the ``caveats`` attribute of ``ds.saxs.phase_map()``):
    frames whose label has a close alternative explanation or rests on few peaks are
    said so after the map, with the alternatives (issue 15: no label without its doubts).

    >>> import numpy as np
    >>> from saxsnb.analysis import phase_map
    >>> ph = np.array([["lamellar"], ["hexagonal"]])
    >>> print(phase_map_report(phase_map(ph, np.array([20.0, 21.0])), scan="temperature", units="degC"))
    Phase map along temperature:
      lamellar: from the start to 20.5 degC (between 20 and 21)
      hexagonal: from 20.5 degC (between 20 and 21) to the end
    No coexistence window found.
    >>> cav = {"n_frames": 2, "close": {"Fm3m": 1}, "close_by_label": {"hexagonal": {"Fm3m": 1}},
    ...        "few_peaks": 1}
    >>> rep = phase_map_report(phase_map(ph, np.array([20.0, 21.0])), caveats=cav).splitlines()
    >>> print(rep[2])
      hexagonal: from 20.5 (between 20 and 21) to the end [close alternative in 1 frame(s): 1x Fm3m]
    >>> for line in rep[-2:]:
    ...     print(line)
    Caveat: close alternative explanations in 1 of 2 frames (Fm3m): the label there is not certain.
    Caveat: 1 of 2 frames are labelled from three peaks or fewer (the assignment rests on few ratios).
    """
    u = f" {units}" if units else ""

    def fmt(v, between):
        if v is None:
            return None
        return f"{v:.4g}{u} (between {between[0]:.4g} and {between[1]:.4g})"

    by_label = (caveats or {}).get("close_by_label", {})

    def doubts(phases):
        # the close alternatives of the frames given exactly this label, beside the label
        key = "+".join(sorted(phases))
        alts = by_label.get(key, {})
        if not alts:
            return ""
        n_alt = sum(alts.values())
        top = "; ".join(f"{c}x {a}" for a, c in sorted(alts.items(), key=lambda kv: -kv[1])[:3])
        return f" [close alternative in {n_alt} frame(s): {top}]"

    lines = [f"Phase map along {scan}:"]
    for t in result["transitions"]:
        a = fmt(t["appears"], t["appears_between"])
        v = fmt(t["vanishes"], t["vanishes_between"])
        lines.append(
            f"  {t['phase']}: "
            + ("from the start" if a is None else f"from {a}")
            + (" to the end" if v is None else f" to {v}")
            + doubts([t["phase"]])
        )
    if result["coexistence"]:
        for c in result["coexistence"]:
            s = "the start" if c["start"] is None else f"{c['start']:.4g}{u}"
            e = "the end" if c["end"] is None else f"{c['end']:.4g}{u}"
            lines.append(f"  coexistence {' + '.join(c['phases'])}: {s} to {e}" + doubts(c["phases"]))
    else:
        lines.append("No coexistence window found.")
    for b in result["bonnet"]:
        if b["ratio_mean"] is None:
            continue
        lines.append(
            f"  lattice ratio a({b['phases'][0]})/a({b['phases'][1]}) = {b['ratio_mean']:.4f} over "
            f"{b['n_frames']} frame(s); Bonnet value {b['expected']:.3f} "
            f"({100 * b['relative_deviation']:+.2f} %; "
            "Bonnet constants recalled from memory, indicative only)"
        )
    if step is not None:
        lines.append(f"Transitions are located to +-{step / 2:.3g}{u} (half a scan step).")
    cv = caveats or {}
    n = cv.get("n_frames", 0)
    close = cv.get("close", {})
    if close:
        order = sorted(close.items(), key=lambda kv: -kv[1])
        lines.append("Caveat: close alternative explanations in " + ", ".join(
            f"{c} of {n} frames ({a})" for a, c in order[:4]) + ": the label there is not certain.")
    if cv.get("few_peaks"):
        lines.append(f"Caveat: {cv['few_peaks']} of {n} frames are labelled from three peaks or fewer "
                     "(the assignment rests on few ratios).")
    return "\n".join(lines)
