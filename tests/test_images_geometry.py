"""Detector geometry and the sparse integration (saxsnb.analysis._geometry, _integrate)."""

import numpy as np
import pytest
from scipy.optimize import curve_fit
from scipy.spatial.transform import Rotation

from saxsnb.analysis._geometry import DetectorGeometry
from saxsnb.analysis._integrate import integration_matrix
from saxsnb.errors import SaxsError


def _geom(**kw):
    base = dict(beam_center_x_px=60.3, beam_center_y_px=47.8, distance_mm=400.0, pixel_size_x_mm=0.172,
                pixel_size_y_mm=0.172, wavelength_nm=0.15406, tilt_deg=0.0, tilt_rotation_deg=0.0,
                shape=(96, 128))
    base.update(kw)
    return DetectorGeometry(**base)


def _two_theta_reference(g, rows, cols):
    """2 theta by vector geometry, independent of saxsnb: scipy's Rotation (a reference library)
    turns the detector's in-plane axes about the tilt axis; angle to the beam from the cross and
    dot products with the beam direction (well conditioned at small angles)."""
    rho, tau = np.radians(g.tilt_rotation_deg), np.radians(g.tilt_deg)
    rot = Rotation.from_rotvec(tau * np.array([np.cos(rho), np.sin(rho), 0.0]))
    ex, ey = rot.apply([1.0, 0.0, 0.0]), rot.apply([0.0, 1.0, 0.0])
    u = (np.asarray(cols) - g.beam_center_x_px) * g.pixel_size_x_mm
    v = (np.asarray(rows) - g.beam_center_y_px) * g.pixel_size_y_mm
    r = np.array([0, 0, g.distance_mm]) + u[..., None] * ex + v[..., None] * ey
    beam = np.array([0.0, 0.0, 1.0])
    return np.arctan2(np.linalg.norm(np.cross(r, beam), axis=-1), r @ beam), r


def test_tilt_about_x_closed_form():
    # closed form (common practice, plane geometry): a detector turned by tau about its x axis
    # puts the point v below the beam centre at (0, v cos tau, L + v sin tau), so
    # tan(2 theta) = v cos(tau) / (L + v sin(tau)).
    tau = 7.0
    g = _geom(tilt_deg=tau, tilt_rotation_deg=0.0)
    rows = np.arange(96.0)
    cols = np.full_like(rows, g.beam_center_x_px)
    v = (rows - g.beam_center_y_px) * g.pixel_size_y_mm
    t = np.radians(tau)
    tth = np.arctan2(np.abs(v * np.cos(t)), g.distance_mm + v * np.sin(t))
    q_expected = 4 * np.pi * np.sin(tth / 2) / g.wavelength_nm
    q, chi = g.q_chi(rows, cols)
    np.testing.assert_allclose(q, q_expected, rtol=1e-12, atol=1e-12)
    assert np.all(np.isclose(np.abs(chi[v != 0]), 90.0))


@pytest.mark.parametrize("tilt,rot", [(0.0, 0.0), (3.0, 25.0), (12.0, -130.0), (5.0, 90.0)])
def test_pixel_q_against_vector_geometry(tilt, rot):
    g = _geom(tilt_deg=tilt, tilt_rotation_deg=rot)
    rows, cols = np.meshgrid(np.arange(96.0), np.arange(128.0), indexing="ij")
    tth_ref, r = _two_theta_reference(g, rows, cols)
    q_ref = 4 * np.pi * np.sin(tth_ref / 2) / g.wavelength_nm   # q = 4 pi sin(theta)/lambda, common practice
    np.testing.assert_allclose(g.q_map(), q_ref, rtol=1e-10)
    chi_ref = np.degrees(np.arctan2(r[..., 1], r[..., 0]))
    dchi = (g.chi_map() - chi_ref + 180) % 360 - 180
    assert np.abs(dchi).max() < 1e-9
    # solid angle: area x cos(incidence) / distance^2, with the normal from scipy's rotation
    axis = np.array([np.cos(np.radians(rot)), np.sin(np.radians(rot)), 0])
    n = Rotation.from_rotvec(np.radians(tilt) * axis)
    normal = n.apply([0.0, 0.0, 1.0])
    d = np.linalg.norm(r, axis=-1)
    omega = 0.172**2 * (r @ normal) / d / d**2
    np.testing.assert_allclose(g.solid_angle(relative=False), omega, rtol=1e-10)


def test_solid_angle_and_polarisation_untilted():
    g = _geom()
    tth = np.arctan(np.hypot(*np.meshgrid(np.arange(96.0) - 47.8, np.arange(128.0) - 60.3,
                                         indexing="ij")) * 0.172 / 400.0)
    # flat detector facing the beam: relative solid angle cos^3(2 theta) (common practice)
    np.testing.assert_allclose(g.solid_angle(), np.cos(tth) ** 3, rtol=1e-12)
    # unpolarised beam: (1 + cos^2 2theta)/2 (common practice, Thomson scattering)
    np.testing.assert_allclose(g.polarization_factor(), (1 + np.cos(tth) ** 2) / 2, rtol=1e-12)
    # fully polarised along x: 1 - sin^2(2theta) cos^2(chi) (from memory)
    chi = np.radians(g.chi_map())
    np.testing.assert_allclose(g.polarization_factor(polarization=1.0),
                               1 - np.sin(tth) ** 2 * np.cos(chi) ** 2, rtol=1e-12)


def test_ring_inverse_and_attrs_roundtrip():
    g = _geom(tilt_deg=4.0, tilt_rotation_deg=33.0)
    rows, cols = g.ring(1.2, np.linspace(-180, 179, 50))
    np.testing.assert_allclose(g.q_chi(rows, cols)[0], 1.2, rtol=1e-10)
    np.testing.assert_allclose((g.q_chi(rows, cols)[1] - np.linspace(-180, 179, 50) + 180) % 360 - 180, 0,
                               atol=1e-8)
    assert DetectorGeometry.from_attrs(g.to_attrs()) == g


def test_bad_geometry_errors():
    with pytest.raises(SaxsError, match="off the"):
        _geom(beam_center_x_px=500.0)
    with pytest.raises(SaxsError, match="distance_mm"):
        _geom(distance_mm=-1.0)
    with pytest.raises(SaxsError, match="geometry_distance_mm"):
        DetectorGeometry.from_attrs({"geometry_beam_center_x_px": 1.0})


def _gauss(x, a, x0, s, b):
    return a * np.exp(-0.5 * ((x - x0) / s) ** 2) + b


@pytest.mark.parametrize("tilt,rot", [(0.0, 0.0), (6.0, 40.0)])
def test_ring_at_known_d_integrates_to_right_q(tilt, rot):
    # a powder ring at d = 5 nm: q0 = 2 pi / d (Bragg, common practice). The image is made
    # from the independent vector geometry, not from saxsnb's q map.
    g = DetectorGeometry(250.0, 240.0, 600.0, 0.1, 0.1, 0.1, tilt_deg=tilt, tilt_rotation_deg=rot,
                         shape=(500, 520))
    q0 = 2 * np.pi / 5.0
    rows, cols = np.meshgrid(np.arange(500.0), np.arange(520.0), indexing="ij")
    img = np.zeros((500, 520))
    for dy in (-0.25, 0.25):      # 2 x 2 sub-pixel average
        for dx in (-0.25, 0.25):
            tth, _ = _two_theta_reference(g, rows + dy, cols + dx)
            q = 4 * np.pi * np.sin(tth / 2) / g.wavelength_nm
            img += 0.25 * 1000 * np.exp(-0.5 * ((q - q0) / 0.01) ** 2)
    m = integration_matrix(g, n_bins=400, q_range=(0.9, 1.6), subpixels=2, solid_angle=False,
                           polarization=False)
    I = m.integrate(img)["intensity"][0]
    sel = np.abs(m.q - q0) < 0.03
    p, _ = curve_fit(_gauss, m.q[sel], I[sel], p0=[1000, q0 * 1.002, 0.01, 0])
    assert abs(p[1] / q0 - 1) < 5e-4      # issue 16: within 0.05 %


def test_count_conservation_with_splitting():
    g = _geom(tilt_deg=2.0, tilt_rotation_deg=10.0)
    rng = np.random.default_rng(1234)
    frames = rng.poisson(50.0, size=(4, 96, 128)).astype(np.uint32)
    for s in (1, 2, 3):
        m = integration_matrix(g, n_bins=60, subpixels=s, solid_angle=False, polarization=False)
        # every pixel lies in the default range: sum over bins of (mean x pixels) = total counts;
        # float64 images take the float64 route (1e-12), integer counts the float32 one (1e-6,
        # the tolerance documented in IntegrationMatrix.integrate)
        for data, rtol in ((frames.astype(float), 1e-12), (frames, 1e-6)):
            out = m.integrate(data)
            np.testing.assert_allclose((out["intensity"] * out["pixels"]).sum(axis=1),
                                       frames.reshape(4, -1).sum(axis=1), rtol=rtol)
        np.testing.assert_allclose(out["pixels"].sum(), 96 * 128, rtol=1e-12)


def test_flat_image_gives_flat_curve_after_solid_angle():
    # a uniform scatterer sends counts proportional to each pixel's solid angle and polarisation
    g = _geom(tilt_deg=8.0, tilt_rotation_deg=-60.0)
    img = 123.0 * g.solid_angle() * g.polarization_factor()
    m = integration_matrix(g, n_bins=50, subpixels=3)
    I = m.integrate(img)["intensity"][0]
    np.testing.assert_allclose(I[np.isfinite(I)], 123.0, rtol=1e-12)
    raw = integration_matrix(g, n_bins=50, subpixels=3, solid_angle=False, polarization=False)
    assert np.ptp(raw.integrate(img)["intensity"][0]) > 1.0   # without the correction it is not flat


def test_sparse_equals_bincount_per_frame():
    g = _geom(tilt_deg=3.0, tilt_rotation_deg=70.0)
    rng = np.random.default_rng(1234)
    frames = rng.poisson(20.0, size=(5, 96, 128)).astype(float)
    mask = np.zeros((96, 128), bool)
    mask[40:50, 55:70] = True
    edges = np.linspace(0.05, 1.0, 41)
    for s in (1, 2):
        m = integration_matrix(g, mask=mask, q_edges=edges, subpixels=s, solid_angle=True, polarization=True)
        out = m.integrate(frames)
        w = (g.solid_angle() * g.polarization_factor()).ravel()
        off = (np.arange(s) + 0.5) / s - 0.5
        idx, pix = [], []
        for dy in off:
            for dx in off:
                q, _ = g.q_chi(np.arange(96.0)[:, None] + dy, np.arange(128.0)[None, :] + dx)
                b = np.searchsorted(edges, q.ravel(), side="right") - 1
                ok = (b >= 0) & (b < 40) & ~mask.ravel()
                idx.append(b[ok])
                pix.append(np.flatnonzero(ok))
        idx, pix = np.concatenate(idx), np.concatenate(pix)
        norm = np.bincount(idx, weights=w[pix] / s**2, minlength=40)
        for f in range(5):   # brute force, one frame at a time
            c = frames[f].ravel()
            tot = np.bincount(idx, weights=c[pix] / s**2, minlength=40)
            np.testing.assert_allclose(out["intensity"][f], tot / norm, rtol=1e-12)


def test_poisson_sigma_matches_scatter_over_frames():
    g = _geom()
    rng = np.random.default_rng(1234)
    frames = rng.poisson(30.0, size=(400, 96, 128))
    m = integration_matrix(g, n_bins=20, subpixels=1, solid_angle=False, polarization=False)
    out = m.integrate(frames)
    # Poisson: var(sum of N pixels) = N lambda (common practice)
    ratio = out["intensity"].std(axis=0, ddof=1) / out["sigma"].mean(axis=0)
    assert np.all(np.abs(ratio - 1) < 0.2)
    assert abs(ratio.mean() - 1) < 0.05


def test_cake_sums_to_curve_and_nonfinite_pixels():
    g = _geom(tilt_deg=1.0)
    rng = np.random.default_rng(1234)
    frames = rng.poisson(10.0, size=(3, 96, 128)).astype(float)
    edges = np.linspace(0.02, 0.9, 31)
    cake = integration_matrix(g, q_edges=edges, n_chi=36, solid_angle=False, polarization=False)
    curve = integration_matrix(g, q_edges=edges, solid_angle=False, polarization=False)
    c = cake.integrate(frames)
    assert c["intensity"].shape == (3, 30, 36)
    np.testing.assert_allclose(c["counts"].sum(axis=2), curve.integrate(frames)["counts"], rtol=1e-12)
    # a NaN pixel in frame 1 drops out of that frame only
    bad = frames.copy()
    bad[1, 10, 10] = np.nan
    masked = np.zeros((96, 128), bool)
    masked[10, 10] = True
    ref = integration_matrix(g, q_edges=edges, mask=masked, solid_angle=False, polarization=False)
    np.testing.assert_allclose(curve.integrate(bad)["intensity"][1], ref.integrate(frames)["intensity"][1],
                               rtol=1e-12)


def test_sector_and_mask_errors():
    g = _geom()
    sec = integration_matrix(g, n_bins=10, chi_range=(170, -170), solid_angle=False, polarization=False)
    assert 0 < sec.pixels.sum() < 96 * 128 * 0.1
    with pytest.raises(SaxsError, match="mask"):
        integration_matrix(g, mask=np.ones((96, 128), bool))
    with pytest.raises(SaxsError, match="mask"):
        integration_matrix(g, mask=np.ones((5, 5), bool))
    m = integration_matrix(g, n_bins=10)
    with pytest.raises(SaxsError, match="images"):
        m.integrate(np.ones((2, 10, 10)))


def test_float32_route_equals_float64_route():
    # the fast route (float32 buffers, per-block float32 sums) against the general float64 route
    g = _geom(tilt_deg=2.0, tilt_rotation_deg=30.0)
    rng = np.random.default_rng(1234)
    frames = rng.poisson(300.0, size=(7, 96, 128)).astype(np.uint32)
    frames[2, 10, 10] = 2**31          # above 2**24: that block goes through float64
    for s in (1, 2):
        m = integration_matrix(g, n_bins=70, subpixels=s)
        fast = m.integrate(frames, chunk=3)
        ref = m.integrate(frames.astype(float), variance=frames.astype(float), chunk=3)   # general route
        for k in ("counts", "intensity", "sigma"):
            np.testing.assert_allclose(fast[k], ref[k], rtol=1e-6, equal_nan=True)
    # a chunk with a NaN pixel goes the general route, the other chunks stay fast: same result
    f = frames.astype(np.float32)
    f[4, 50, 60] = np.nan
    m = integration_matrix(g, n_bins=70, subpixels=2)
    mixed = m.integrate(f, chunk=2)
    alone = np.stack([m.integrate(f[i:i + 1].astype(float))["intensity"][0] for i in range(7)])
    np.testing.assert_allclose(mixed["intensity"], alone, rtol=1e-6, equal_nan=True)
