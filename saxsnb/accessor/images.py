"""``ds.saxs`` methods on an image series (dims frame, y, x; :mod:`saxsnb.io.images`):
integration to curves, cakes, azimuthal profiles of a q band and orientation per frame.

Each method builds one :class:`~saxsnb.analysis.IntegrationMatrix` for the geometry and
mask (or reuses ``matrix=``) and maps it over the frames with
``xarray.apply_ufunc(..., dask="parallelized")``, so a lazily read series is reduced
chunk by chunk. The geometry defaults to the series' ``geometry_*`` attrs; the mask to
its ``mask`` variable, joined (or) with ``mask=``. Results keep the series' attrs and
scan coordinates and append one history entry.

Examples
--------
>>> import numpy as np, saxsnb
>>> from saxsnb.analysis import DetectorGeometry
>>> from saxsnb.io.images import image_series
>>> g = DetectorGeometry(15.5, 15.5, 500.0, 0.2, 0.2, 0.1, shape=(32, 32))
>>> ims = image_series(np.full((2, 32, 32), 7.0), geometry=g, scan={"time": [0.0, 1.0]})
>>> curves = ims.saxs.integrate(n_bins=8, solid_angle=False, polarization=False)
>>> dict(curves.intensity.sizes), np.allclose(curves.intensity, 7.0)
({'frame': 2, 'q': 8}, True)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import xarray as xr

from ..analysis._geometry import DetectorGeometry
from ..analysis._integrate import IntegrationMatrix, integration_matrix
from ..analysis._orientation import azimuthal_peak_width, hermans_orientation
from ..errors import SaxsInputError
from ..series import add_history
from ._core import result_attrs

__all__ = ["ImageMethods"]


@dataclass(frozen=True)
class PixelOptions:
    """How pixels enter every reduction of an image series (one place for the defaults).

    ``subpixels``: each pixel sampled on a ``subpixels x subpixels`` grid; ``solid_angle``,
    ``polarization``: the per-pixel corrections (:func:`saxsnb.analysis.integration_matrix`).
    """

    subpixels: int = 2
    solid_angle: bool = True
    polarization: bool = True

    def as_dict(self) -> dict:
        return {"subpixels": int(self.subpixels), "solid_angle": bool(self.solid_angle),
                "polarization": bool(self.polarization)}


_PIXELS = PixelOptions()


class ImageMethods:
    """Image-series methods of ``ds.saxs`` (module doc)."""

    # ------------------------------------------------------------ helpers
    def _images(self) -> xr.DataArray:
        ds = self._ds
        if "counts" not in ds.data_vars or ds["counts"].dims != ("frame", "y", "x"):
            raise SaxsInputError("not an image series: needs 'counts' on (frame, y, x)", parameter="counts")
        return ds["counts"]

    def geometry(self) -> DetectorGeometry:
        """The detector geometry stored in the image series' attrs.

        Examples
        --------
        >>> import numpy as np
        >>> from saxsnb.analysis import DetectorGeometry
        >>> from saxsnb.io.images import image_series
        >>> g = DetectorGeometry(15.5, 15.5, 100.0, 0.2, 0.2, 0.1, shape=(32, 32))
        >>> ims = image_series(np.full((2, 32, 32), 5.0), geometry=g)
        >>> ims.saxs.geometry().distance_mm
        100.0
        """
        ds = self._ds
        if not any(str(k).startswith("geometry_") for k in ds.attrs):
            raise SaxsInputError(
                "the image series has no geometry: pass geometry= or calibrate first", parameter="geometry"
            )
        return DetectorGeometry.from_attrs(ds.attrs)

    def _matrix(self, geometry, mask, matrix, **options) -> tuple[IntegrationMatrix, DetectorGeometry]:
        counts = self._images()
        g = self.geometry() if geometry is None else geometry
        shape = tuple(counts.shape[1:])
        if g.shape is not None and tuple(g.shape) != shape:
            raise SaxsInputError(
                f"geometry shape {g.shape} differs from the images {shape}", parameter="geometry"
            )
        g = g.replace(shape=shape)
        if matrix is not None:
            if tuple(matrix.shape) != shape:
                raise SaxsInputError(
                    f"matrix built for images {matrix.shape}, not {shape}", parameter="matrix"
                )
            return matrix, g
        m = None
        if "mask" in self._ds.data_vars:
            m = np.asarray(self._ds["mask"].values, bool)
        if mask is not None:
            user = np.asarray(mask, bool)
            if user.shape != shape:
                raise SaxsInputError(
                    f"mask shape {user.shape} differs from the images {shape}", parameter="mask"
                )
            m = user if m is None else (m | user)
        return integration_matrix(g, mask=m, **options), g

    def _reduce(self, mat: IntegrationMatrix, variance=None):
        counts = self._images()
        n_b = mat.n_bins

        def run(block):
            out = mat.integrate(block)
            return out["intensity"].reshape(block.shape[0], n_b), out["sigma"].reshape(block.shape[0], n_b)

        data = counts if not hasattr(counts.data, "dask") else counts.chunk({"y": -1, "x": -1})
        I, S = xr.apply_ufunc(
            run,
            data,
            input_core_dims=[["y", "x"]],
            output_core_dims=[["bin"], ["bin"]],
            dask="parallelized",
            output_dtypes=[float, float],
            dask_gufunc_kwargs={"output_sizes": {"bin": n_b}},
        )
        return I, S

    def _coords_from(self, out: xr.Dataset) -> xr.Dataset:
        ds = self._ds
        coords = {
            c: ds[c].reset_coords(drop=True) for c in ds.coords if ds[c].dims == ("frame",) and c != "frame"
        }
        return out.assign_coords(frame=ds["frame"].values, **coords)

    # ------------------------------------------------------------ methods
    def integration_matrix(self, geometry=None, mask=None, **options) -> IntegrationMatrix:
        """The pixels -> bins matrix for this series (reuse it with ``matrix=``); options as
        :func:`saxsnb.analysis.integration_matrix`.

        Examples
        --------
        >>> import numpy as np
        >>> from saxsnb.analysis import DetectorGeometry
        >>> from saxsnb.io.images import image_series
        >>> g = DetectorGeometry(15.5, 15.5, 100.0, 0.2, 0.2, 0.1, shape=(32, 32))
        >>> ims = image_series(np.full((2, 32, 32), 5.0), geometry=g)
        >>> m = ims.saxs.integration_matrix(n_bins=10)
        >>> np.allclose(ims.saxs.integrate(matrix=m).intensity, ims.saxs.integrate(n_bins=10).intensity)
        True
        """
        return self._matrix(geometry, mask, None, **options)[0]

    def integrate(
        self,
        geometry=None,
        mask=None,
        *,
        n_bins: int = 500,
        q_range=None,
        q_edges=None,
        spacing: str = "linear",
        chi_range=None,
        subpixels: int = _PIXELS.subpixels,
        solid_angle: bool = _PIXELS.solid_angle,
        polarization: bool = _PIXELS.polarization,
        matrix: IntegrationMatrix | None = None,
    ) -> xr.Dataset:
        """Every frame to a curve I(q) +- sigma: a curve series (frame, q) ready for analysis.

        Intensity is in counts per relative solid angle (``units="arb"``); bins that no
        unmasked pixel reaches are dropped; a bin that lost pixels in one frame (non-finite
        values) keeps the frame's own normalisation. Options as
        :func:`saxsnb.analysis.integration_matrix`.

        Examples
        --------
        >>> import numpy as np
        >>> from saxsnb.analysis import DetectorGeometry
        >>> from saxsnb.io.images import image_series
        >>> g = DetectorGeometry(15.5, 15.5, 100.0, 0.2, 0.2, 0.1, shape=(32, 32))
        >>> ims = image_series(np.full((2, 32, 32), 5.0), geometry=g)
        >>> ims.saxs.integrate(n_bins=10).intensity.dims
        ('frame', 'q')
        """
        pixels = PixelOptions(subpixels, solid_angle, polarization).as_dict()
        opts = dict(n_bins=n_bins, q_range=q_range, q_edges=q_edges, spacing=spacing, chi_range=chi_range,
                    **pixels)
        mat, g = self._matrix(geometry, mask, matrix, **opts)
        if mat.is_cake:
            raise SaxsInputError("a cake matrix cannot make curves: use cake()", parameter="matrix")
        I, S = self._reduce(mat)
        keep = mat.pixels > 0
        q = mat.q[keep]
        I, S = I.isel(bin=np.flatnonzero(keep)), S.isel(bin=np.flatnonzero(keep))
        out = xr.Dataset(
            {
                "intensity": (
                    ("frame", "q"),
                    I.data,
                    {"units": "arb", "long_name": "counts per relative solid angle"},
                ),
                "sigma": (("frame", "q"), S.data, {"units": "arb"}),
                "pixels": (("q",), mat.pixels[keep], {"long_name": "pixels per bin (fractional)"}),
            },
            coords={"q": ("q", q, {"units": "1/nm"})},
        )
        out = self._coords_from(out)
        out["mask"] = ~np.isfinite(out["intensity"])
        params = {
            "geometry": g.to_attrs(),
            "n_bins": int(mat.n_bins),
            "q_range": [float(mat.q_edges[0]), float(mat.q_edges[-1])],
            "spacing": spacing,
            "chi_range": chi_range,
            **pixels,
            "subpixels": mat.subpixels,
            "masked_pixels": int(
                mat.shape[0] * mat.shape[1] - np.count_nonzero(np.asarray(mat.fractions.sum(axis=0)).ravel())
            ),
        }
        attrs = {k: v for k, v in self._ds.attrs.items() if k != "history"}
        attrs["history"] = list(self._ds.attrs.get("history", []))
        attrs["wavelength_nm"] = g.wavelength_nm
        out.attrs = attrs
        return add_history(out, "integrate", **params)

    def cake(
        self,
        geometry=None,
        mask=None,
        *,
        n_bins: int = 200,
        n_chi: int = 72,
        q_range=None,
        q_edges=None,
        chi_range=None,
        subpixels: int = _PIXELS.subpixels,
        solid_angle: bool = _PIXELS.solid_angle,
        polarization: bool = _PIXELS.polarization,
        matrix: IntegrationMatrix | None = None,
    ) -> xr.Dataset:
        """Every frame to (q, chi) bins: ``intensity``, ``sigma`` on (frame, q, chi).

        Examples
        --------
        >>> import numpy as np
        >>> from saxsnb.analysis import DetectorGeometry
        >>> from saxsnb.io.images import image_series
        >>> g = DetectorGeometry(15.5, 15.5, 100.0, 0.2, 0.2, 0.1, shape=(32, 32))
        >>> ims = image_series(np.full((2, 32, 32), 5.0), geometry=g)
        >>> dict(ims.saxs.cake(n_bins=6, n_chi=8).intensity.sizes)
        {'frame': 2, 'q': 6, 'chi': 8}
        """
        opts = dict(n_bins=n_bins, n_chi=n_chi, q_range=q_range, q_edges=q_edges, chi_range=chi_range,
                    **PixelOptions(subpixels, solid_angle, polarization).as_dict())
        mat, g = self._matrix(geometry, mask, matrix, **opts)
        I, S = self._reduce(mat)
        n_q, n_c = mat.q_edges.size - 1, mat.chi_edges.size - 1
        shp = (I.shape[0], n_q, n_c)
        out = xr.Dataset(
            {
                "intensity": (("frame", "q", "chi"), I.data.reshape(shp), {"units": "arb"}),
                "sigma": (("frame", "q", "chi"), S.data.reshape(shp), {"units": "arb"}),
                "pixels": (("q", "chi"), mat.pixels.reshape(n_q, n_c)),
            },
            coords={"q": ("q", mat.q, {"units": "1/nm"}), "chi": ("chi", mat.chi, {"units": "deg"})},
        )
        out = self._coords_from(out)
        out.attrs = result_attrs(
            self._ds,
            "cake",
            {
                "geometry": g.to_attrs(),
                **{k: v for k, v in opts.items() if k != "q_edges"},
                "q_edges": mat.q_edges.tolist(),
            },
        )
        return out

    def azimuthal_profile(
        self,
        q_band,
        geometry=None,
        mask=None,
        *,
        n_chi: int = 72,
        background_bands=None,
        subpixels: int = _PIXELS.subpixels,
        solid_angle: bool = _PIXELS.solid_angle,
        polarization: bool = _PIXELS.polarization,
    ) -> xr.Dataset:
        """I(chi) of the q band ``(q_lo, q_hi)`` (1/nm) per frame, on (frame, chi).

        ``background_bands``: q bands (e.g. just below and above the reflection) whose mean
        I(chi) is subtracted chi bin by chi bin (the isotropic and radially smooth
        scattering under the reflection); sigma includes theirs.

        Examples
        --------
        >>> import numpy as np
        >>> from saxsnb.analysis import DetectorGeometry
        >>> from saxsnb.io.images import image_series
        >>> g = DetectorGeometry(15.5, 15.5, 100.0, 0.2, 0.2, 0.1, shape=(32, 32))
        >>> ims = image_series(np.full((2, 32, 32), 5.0), geometry=g)
        >>> prof = ims.saxs.azimuthal_profile((0.5, 1.0), n_chi=12, solid_angle=False, polarization=False)
        >>> prof.intensity.dims, bool(np.allclose(prof.intensity, prof.intensity[0, 0]))
        (('frame', 'chi'), True)
        """
        bands = [tuple(q_band)] + [tuple(b) for b in (background_bands or [])]
        for b in bands:
            if len(b) != 2 or not b[0] < b[1]:
                raise SaxsInputError(
                    f"a q band is (q_lo, q_hi) with q_lo < q_hi, got {b}", parameter="q_band"
                )
        profiles = []
        g = None
        pixels = PixelOptions(subpixels, solid_angle, polarization).as_dict()
        for b in bands:
            mat, g = self._matrix(geometry, mask, None, q_edges=list(b), n_chi=n_chi, **pixels)
            profiles.append(self._reduce(mat))
        I, S = profiles[0]
        if len(profiles) > 1:
            bg_I = sum(p[0] for p in profiles[1:]) / (len(profiles) - 1)
            bg_V = sum(p[1] ** 2 for p in profiles[1:]) / (len(profiles) - 1) ** 2
            I = I - bg_I
            S = np.sqrt(S**2 + bg_V)
        out = xr.Dataset(
            {
                "intensity": (("frame", "chi"), I.data, {"units": "arb"}),
                "sigma": (("frame", "chi"), S.data, {"units": "arb"}),
            },
            coords={"chi": ("chi", mat.chi, {"units": "deg"})},
        )
        out = self._coords_from(out)
        out.attrs = result_attrs(
            self._ds,
            "azimuthal_profile",
            {
                "q_band": list(q_band),
                "background_bands": [list(b) for b in (background_bands or [])],
                "n_chi": n_chi,
                "geometry": g.to_attrs(),
                **pixels,
            },
        )
        return out

    def orientation(
        self,
        q_band,
        geometry=None,
        mask=None,
        *,
        director_deg="auto",
        n_chi: int = 72,
        background_bands=None,
        symmetry: int = 2,
        baseline=None,
        subpixels: int = _PIXELS.subpixels,
        solid_angle: bool = _PIXELS.solid_angle,
        polarization: bool = _PIXELS.polarization,
    ) -> xr.Dataset:
        """Orientation per frame from the azimuthal profile of a q band.

        Hermans' f and the 2D order parameter relative to ``director_deg`` ("auto": the
        intensity maximum), and the FWHM of the azimuthal peaks
        (:func:`saxsnb.analysis.hermans_orientation`, :func:`~saxsnb.analysis.azimuthal_peak_width`).
        The parameters describe everything in the band: isotropic scattering under the
        reflection (background, amorphous part) pulls f towards 0. Remove it with
        ``background_bands`` (or ``baseline="min"``) to get the orientation of the reflection.

        Examples
        --------
        >>> import numpy as np
        >>> from saxsnb.analysis import DetectorGeometry
        >>> from saxsnb.io.images import image_series
        >>> g = DetectorGeometry(15.5, 15.5, 100.0, 0.2, 0.2, 0.1, shape=(32, 32))
        >>> ims = image_series(np.full((2, 32, 32), 5.0), geometry=g)
        >>> out = ims.saxs.orientation((0.5, 1.0), n_chi=12, director_deg=0.0)
        >>> np.round(out.hermans.values, 6).tolist(), out.status.values.tolist()   # isotropic
        ([0.0, 0.0], ['ok', 'ok'])
        """
        pixels = PixelOptions(subpixels, solid_angle, polarization).as_dict()
        prof = self.azimuthal_profile(q_band, geometry, mask, n_chi=n_chi, background_bands=background_bands,
                                      **pixels)
        chi = prof["chi"].values
        I, S = np.asarray(prof["intensity"].values, float), np.asarray(prof["sigma"].values, float)
        h = hermans_orientation(chi, I, S, director_deg=director_deg, baseline=baseline)
        w = azimuthal_peak_width(chi, I, S, symmetry=symmetry)
        units = {
            "hermans": "1",
            "hermans_sigma": "1",
            "cos2": "1",
            "order_2d": "1",
            "order_2d_sigma": "1",
            "director_deg": "deg",
        }
        data = {k: ("frame", h[k], {"units": u}) for k, u in units.items()}
        data["status"] = ("frame", h["status"])
        for k, u in (
            ("fwhm_deg", "deg"),
            ("fwhm_sigma", "deg"),
            ("center_deg", "deg"),
            ("center_sigma", "deg"),
            ("chi2_reduced", "1"),
        ):
            data[k] = ("frame", w[k], {"units": u})
        data["fwhm_status"] = ("frame", w["status"])
        out = self._coords_from(xr.Dataset(data))
        out.attrs = result_attrs(
            self._ds,
            "orientation",
            {
                "q_band": list(q_band),
                "background_bands": [list(b) for b in (background_bands or [])],
                "n_chi": n_chi,
                "director_deg": director_deg,
                "symmetry": symmetry,
                "baseline": baseline,
                **pixels,
            },
        )
        return out
