"""Calibration of the detector geometry from a calibrant image (saxsnb.analysis._calibrant)."""

import numpy as np
import pytest

from saxsnb.analysis._calibrant import SILVER_BEHENATE_D, calibrant_orders, calibrate, find_ring_points
from saxsnb.analysis._geometry import DetectorGeometry
from saxsnb.analysis._masks import circle_mask, gap_mask
from saxsnb.demo_images import calibrant_geometry, calibrant_image
from saxsnb.errors import SaxsError, SaxsFitError


def test_silver_behenate_d_spacing():
    # Huang, Toraya, Blanton & Wu (1993), J. Appl. Cryst. 26, 180: d001 = 58.380 A
    assert SILVER_BEHENATE_D == 5.8380
    assert calibrant_orders(0.0, 2.2).tolist() == [1, 2]   # q_n = 2 pi n / d (Bragg, common practice)


@pytest.mark.parametrize("seed,tilt,rot", [(1, 2.5, 35.0), (2, 4.0, -120.0), (3, 0.0, 0.0)])
def test_calibration_recovers_known_geometry(seed, tilt, rot):
    true = calibrant_geometry().replace(tilt_deg=tilt, tilt_rotation_deg=rot)
    img = calibrant_image(true, seed=seed)               # Poisson noise, peak ~2000 counts
    start = true.replace(beam_center_x_px=true.beam_center_x_px - 5.0,
                         beam_center_y_px=true.beam_center_y_px + 4.0,
                         distance_mm=true.distance_mm * 1.03, tilt_deg=0.0, tilt_rotation_deg=0.0)
    res = calibrate(img, start)
    v, s = res["values"], res["sigma"]
    # issue 16 targets: centre within 0.1 px, distance within 0.05 %, tilt within 0.05 degrees
    assert abs(v["beam_center_x_px"] - true.beam_center_x_px) < 0.1
    assert abs(v["beam_center_y_px"] - true.beam_center_y_px) < 0.1
    assert abs(v["distance_mm"] / true.distance_mm - 1) < 5e-4
    assert abs(v["tilt_deg"] - tilt) < 0.05
    if tilt > 1:
        assert abs((v["tilt_rotation_deg"] - rot + 180) % 360 - 180) < 2.0
    # the reported uncertainties are of the size of the errors (within 5 sigma)
    for k in ("beam_center_x_px", "beam_center_y_px", "distance_mm"):
        assert 0 < s[k] < 0.05 * (1 if k != "distance_mm" else true.distance_mm / 100)
        assert abs(v[k] - getattr(true, k)) < 5 * s[k] + 0.01
    assert res["status"] == "ok"
    assert len(res["rings"]) >= 5
    assert all(r["rms_px"] < 0.3 for r in res["rings"] if r["points"] > 10)
    assert res["geometry"].shape == true.shape


def test_calibration_with_mask_and_beam_stop():
    true = calibrant_geometry()
    img = calibrant_image(true, seed=5).astype(float)
    mask = gap_mask(true.shape, rows=range(150, 160)) | circle_mask(true.shape, (208, 194), 20)
    img[mask] = 0.0
    start = true.replace(beam_center_x_px=205.0, beam_center_y_px=196.0, distance_mm=195.0, tilt_deg=0.0)
    res = calibrate(img, start, mask=mask)
    assert abs(res["values"]["beam_center_x_px"] - true.beam_center_x_px) < 0.1
    assert abs(res["values"]["distance_mm"] / true.distance_mm - 1) < 5e-4
    pts = res["ring_points"]
    assert not mask[np.round(pts["rows"]).astype(int), np.round(pts["cols"]).astype(int)].any()


def test_ring_points_lie_on_the_true_rings():
    true = calibrant_geometry()
    img = calibrant_image(true, noise=False)
    pts = find_ring_points(img, true)
    q = true.q_chi(pts["rows"], pts["cols"])[0]
    q_n = 2 * np.pi * pts["order"] / SILVER_BEHENATE_D
    # noise-free: points within ~0.03 px of the rings (ring 1 has radius ~31 px); the steep
    # background at low q biases the parabola vertex a little
    rel = q / q_n - 1
    assert np.sqrt(np.mean(rel**2)) < 2e-4
    assert np.abs(rel).max() < 1.5e-3


def test_no_rings_is_a_clear_error():
    rng = np.random.default_rng(1234)
    g = calibrant_geometry()
    flat = rng.poisson(50.0, size=g.shape)
    with pytest.raises(SaxsFitError, match="no calibrant ring"):
        calibrate(flat, g)
    tiny = DetectorGeometry(5, 5, 5000.0, 0.05, 0.05, 0.1, shape=(10, 10))   # q_max far below q_1
    with pytest.raises(SaxsError, match="ring"):
        calibrate(np.ones((10, 10)), tiny)
