"""Reflection sequences generated from the ITA conditions equal the published lists."""

import numpy as np
import pytest

from saxsnb.analysis import allowed_reflections, hkl_labels, q_positions, spacing_ratios

# docs/REFERENCES.md, "Mesophases": allowed h^2+k^2+l^2 in order, derived from the reflection
# conditions of International Tables for Crystallography Vol. A (conditions beyond the
# centring are from memory there).
PUBLISHED = {
    "Pn3m": [2, 3, 4, 6, 8, 9, 10, 11, 12, 14, 16, 17],
    "Im3m": [2, 4, 6, 8, 10, 12, 14, 16, 18, 20, 22, 24],
    "Ia3d": [6, 8, 14, 16, 20, 22, 24, 26, 30, 32],
    "Pm3n": [2, 4, 5, 6, 8, 10, 12, 13, 14, 16],
    "Fm3m": [3, 4, 8, 11, 12, 16, 19, 20, 24, 27],
    "Fd3m": [3, 8, 11, 12, 16, 19, 24, 27, 32, 35, 36],
    # 2D hexagonal h^2 + hk + k^2 and lamellar l^2 (docs/REFERENCES.md)
    "hexagonal": [1, 3, 4, 7, 9, 12, 13],
    "lamellar": [1, 4, 9, 16],
}


@pytest.mark.parametrize("phase", sorted(PUBLISHED))
def test_sequences_equal_published(phase):
    want = PUBLISHED[phase]
    got = [s for s, _ in allowed_reflections(phase, len(want))]
    assert got == want


def test_indices_consistent_with_s():
    for phase in ("Pn3m", "Im3m", "Ia3d", "Pm3n", "Fm3m", "Fd3m"):
        for s, hkl in allowed_reflections(phase, 20):
            assert sum(i * i for i in hkl) == s
    for s, (h, k) in allowed_reflections("hexagonal", 10):
        assert h * h + h * k + k * k == s


def test_ratios_and_labels():
    # Ia3d first two reflections 211 and 220: ratio sqrt(8/6) (common practice)
    assert spacing_ratios("Ia3d", 2)[1] == pytest.approx(np.sqrt(8 / 6))
    assert hkl_labels("Ia3d", 2) == ["211", "220"]
    assert hkl_labels("hexagonal", 3) == ["10", "11", "20"]


def test_silver_behenate_positions():
    # Huang, Toraya, Blanton & Wu (1993), J. Appl. Cryst. 26, 180: d001 = 5.8380 nm,
    # q00l = l x 1.076256 1/nm (docs/REFERENCES.md)
    q = q_positions("lamellar", 5.8380, 4)
    assert np.allclose(q, 1.076256 * np.arange(1, 5), rtol=2e-6)


def test_hexagonal_and_cubic_positions():
    # a = 4 pi sqrt(s) / (sqrt(3) q) for p6mm; a = 2 pi sqrt(s) / q for cubics (docs/REFERENCES.md)
    assert q_positions("hexagonal", 6.0, 1)[0] == pytest.approx(4 * np.pi / (np.sqrt(3) * 6.0))
    assert q_positions("Pn3m", 10.0, 1)[0] == pytest.approx(2 * np.pi * np.sqrt(2) / 10.0)
