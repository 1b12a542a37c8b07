"""Synthetic 2D detector images from closed forms, in fictional scenarios.

``calibrant_image``
    A silver behenate powder image (d001 = 5.8380 nm, Huang et al. 1993, J. Appl.
    Cryst. 26, 180) on a tilted detector of known geometry (:func:`calibrant_geometry`):
    rings ``I(q) = sum_n A n^-1.5 exp(-(q - 2 pi n / d)^2 / (2 s^2))`` over a background
    ``B (1 + (q / 0.5)^-2)``, Poisson counts.
``fibre_series``
    Fibre F-3 (fictional) stretched from 0 to 200 % strain in 21 steps, measured on the
    calibrant's set-up: one reflection at d = 3 nm whose azimuthal spread narrows as the
    chains align along the stretching direction (the director, chi = 90 degrees, i.e. along
    the image rows).
    ``I(q, chi) = B(q) + A exp(-(q - q0)^2 / (2 s^2)) |cos(chi - 90)|^(2 n)`` with
    ``n = 5 * strain / 2``; its Hermans parameter is ``f = 2n / (2n + 3)`` relative to the
    director (Hermans & Platzek 1939; the closed form for a cos^(2n) distribution, with the
    detector azimuth taken as the polar angle from the fibre axis, common practice at small
    angles), stored as ``truth["hermans"]``.

Every name and number is invented. Each function draws Poisson counts with
``np.random.default_rng(seed)``; images are averaged over 2 x 2 sub-pixels before the
draw.

>>> img = calibrant_image(seed=1)
>>> img.shape, img.dtype
((400, 420), dtype('uint32'))
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from .analysis._calibration import SILVER_BEHENATE_D
from .analysis._geometry import DetectorGeometry

__all__ = ["calibrant_geometry", "nominal_geometry", "calibrant_image", "fibre_geometry", "fibre_series",
           "write_image_demo"]


def calibrant_geometry() -> DetectorGeometry:
    """The known (true) geometry of the demo calibrant image: 400 x 420 pixels of 0.172 mm,
    200 mm, Cu K-alpha 0.15406 nm, tilt 2.5 degrees about an axis at 35 degrees."""
    return DetectorGeometry(beam_center_x_px=208.3, beam_center_y_px=193.6, distance_mm=200.0,
                            pixel_size_x_mm=0.172, pixel_size_y_mm=0.172, wavelength_nm=0.15406,
                            tilt_deg=2.5, tilt_rotation_deg=35.0, shape=(400, 420), polarization=0.0)


def _subpixel_q_chi(g: DetectorGeometry):
    rows = np.arange(g.shape[0], dtype=float)[:, None]
    cols = np.arange(g.shape[1], dtype=float)[None, :]
    for dy in (-0.25, 0.25):
        for dx in (-0.25, 0.25):
            yield g.q_chi(rows + dy, cols + dx)


def calibrant_image(geometry: DetectorGeometry | None = None, *, d_spacing: float = SILVER_BEHENATE_D,
                    peak_counts: float = 2000.0, background: float = 20.0, ring_width: float = 0.03,
                    seed: int = 0, noise: bool = True) -> np.ndarray:
    """A calibrant powder image (module doc), uint32 counts (float64 if ``noise=False``)."""
    g = calibrant_geometry() if geometry is None else geometry
    model = np.zeros(g.shape)
    q1 = 2 * np.pi / d_spacing
    for q, _ in _subpixel_q_chi(g):
        ring = np.zeros_like(q)
        for n in range(1, int(q.max() / q1) + 2):
            ring += n**-1.5 * np.exp(-0.5 * ((q - n * q1) / ring_width) ** 2)
        bg = background * (1 + (np.maximum(q, 1e-3) / 0.5) ** -2)
        model += 0.25 * (peak_counts * ring + bg) * g.solid_angle() * g.polarization_factor()
    if not noise:
        return model
    return np.random.default_rng(seed).poisson(model).astype(np.uint32)


def fibre_geometry() -> DetectorGeometry:
    """Geometry of the fibre series: the same set-up as the calibrant (:func:`calibrant_geometry`)."""
    return calibrant_geometry()


def nominal_geometry() -> DetectorGeometry:
    """The set-up as the (fictional) instrument log gives it before calibration: centre a few
    pixels off, distance 2 % long, no tilt. Stored in the demo files' metadata."""
    g = calibrant_geometry()
    return g.replace(beam_center_x_px=205.0, beam_center_y_px=196.0, distance_mm=204.0, tilt_deg=0.0,
                     tilt_rotation_deg=0.0)


def fibre_series(n_frames: int = 21, *, max_strain: float = 2.0, d_spacing: float = 3.0,
                 peak_counts: float = 400.0, background: float = 30.0, seed: int = 0,
                 noise: bool = True) -> xr.Dataset:
    """The fibre-stretching image series (module doc) as an image Dataset (frame, y, x).

    Returns
    -------
    Dataset with ``counts`` (frame, y, x) uint32 (float64 without noise), the scan
    coordinate ``strain`` (dimensionless, 1 = 100 %), the geometry attrs
    (:meth:`DetectorGeometry.to_attrs`) and ``truth`` (JSON: ``n``, ``hermans``,
    ``director_deg``, ``q0``).

    >>> ds = fibre_series(3, noise=False)     # n = 0, 2.5, 5: f = 2n / (2n + 3)
    >>> ds.counts.dims, [round(f, 4) for f in __import__("json").loads(ds.attrs["truth"])["hermans"]]
    (('frame', 'y', 'x'), [0.0, 0.625, 0.7692])
    """
    import json

    from .io.images import image_series

    g = fibre_geometry()
    strain = np.linspace(0.0, max_strain, int(n_frames))
    n = 5.0 * strain / max_strain
    q0 = 2 * np.pi / d_spacing
    s = 0.03
    model = np.zeros((strain.size,) + g.shape)
    omega = g.solid_angle() * g.polarization_factor()
    for q, chi in _subpixel_q_chi(g):
        c2 = np.cos(np.radians(chi - 90.0)) ** 2
        radial = np.exp(-0.5 * ((q - q0) / s) ** 2)
        bg = background * (1 + (np.maximum(q, 1e-3) / 1.0) ** -2)
        model += 0.25 * (bg[None] + peak_counts * radial[None] * c2[None] ** n[:, None, None]) * omega
    counts = np.random.default_rng(seed).poisson(model).astype(np.uint32) if noise else model
    truth = {"n": n.tolist(), "hermans": (2 * n / (2 * n + 3)).tolist(), "director_deg": 90.0, "q0": q0,
             "peak_width_q": s, "scenario": "fibre F-3 stretching (fictional)"}
    ds = image_series(counts, geometry=g, scan={"strain": (strain, "1")})
    ds.attrs["sample"] = "fibre F-3 (fictional)"
    ds.attrs["truth"] = json.dumps(truth)
    return ds


def write_image_demo(folder, *, seed: int = 0) -> dict:
    """Write the calibrant image (``calibrant.tif``) and the fibre series
    (``fibre/frame_###.tif``, strain in each file's description) into ``folder``, with a
    README.md; the files carry the uncalibrated :func:`nominal_geometry`, as an instrument
    would write it. Counts are stored losslessly (16-bit where they fit, zlib), about
    3 MB in all. ``saxsnb demo`` writes them into ``images/``.

    Returns ``{"calibrant": path, "fibre": folder}``.
    """
    from pathlib import Path

    from .io._atomic import atomic_write_bytes
    from .io.images import write_tiff

    def small(counts):
        counts = np.asarray(counts)
        if counts.dtype.kind == "u" and counts.max() < 2**16:
            return counts.astype(np.uint16)
        return counts

    folder = Path(folder)
    (folder / "fibre").mkdir(parents=True, exist_ok=True)
    cal = folder / "calibrant.tif"
    write_tiff(cal, small(calibrant_image(seed=seed)), metadata=nominal_geometry().to_attrs(),
               compression="zlib")
    ds = fibre_series(seed=seed)
    for i in range(ds.sizes["frame"]):
        write_tiff(folder / "fibre" / f"frame_{i:03d}.tif", small(ds.counts.values[i]),
                   metadata={"strain": float(ds.strain.values[i]), **nominal_geometry().to_attrs()},
                   compression="zlib")
    shape = ds.counts.shape
    atomic_write_bytes(folder / "README.md", _README.format(frames=shape[0], rows=shape[1], cols=shape[2],
                                                            seed=seed).encode())
    return {"calibrant": cal, "fibre": folder / "fibre"}


_README = """# Detector image demo (synthetic)

Written by `saxsnb demo` (seed {seed}) from closed forms; no measured data.

- `calibrant.tif`: a silver behenate powder image (d001 = 5.8380 nm, Huang et al. 1993)
  on a tilted detector, with Poisson noise.
- `fibre/frame_000.tif` ... : fibre F-3 (fictional) stretched from 0 to 200 % strain,
  {frames} images of {rows} x {cols} pixels; the strain of each frame is in its TIFF
  description. The arcs of the d = 3 nm reflection narrow with strain
  (I ~ cos^(2n) of the angle to the stretching direction, n = 5 strain / 2).

The files carry the geometry of the instrument log (centre a few pixels off, distance
2 % long, no tilt): calibrate it on `calibrant.tif` first. Read them with
`saxsnb.read_images("calibrant.tif")` and `saxsnb.read_images("fibre")`; the walk-through
is `notebooks/07-images.ipynb`.
"""
