"""ds.saxs on image series: integrate, cake, azimuthal_profile, orientation (saxsnb.accessor.images)."""

import json

import numpy as np
import pytest

import saxsnb
from saxsnb.analysis import DetectorGeometry, circle_mask, integration_matrix
from saxsnb.demo_images import fibre_series
from saxsnb.errors import SaxsError
from saxsnb.io.images import image_series


@pytest.fixture(scope="module")
def fibre():
    return fibre_series(seed=7)


def test_integrate_equals_analysis_and_is_a_series(fibre):
    g = DetectorGeometry.from_attrs(fibre.attrs)
    mask = circle_mask(g.shape, (g.beam_center_x_px, g.beam_center_y_px), 6)
    before = fibre.counts.values.copy()
    curves = fibre.saxs.integrate(mask=mask, n_bins=60)
    np.testing.assert_array_equal(fibre.counts.values, before)     # input untouched
    saxsnb.validate(curves)
    m = integration_matrix(g, mask=mask, n_bins=60)
    ref = m.integrate(fibre.counts.values)
    keep = m.pixels > 0
    np.testing.assert_allclose(curves.intensity.values, ref["intensity"][:, keep], rtol=1e-12)
    np.testing.assert_allclose(curves.sigma.values, ref["sigma"][:, keep], rtol=1e-12)
    assert "strain" in curves.coords and curves.q.attrs["units"] == "1/nm"
    last = json.loads(curves.attrs["history"][-1])
    assert last["operation"] == "integrate" and last["parameters"]["masked_pixels"] > 0
    assert curves.attrs["wavelength_nm"] == pytest.approx(0.15406)
    # batch equals loop
    one = fibre.isel(frame=[5]).saxs.integrate(mask=mask, n_bins=60)
    np.testing.assert_allclose(one.intensity.values[0], curves.intensity.values[5], rtol=1e-12)
    # the curve series goes on to the curve analyses: a peak at q0 = 2 pi / 3 nm
    q0 = 2 * np.pi / 3.0
    sel = (curves.q.values > 1.5) & (curves.q.values < 2.7)
    peak_q = curves.q.values[sel][np.argmax(curves.intensity.values[-1][sel])]
    assert abs(peak_q - q0) < 0.03


def test_dask_equals_in_memory(fibre):
    lazy = fibre.chunk({"frame": 5})
    a = fibre.saxs.integrate(n_bins=40)
    b = lazy.saxs.integrate(n_bins=40)
    assert hasattr(b.intensity.data, "dask")
    np.testing.assert_allclose(b.intensity.values, a.intensity.values, rtol=1e-12)
    ca, cb = fibre.saxs.cake(n_bins=10, n_chi=12), lazy.saxs.cake(n_bins=10, n_chi=12)
    np.testing.assert_allclose(cb.intensity.values, ca.intensity.values, rtol=1e-12, equal_nan=True)


def test_orientation_follows_the_closed_form(fibre):
    truth = json.loads(fibre.attrs["truth"])
    q0 = truth["q0"]
    band = (q0 - 0.06, q0 + 0.06)
    bg = [(q0 - 0.18, q0 - 0.12), (q0 + 0.12, q0 + 0.18)]
    out = fibre.saxs.orientation(band, background_bands=bg, director_deg=90.0, n_chi=90)
    f_true = np.array(truth["hermans"])
    # demo: I ~ |cos(chi - 90)|^(2n) over a smooth isotropic background; f = 2n/(2n+3)
    # (Hermans & Platzek 1939); the background bands remove the isotropic part
    assert np.all(np.abs(out.hermans.values - f_true) < np.maximum(4 * out.hermans_sigma.values, 0.02))
    assert abs(out.hermans.values[0]) < 4 * out.hermans_sigma.values[0]       # unstretched: isotropic
    assert np.all(np.diff(out.hermans.values[5:]) > -0.05)
    assert out.strain.values[-1] == pytest.approx(2.0)
    auto = fibre.isel(frame=[-1]).saxs.orientation(band, background_bands=bg)
    assert abs(auto.director_deg.values[0] - 90.0) < 2.0 or abs(auto.director_deg.values[0] + 90.0) < 2.0
    assert auto.fwhm_status.values[0] == "ok"
    # cos^10: FWHM = 2 arccos(2^(-1/10)) (closed form); the Gaussian fit approximates it
    fwhm = 2 * np.degrees(np.arccos(2 ** (-1 / 10)))
    assert abs(auto.fwhm_deg.values[0] - fwhm) < 0.1 * fwhm
    prof = fibre.saxs.azimuthal_profile(band, background_bands=bg, n_chi=36)
    assert prof.intensity.dims == ("frame", "chi") and prof.chi.size == 36


def test_errors():
    curves = saxsnb.from_arrays([0.1, 0.2], [[1.0, 2.0]], [[0.1, 0.1]])
    with pytest.raises(SaxsError, match="image series"):
        curves.saxs.integrate()
    ims = image_series(np.ones((1, 8, 8)))
    with pytest.raises(SaxsError, match="geometry"):
        ims.saxs.integrate()
    g = DetectorGeometry(3.5, 3.5, 100.0, 0.1, 0.1, 0.1, shape=(10, 10))
    with pytest.raises(SaxsError, match="geometry shape"):
        ims.saxs.integrate(g)
    g8 = g.replace(shape=(8, 8))
    with pytest.raises(SaxsError, match="hides every pixel"):
        ims.saxs.integrate(g8, mask=np.ones((8, 8), bool))
    with pytest.raises(SaxsError, match="q band"):
        ims.saxs.azimuthal_profile((0.5, 0.1), g8)


def test_pixel_options_shared_and_forwarded():
    import inspect

    from saxsnb.accessor.images import PixelOptions
    from saxsnb.analysis import hermans_orientation

    # the accessor's defaults are the analysis function's (one place: PixelOptions)
    sig = inspect.signature(integration_matrix).parameters
    names = ("subpixels", "solid_angle", "polarization")
    assert PixelOptions().as_dict() == {k: sig[k].default for k in names}
    fib = fibre_series(n_frames=3)
    q0 = 2 * np.pi / 3.0
    band = (q0 - 0.06, q0 + 0.06)
    opts = dict(subpixels=1, solid_angle=False, polarization=False)
    prof = fib.saxs.azimuthal_profile(band, n_chi=36, **opts)
    out = fib.saxs.orientation(band, n_chi=36, director_deg=90.0, **opts)
    ref = hermans_orientation(prof.chi.values, prof.intensity.values, prof.sigma.values, director_deg=90.0)
    np.testing.assert_allclose(out.hermans.values, ref["hermans"])       # batch = direct call
    default = fib.saxs.orientation(band, n_chi=36, director_deg=90.0)
    assert not np.allclose(default.hermans.values, out.hermans.values, rtol=0, atol=1e-12)
