"""Detector geometry: where each pixel sits, its scattering vector q, azimuth chi,
solid angle and polarisation factor.

The layout (our own; every length in mm, angles in degrees, q in 1/nm)
-----------------------------------------------------------------------
Pixel ``(row i, column j)`` of an image ``image[i, j]`` has its centre at detector
coordinates ``x = j``, ``y = i`` (0-based, so the first pixel's centre is (0, 0)).

The laboratory frame has the sample at the origin and the incident beam along ``+z``.
With no tilt the detector is the plane ``z = distance_mm``, its column axis along lab
``+x`` and its row axis along lab ``+y``. The **beam centre** ``(beam_center_x_px,
beam_center_y_px)`` is the point where the direct beam meets the detector (not the
foot of the perpendicular from the sample), and ``distance_mm`` is the sample to
beam-centre distance along the beam.

**Tilt**: the detector is turned by ``tilt_deg`` (tau) about an axis that lies in the
detector plane, passes through the beam centre and makes the angle
``tilt_rotation_deg`` (rho) with the detector's column (+x) axis, counted towards +y.
The turn follows the right-hand rule about that axis (Rodrigues' formula). A pixel at
in-plane offset ``(u, v) = ((j - x0) p_x, (i - y0) p_y)`` sits at

    r = (0, 0, L) + R(tau, rho) (u, v, 0)

**Scattering**: ``2 theta`` is the angle between ``r`` and the beam, ``q = 4 pi
sin(theta) / lambda`` (common practice), and the azimuth ``chi = atan2(r_y, r_x)`` in
degrees, in (-180, 180], counted from lab +x (columns increasing) towards lab +y (rows
increasing), i.e. clockwise on an image drawn with row 0 at the top.

**Solid angle** of a pixel (point approximation, common practice):
``Omega = p_x p_y (r . n) / |r|^3`` steradians, with ``n`` the detector normal. The
*relative* solid angle divides by ``p_x p_y / L^2`` (a pixel facing the sample at the
beam-centre distance), so it is 1 at the beam centre of an untilted detector.

**Polarisation** (common practice; from memory): for a beam whose polarisation fraction
along lab x is ``p`` (0 unpolarised, 1 fully polarised along x, -1 along y) the scattered
intensity is multiplied by ``P = 1 - sin^2(2 theta) [(1 + p)/2 cos^2 chi + (1 - p)/2
sin^2 chi]``; ``p = 0`` gives the unpolarised ``(1 + cos^2 2theta) / 2``.

The attrs layout of an image series (``DetectorGeometry.to_attrs``) stores these names
with the prefix ``geometry_`` plus ``geometry_shape`` (rows, columns).

Examples
--------
>>> g = DetectorGeometry(beam_center_x_px=50, beam_center_y_px=40, distance_mm=1000,
...                      pixel_size_x_mm=0.1, pixel_size_y_mm=0.1, wavelength_nm=0.1,
...                      shape=(80, 100))
>>> q, chi = g.q_chi([40.0], [60.0])     # 10 px = 1 mm to the right of the beam
>>> round(float(q[0]), 6), float(chi[0])
(0.062832, 0.0)
>>> round(float(g.q_chi([50.0], [50.0])[1][0]), 6)   # straight below the beam on the image
90.0
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field, replace

import numpy as np

from ..errors import SaxsInputError

__all__ = ["DetectorGeometry", "rotation_matrix", "GEOMETRY_PREFIX"]

#: Prefix of the geometry attrs in an image series.
GEOMETRY_PREFIX = "geometry_"


def rotation_matrix(tilt_deg: float, tilt_rotation_deg: float) -> np.ndarray:
    """Rotation by ``tilt_deg`` about the in-plane axis at ``tilt_rotation_deg`` from +x.

    Rodrigues' rotation formula (Rodrigues 1840, J. Math. Pures Appl. 5, 380):
    ``R = cos(t) I + sin(t) [a]x + (1 - cos(t)) a a^T``.

    >>> np.allclose(rotation_matrix(0, 30), np.eye(3))
    True
    >>> rotation_matrix(90, 0) @ [0, 1, 0]   # turn about +x: +y goes to +z
    array([0., 0., 1.])
    """
    t = math.radians(tilt_deg)
    r = math.radians(tilt_rotation_deg)
    a = np.array([math.cos(r), math.sin(r), 0.0])
    ax = np.array([[0.0, -a[2], a[1]], [a[2], 0.0, -a[0]], [-a[1], a[0], 0.0]])
    R = math.cos(t) * np.eye(3) + math.sin(t) * ax + (1 - math.cos(t)) * np.outer(a, a)
    return np.where(np.abs(R) < 1e-15, 0.0, R)


@dataclass(frozen=True)
class DetectorGeometry:
    """A flat detector's position relative to the sample and beam (layout: module doc).

    Parameters
    ----------
    beam_center_x_px, beam_center_y_px : direct-beam position, pixels (column, row).
    distance_mm : sample to beam-centre distance along the beam, mm (> 0).
    pixel_size_x_mm, pixel_size_y_mm : pixel pitch along columns and rows, mm.
    wavelength_nm : X-ray wavelength, nm.
    tilt_deg, tilt_rotation_deg : detector tilt and the direction of its axis, degrees.
    shape : (rows, columns) of the images, optional; when given the beam centre must
        lie on the detector.
    polarization : polarisation fraction along lab x in [-1, 1] (0 = unpolarised).

    Examples
    --------
    >>> g = DetectorGeometry(100, 100, 2000, 0.1, 0.1, 0.1, tilt_deg=2, shape=(200, 200))
    >>> g.q_map().shape, round(float(g.solid_angle()[100, 100]), 6)   # cos(tilt) at the beam
    ((200, 200), 0.999391)
    """

    beam_center_x_px: float
    beam_center_y_px: float
    distance_mm: float
    pixel_size_x_mm: float
    pixel_size_y_mm: float
    wavelength_nm: float
    tilt_deg: float = 0.0
    tilt_rotation_deg: float = 0.0
    shape: tuple | None = None
    polarization: float = 0.0
    _R: np.ndarray = field(init=False, repr=False, compare=False)

    def __post_init__(self):
        for name in ("distance_mm", "pixel_size_x_mm", "pixel_size_y_mm", "wavelength_nm"):
            v = getattr(self, name)
            if not (np.isfinite(v) and v > 0):
                raise SaxsInputError(f"must be a finite number > 0, got {v!r}", parameter=name)
        for name in ("beam_center_x_px", "beam_center_y_px", "tilt_deg", "tilt_rotation_deg"):
            if not np.isfinite(getattr(self, name)):
                raise SaxsInputError("must be finite", parameter=name)
        if not -1 <= self.polarization <= 1:
            raise SaxsInputError(f"must lie in [-1, 1], got {self.polarization}", parameter="polarization")
        if abs(self.tilt_deg) >= 80:
            raise SaxsInputError(f"|tilt| must be below 80 degrees, got {self.tilt_deg}",
                                 parameter="tilt_deg")
        if self.shape is not None:
            shape = tuple(int(s) for s in self.shape)
            if len(shape) != 2 or min(shape) < 1:
                raise SaxsInputError(f"must be (rows, columns), got {self.shape!r}", parameter="shape")
            object.__setattr__(self, "shape", shape)
            ny, nx = shape
            if not (-0.5 <= self.beam_center_x_px <= nx - 0.5 and -0.5 <= self.beam_center_y_px <= ny - 0.5):
                raise SaxsInputError(
                    f"beam centre ({self.beam_center_x_px}, {self.beam_center_y_px}) px lies off the "
                    f"detector of {nx} x {ny} pixels", parameter="beam_center_x_px")
        for name in ("beam_center_x_px", "beam_center_y_px", "distance_mm", "pixel_size_x_mm",
                     "pixel_size_y_mm", "wavelength_nm", "tilt_deg", "tilt_rotation_deg", "polarization"):
            object.__setattr__(self, name, float(getattr(self, name)))
        object.__setattr__(self, "_R", rotation_matrix(self.tilt_deg, self.tilt_rotation_deg))

    # ------------------------------------------------------------------ layout
    def to_attrs(self) -> dict:
        """The geometry as flat, NetCDF-safe attrs (``geometry_*``)."""
        d = {k: v for k, v in asdict(self).items() if not k.startswith("_")}
        out = {GEOMETRY_PREFIX + k: v for k, v in d.items() if k != "shape"}
        if self.shape is not None:
            out[GEOMETRY_PREFIX + "shape"] = list(self.shape)
        return out

    @classmethod
    def from_attrs(cls, attrs) -> DetectorGeometry:
        """Rebuild a geometry from attrs written by :meth:`to_attrs`.

        >>> g = DetectorGeometry(10, 20, 500, 0.172, 0.172, 0.154, tilt_deg=2, shape=(64, 64))
        >>> DetectorGeometry.from_attrs(g.to_attrs()) == g
        True
        """
        kw = {}
        for k in ("beam_center_x_px", "beam_center_y_px", "distance_mm", "pixel_size_x_mm",
                  "pixel_size_y_mm", "wavelength_nm", "tilt_deg", "tilt_rotation_deg", "polarization",
                  "shape"):
            key = GEOMETRY_PREFIX + k
            if key in attrs:
                kw[k] = attrs[key]
        missing = {"beam_center_x_px", "beam_center_y_px", "distance_mm", "pixel_size_x_mm",
                   "pixel_size_y_mm", "wavelength_nm"} - set(kw)
        if missing:
            raise SaxsInputError(f"geometry attrs missing: {sorted(GEOMETRY_PREFIX + m for m in missing)}",
                                 parameter="geometry")
        if "shape" in kw:
            kw["shape"] = tuple(int(s) for s in np.asarray(kw["shape"]).ravel())
        return cls(**kw)

    def replace(self, **changes) -> DetectorGeometry:
        """A copy with some parameters changed."""
        return replace(self, **changes)

    # ------------------------------------------------------------------ vectors
    @property
    def normal(self) -> np.ndarray:
        """Unit normal of the detector plane (lab frame), pointing away from the sample."""
        return self._R[:, 2].copy()

    def positions(self, rows, cols) -> np.ndarray:
        """Lab position (mm) of detector points at pixel coordinates ``(rows, cols)``.

        Returns an array of shape ``broadcast(rows, cols).shape + (3,)``.
        """
        rows, cols = np.broadcast_arrays(np.asarray(rows, float), np.asarray(cols, float))
        u = (cols - self.beam_center_x_px) * self.pixel_size_x_mm
        v = (rows - self.beam_center_y_px) * self.pixel_size_y_mm
        R = self._R
        out = np.empty(rows.shape + (3,))
        out[..., 0] = R[0, 0] * u + R[0, 1] * v
        out[..., 1] = R[1, 0] * u + R[1, 1] * v
        out[..., 2] = R[2, 0] * u + R[2, 1] * v + self.distance_mm
        return out

    def two_theta_chi(self, rows, cols) -> tuple[np.ndarray, np.ndarray]:
        """Scattering angle 2 theta (radians) and azimuth chi (degrees) at pixel coordinates."""
        r = self.positions(rows, cols)
        rho = np.hypot(r[..., 0], r[..., 1])
        tth = np.arctan2(rho, r[..., 2])
        chi = np.degrees(np.arctan2(r[..., 1], r[..., 0]))
        chi = np.where(chi <= -180.0, chi + 360.0, chi)
        return tth, chi

    def q_chi(self, rows, cols) -> tuple[np.ndarray, np.ndarray]:
        """q (1/nm) and chi (degrees) at pixel coordinates ``(rows, cols)`` (broadcast)."""
        tth, chi = self.two_theta_chi(rows, cols)
        return 4 * np.pi * np.sin(tth / 2) / self.wavelength_nm, chi

    def _grid(self, shape=None):
        shape = self._shape(shape)
        return np.arange(shape[0], dtype=float)[:, None], np.arange(shape[1], dtype=float)[None, :]

    def _shape(self, shape=None) -> tuple:
        shape = self.shape if shape is None else tuple(shape)
        if shape is None:
            raise SaxsInputError("the geometry has no image shape; pass shape=(rows, columns)",
                                 parameter="shape")
        return shape

    def q_map(self, shape=None) -> np.ndarray:
        """q (1/nm) at every pixel centre, shape (rows, columns)."""
        return self.q_chi(*self._grid(shape))[0]

    def chi_map(self, shape=None) -> np.ndarray:
        """chi (degrees) at every pixel centre, shape (rows, columns)."""
        return self.q_chi(*self._grid(shape))[1]

    def solid_angle(self, shape=None, *, relative: bool = True) -> np.ndarray:
        """Solid angle of every pixel (point approximation; module doc).

        ``relative=True`` divides by ``p_x p_y / L^2``; else steradians.
        """
        r = self.positions(*self._grid(shape))
        d = np.linalg.norm(r, axis=-1)
        omega = (r @ self.normal) / d**3
        if relative:
            return omega * self.distance_mm**2
        return omega * self.pixel_size_x_mm * self.pixel_size_y_mm

    def polarization_factor(self, shape=None, *, polarization: float | None = None) -> np.ndarray:
        """Polarisation factor of every pixel (module doc), 1 at the beam."""
        p = self.polarization if polarization is None else float(polarization)
        tth, chi = self.two_theta_chi(*self._grid(shape))
        c = np.radians(chi)
        s2 = np.sin(tth) ** 2
        return 1 - s2 * ((1 + p) / 2 * np.cos(c) ** 2 + (1 - p) / 2 * np.sin(c) ** 2)

    # ------------------------------------------------------------------ inverse
    def two_theta_of_q(self, q) -> np.ndarray:
        """2 theta (radians) of q (1/nm); NaN where q is beyond 4 pi / lambda."""
        s = np.asarray(q, float) * self.wavelength_nm / (4 * np.pi)
        with np.errstate(invalid="ignore"):
            return np.where(np.abs(s) <= 1, 2 * np.arcsin(np.clip(s, -1, 1)), np.nan)

    def ring(self, q: float, chi_deg=None) -> tuple[np.ndarray, np.ndarray]:
        """Pixel coordinates ``(rows, cols)`` of the cone of constant q met by the detector.

        ``chi_deg``: azimuths to sample (default 360 points). Points where the cone misses
        the detector plane (it runs parallel or away) are NaN.

        >>> g = DetectorGeometry(50, 50, 1000, 0.1, 0.1, 0.1, tilt_deg=3, tilt_rotation_deg=20)
        >>> rows, cols = g.ring(0.5, [0, 90, 200])
        >>> np.allclose(g.q_chi(rows, cols)[0], 0.5)
        True
        """
        chi = np.radians(np.arange(360.0) if chi_deg is None else np.asarray(chi_deg, float))
        tth = self.two_theta_of_q(q)
        d = np.stack([np.sin(tth) * np.cos(chi), np.sin(tth) * np.sin(chi),
                      np.cos(tth) * np.ones_like(chi)], axis=-1)
        n = self.normal
        p0 = np.array([0.0, 0.0, self.distance_mm])
        dn = d @ n
        with np.errstate(divide="ignore", invalid="ignore"):
            s = np.where(dn > 1e-12, (p0 @ n) / dn, np.nan)
        local = (d * s[..., None] - p0) @ self._R   # R^T (r - p0), row-vector form
        cols = local[..., 0] / self.pixel_size_x_mm + self.beam_center_x_px
        rows = local[..., 1] / self.pixel_size_y_mm + self.beam_center_y_px
        return rows, cols
