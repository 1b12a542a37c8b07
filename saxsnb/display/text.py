"""Text for people: status messages, indexing summaries and result reports.

The codes and their messages come from the one status table
(:data:`saxsnb.analysis._status.STATUS`); the analysis layer never formats text.
"""

from __future__ import annotations

import numpy as np

from ..analysis._status import INDEXED, STATUS

__all__ = ["status_message", "describe_status", "indexing_summary", "phase_map_report"]


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
    >>> cav = {"n_frames": 2, "close": {"Fm3m": 1}, "few_peaks": 1}
    >>> for line in phase_map_report(phase_map(ph, np.array([20.0, 21.0])), caveats=cav).splitlines()[-2:]:
    ...     print(line)
    Caveat: close alternative explanations in 1 of 2 frames (Fm3m): the label there is not certain.
    Caveat: 1 of 2 frames are labelled from three peaks or fewer (the assignment rests on few ratios).
    """
    u = f" {units}" if units else ""

    def fmt(v, between):
        if v is None:
            return None
        return f"{v:.4g}{u} (between {between[0]:.4g} and {between[1]:.4g})"

    lines = [f"Phase map along {scan}:"]
    for t in result["transitions"]:
        a = fmt(t["appears"], t["appears_between"])
        v = fmt(t["vanishes"], t["vanishes_between"])
        lines.append(
            f"  {t['phase']}: "
            + ("from the start" if a is None else f"from {a}")
            + (" to the end" if v is None else f" to {v}")
        )
    if result["coexistence"]:
        for c in result["coexistence"]:
            s = "the start" if c["start"] is None else f"{c['start']:.4g}{u}"
            e = "the end" if c["end"] is None else f"{c['end']:.4g}{u}"
            lines.append(f"  coexistence {' + '.join(c['phases'])}: {s} to {e}")
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
