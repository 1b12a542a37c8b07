"""Allowed reflections of the lyotropic mesophases, generated from reflection conditions.

The cubic sequences come from the general reflection conditions of International
Tables for Crystallography Vol. A (space groups 221-230), applied to every hkl and its
cubic equivalents; nothing is typed in by hand. Lamellar orders are 00l, the 2D
hexagonal (p6mm) reflections hk with s = h^2 + hk + k^2.
"""

from __future__ import annotations

import itertools
from functools import cache

import numpy as np

__all__ = ["PHASES", "allowed_reflections", "spacing_ratios", "q_positions", "hkl_labels"]

#: Phase names in the order saxsnb reports them.
PHASES = ("lamellar", "hexagonal", "Pn3m", "Im3m", "Ia3d", "Fd3m", "Pm3n", "Fm3m")

# Each cubic group: a function of a sorted, non-negative (h, k, l) pattern check.
# The conditions are those of ITA Vol. A; a class such as "0kl" applies to every
# permutation (cubic symmetry), and sign changes do not matter for m-3m groups.


def _classes(h: int, k: int, l: int):
    """Yield (class, a, b) for the zone classes the triple falls in, over permutations.

    classes: "0kl" -> (k, l); "hhl" -> (h, l); "h00" -> (h,).
    """
    for p in set(itertools.permutations((abs(h), abs(k), abs(l)))):
        a, b, c = p
        if a == 0:
            yield ("0kl", b, c)
        if a == b:
            yield ("hhl", a, c)
        if b == 0 and c == 0:
            yield ("h00", a, 0)


def _allowed(group: str, h: int, k: int, l: int) -> bool:
    s = h + k + l
    if group == "Pm3m":
        return True
    if group in ("Im3m", "Ia3d") and s % 2:
        return False  # I centring: h+k+l = 2n
    if group in ("Fm3m", "Fd3m") and len({h % 2, k % 2, l % 2}) != 1:
        return False  # F centring: h, k, l all even or all odd
    for cls, a, b in _classes(h, k, l):
        if group == "Pn3m" and cls == "0kl" and (a + b) % 2:
            return False
        if group == "Ia3d":
            if cls == "0kl" and (a % 2 or b % 2):
                return False
            if cls == "hhl" and (2 * a + b) % 4:
                return False
            if cls == "h00" and a % 4:
                return False
        if group == "Fd3m":
            if cls == "0kl" and (a + b) % 4:
                return False
            if cls == "hhl" and (a + b) % 2:
                return False
            if cls == "h00" and a % 4:
                return False
        if group == "Pm3n" and cls == "hhl" and b % 2:
            return False
    return True


@cache
def allowed_reflections(phase: str, n: int = 12) -> tuple[tuple[int, tuple[int, ...]], ...]:
    """The first ``n`` allowed reflections of ``phase``, in order of increasing q.

    Returns a tuple of ``(s, hkl)``: ``s`` is h^2+k^2+l^2 for cubics, h^2+hk+k^2 for
    the 2D hexagonal phase and l^2 for lamellar orders; ``hkl`` is one representative
    index (the largest h first).

    Examples
    --------
    >>> [s for s, _ in allowed_reflections("Ia3d", 6)]
    [6, 8, 14, 16, 20, 22]
    >>> allowed_reflections("hexagonal", 3)
    ((1, (1, 0)), (3, (1, 1)), (4, (2, 0)))
    """
    if phase == "lamellar":
        return tuple((l * l, (0, 0, l)) for l in range(1, n + 1))
    if phase == "hexagonal":
        found: dict[int, tuple[int, int]] = {}
        for h in range(0, 3 * n + 1):
            for k in range(0, h + 1):
                if h == 0 and k == 0:
                    continue
                s = h * h + h * k + k * k
                found.setdefault(s, (h, k))
        return tuple(sorted(found.items()))[:n]
    if phase not in PHASES:
        raise ValueError(f"unknown phase {phase!r}; known: {PHASES}")
    found3: dict[int, tuple[int, int, int]] = {}
    hmax = int(np.ceil(np.sqrt(8 * n + 8))) + 2
    for h in range(hmax + 1):
        for k in range(h + 1):
            for l in range(k + 1):
                if h == k == l == 0:
                    continue
                if _allowed(phase, h, k, l):
                    found3.setdefault(h * h + k * k + l * l, (h, k, l))
    out = tuple(sorted(found3.items()))[:n]
    if len(out) < n:  # pragma: no cover - hmax is generous
        raise RuntimeError("reflection search range too small")
    return out


def spacing_ratios(phase: str, n: int = 12) -> np.ndarray:
    """q_hkl / q_first for the first ``n`` reflections (sqrt of s ratios).

    >>> np.round(spacing_ratios("Pn3m", 3) ** 2 * 2, 6).tolist()
    [2.0, 3.0, 4.0]
    """
    s = np.array([r[0] for r in allowed_reflections(phase, n)], dtype=float)
    return np.sqrt(s / s[0])


def q_positions(phase: str, lattice_nm, n: int = 12) -> np.ndarray:
    """Peak positions in 1/nm for lattice parameter(s) ``lattice_nm``.

    Lamellar: ``lattice`` is the d-spacing, q = 2 pi l / d. Hexagonal: q = 4 pi
    sqrt(s) / (sqrt(3) a). Cubic: q = 2 pi sqrt(s) / a. Output shape
    ``lattice.shape + (n,)``.

    >>> float(q_positions("lamellar", 5.8380, 1)[0])  # silver behenate d001 (Huang et al. 1993)
    1.0762...
    """
    a = np.asarray(lattice_nm, dtype=float)[..., None]
    s = np.array([r[0] for r in allowed_reflections(phase, n)], dtype=float)
    if phase == "lamellar":
        return 2 * np.pi * np.sqrt(s) / a
    if phase == "hexagonal":
        return 4 * np.pi * np.sqrt(s) / (np.sqrt(3.0) * a)
    return 2 * np.pi * np.sqrt(s) / a


def hkl_labels(phase: str, n: int = 12) -> list[str]:
    """Text labels of the first ``n`` reflections, e.g. ``['110', '111', '200']``.

    >>> hkl_labels("Pn3m", 3)
    ['110', '111', '200']
    """
    return ["".join(str(i) for i in hkl) for _, hkl in allowed_reflections(phase, n)]
