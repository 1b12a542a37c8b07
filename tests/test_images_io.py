"""Image files in: TIFF and HDF5 / NeXus stacks (saxsnb.io.images)."""

import h5py
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from saxsnb.analysis import DetectorGeometry
from saxsnb.errors import SaxsFileError
from saxsnb.io.images import read_images, write_tiff

G = DetectorGeometry(10.0, 12.0, 800.0, 0.1, 0.1, 0.1, tilt_deg=1.0, shape=(24, 20))


def _frames(n=3, dtype=np.uint32):
    rng = np.random.default_rng(1234)
    return rng.integers(0, 1000, size=(n, 24, 20)).astype(dtype)


def test_tiff_folder_roundtrip_with_scan_and_geometry(tmp_path):
    frames = _frames(4)
    for i, f in enumerate(frames):
        write_tiff(tmp_path / f"img_{i:02d}.tif", f, metadata={"temperature": 20.0 + i, "label": "x",
                                                              **G.to_attrs()})
    ds = read_images(tmp_path)
    assert ds.counts.dims == ("frame", "y", "x") and ds.counts.dtype == np.uint32
    np.testing.assert_array_equal(ds.counts.values, frames)
    np.testing.assert_allclose(ds.temperature.values, [20, 21, 22, 23])
    assert ds.temperature.attrs["units"] == "degC"
    assert "label" not in ds.coords
    assert DetectorGeometry.from_attrs(ds.attrs) == G
    assert len(ds.attrs["source_files"]) == 4 and "read_images" in ds.attrs["history"][-1]
    # lazy (dask) reads give the same numbers
    lazy = read_images(sorted(tmp_path.glob("*.tif")), lazy=True)
    assert hasattr(lazy.counts.data, "dask")
    np.testing.assert_array_equal(lazy.counts.values, frames)
    # a glob
    assert read_images(str(tmp_path / "img_0[12].tif")).sizes["frame"] == 2


def test_multipage_tiff_stack(tmp_path):
    frames = _frames(5, np.float32)
    write_tiff(tmp_path / "stack.tiff", frames)
    ds = read_images(tmp_path / "stack.tiff", scan={"time": np.arange(5.0)})
    np.testing.assert_array_equal(ds.counts.values, frames)
    assert ds.time.attrs["units"] == "s"


def test_nexus_stack_with_geometry_and_compression(tmp_path):
    hdf5plugin = pytest.importorskip("hdf5plugin")
    frames = _frames(6, np.uint16)
    path = tmp_path / "scan.nxs"
    with h5py.File(path, "w") as f:
        e = f.create_group("entry")
        e.attrs["NX_class"] = "NXentry"
        d = e.create_group("data")
        d.attrs["NX_class"] = "NXdata"
        d.attrs["signal"] = "data"
        d.create_dataset("data", data=frames, chunks=(1, 24, 20), **hdf5plugin.Bitshuffle())
        det = e.create_group("instrument/detector")
        det.attrs["NX_class"] = "NXdetector"
        for key, val, unit in (("distance", 0.8, "m"), ("x_pixel_size", 100.0, "um"),
                               ("y_pixel_size", 0.1, "mm"), ("beam_center_x", 10.0, "pixel"),
                               ("beam_center_y", 1.2, "mm")):
            det[key] = val
            det[key].attrs["units"] = unit
        beam = e.create_group("sample/beam")
        beam.attrs["NX_class"] = "NXbeam"
        beam["incident_wavelength"] = 1.0
        beam["incident_wavelength"].attrs["units"] = "angstrom"
    ds = read_images(path)
    np.testing.assert_array_equal(ds.counts.values, frames)
    g = DetectorGeometry.from_attrs(ds.attrs)
    # units converted: 0.8 m, 100 um, 1.2 mm / 0.1 mm = 12 px, 1 angstrom = 0.1 nm
    for k, v in dict(beam_center_x_px=10.0, beam_center_y_px=12.0, distance_mm=800.0, pixel_size_x_mm=0.1,
                     pixel_size_y_mm=0.1, wavelength_nm=0.1).items():
        assert getattr(g, k) == pytest.approx(v, rel=1e-12)
    assert g.shape == (24, 20)
    lazy = read_images(path, lazy=True)
    assert hasattr(lazy.counts.data, "dask")
    np.testing.assert_array_equal(lazy.counts.values, frames)


def test_plain_hdf5_first_3d_dataset(tmp_path):
    frames = _frames(2, np.float64)
    with h5py.File(tmp_path / "a.h5", "w") as f:
        f["meta/temperature"] = [1.0, 2.0]
        f["images"] = frames
    np.testing.assert_array_equal(read_images(tmp_path / "a.h5").counts.values, frames)
    with pytest.raises(SaxsFileError, match="no dataset"):
        read_images(tmp_path / "a.h5", dataset="nope")


def test_bad_files_name_the_file(tmp_path):
    write_tiff(tmp_path / "a.tif", np.zeros((24, 20), np.uint16))
    write_tiff(tmp_path / "b.tif", np.zeros((10, 20), np.uint16))
    with pytest.raises(SaxsFileError, match=r"b\.tif.*differs"):
        read_images(tmp_path)
    bad = tmp_path / "c.tif"
    bad.write_bytes(b"II*\x00garbage")
    with pytest.raises(SaxsFileError, match=r"c\.tif"):
        read_images(bad)
    import tifffile

    tifffile.imwrite(tmp_path / "rgb.tif", np.zeros((8, 8, 3), np.uint8), photometric="rgb")
    with pytest.raises(SaxsFileError, match=r"rgb\.tif.*colour"):
        read_images(tmp_path / "rgb.tif")
    (tmp_path / "d.h5").write_bytes(b"not hdf5")
    with pytest.raises(SaxsFileError, match=r"d\.h5"):
        read_images(tmp_path / "d.h5")
    with pytest.raises(SaxsFileError, match="no image files"):
        read_images(tmp_path / "missing_*.tif")
    with h5py.File(tmp_path / "e.h5", "w") as f:
        f["x"] = [1.0, 2.0]
    with pytest.raises(SaxsFileError, match=r"e\.h5.*no image stack"):
        read_images(tmp_path / "e.h5")


@settings(max_examples=15, deadline=None)
@given(st.sampled_from([np.uint8, np.uint16, np.uint32, np.int32, np.float32, np.float64]),
       st.integers(1, 3), st.integers(1, 9), st.integers(1, 9))
def test_tiff_roundtrip_property(dtype, n, ny, nx):
    import tempfile
    from pathlib import Path

    rng = np.random.default_rng(1234)
    a = (rng.random((n, ny, nx)) * 200).astype(dtype)
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "x.tif"
        write_tiff(p, a if n > 1 else a[0])
        ds = read_images(p)
        assert ds.counts.dtype == a.dtype
        np.testing.assert_array_equal(ds.counts.values, a)


def test_image_demo_files_small_and_lossless(tmp_path):
    from saxsnb.demo.files import write_demo
    from saxsnb.demo_images import calibrant_image, fibre_series

    folder = write_demo(tmp_path, names=["images"])["images"]
    files = sorted(folder.rglob("*.tif"))
    assert len(files) == 22 and (folder / "README.md").exists()
    assert sum(f.stat().st_size for f in files) < 5e6        # "a few MB at most"
    fib = read_images(folder / "fibre")
    np.testing.assert_array_equal(fib.counts.values, fibre_series().counts.values)   # lossless
    np.testing.assert_allclose(fib.strain.values, fibre_series().strain.values)
    cal = read_images(folder / "calibrant.tif")
    np.testing.assert_array_equal(cal.counts.values[0], calibrant_image())


def test_recipe_starts_from_read_images(tmp_path):
    # the history keeps the source as given (a folder), so the recipe reads the same files
    # again and rebuilds the series identically (xarray's assert_identical); arrays given
    # to read_images are not in the history: no recipe, said; integration steps neither
    import xarray as xr

    from saxsnb.errors import SaxsInputError

    for i, f in enumerate(_frames(3)):
        write_tiff(tmp_path / f"img_{i:02d}.tif", f, metadata={"temperature": 20.0 + i, **G.to_attrs()})
    ds = read_images(tmp_path)
    ns = {}
    exec(ds.saxs.recipe("images"), ns)
    xr.testing.assert_identical(ns["images"], ds)
    with pytest.raises(SaxsInputError, match="given mask"):
        read_images(tmp_path, mask=np.zeros(ds.counts.shape[1:], bool)).saxs.recipe()
    with pytest.raises(SaxsInputError, match="image steps"):
        ds.saxs.integrate(n_bins=20).saxs.recipe()
