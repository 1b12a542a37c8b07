"""NetCDF save/open round trips (saxsnb.io.store, saxsnb.io.netcdf)."""

import os

import numpy as np
import pytest
import xarray as xr

import saxsnb
from saxsnb.errors import SaxsFileError, SaxsInputError
from saxsnb.io import open_series, save_series
from saxsnb.io._attrs import MARKER, decode_attrs, encode_attrs
from saxsnb.series import add_history


def rich_series(rng, n=4, m=30):
    """A series with history, mask, dq, several scan coords, string attrs, unicode."""
    q = np.linspace(0.1, 3.0, m)
    I = 100 * np.exp(-np.outer(np.linspace(1, 2, n), q)) * (1 + 0.01 * rng.normal(size=(n, m)))
    mask = np.zeros((n, m), dtype=bool)
    mask[1, :3] = True
    ds = saxsnb.from_arrays(
        q,
        I,
        0.02 * I,
        scan={
            "temperature": 20.0 + 5.0 * np.arange(n),
            "time": (30.0 * np.arange(n), "s"),
            "position": (np.linspace(0, 1.5, n), "mm"),
            "label": np.array([f"step-{i}" for i in range(n)]),
        },
        mask=mask,
        sample="Ölsäure–Monoolein 3:1 (β)",
        wavelength_nm=0.1542,
        operator="a. n. other",
    )
    ds["dq"] = (("frame", "q"), np.full((n, m), 0.003), {"units": "1/nm", "long_name": "q resolution"})
    ds = add_history(ds, "subtract", scale=0.98, background="buffer.dat")
    ds = add_history(ds, "normalize", to="transmission")
    ds.attrs.update({"scan": "temperature", "flag": True, "nothing": None, "params": {"a": [1, 2]}})
    ds.attrs["source_files"] = ["a.dat", "b.dat", "c.dat", "d.dat"][:n]
    ds["intensity"].attrs["note"] = ["kept", "as list"]
    return ds


def test_attr_encoding_round_trips():
    attrs = {"h": ["x", "y"], "b": False, "n": None, "d": {"k": (1, 2)}, "s": "plain", "f": 1.5, "i": 3}
    enc = encode_attrs(attrs)
    assert enc["s"] == "plain" and enc["f"] == 1.5 and enc["h"].startswith(MARKER)
    assert decode_attrs(enc) == attrs


def test_netcdf_round_trip_is_identical(tmp_path, rng):
    ds = rich_series(rng)
    before = ds.copy(deep=True)
    path = tmp_path / "series.nc"
    save_series(ds, path)
    xr.testing.assert_identical(ds, before)  # input not modified
    back = open_series(path)
    xr.testing.assert_identical(back, ds)
    assert back.temperature.attrs["units"] == "degC" and back.time.attrs["units"] == "s"
    assert back.mask.dtype == bool
    assert os.listdir(tmp_path) == ["series.nc"]  # atomic: no temporary file left


def test_accessor_save_and_overwrite_the_file_just_opened(tmp_path, rng):
    ds = rich_series(rng)
    path = tmp_path / "s.nc"
    ds.saxs.save(path)
    back = open_series(path)
    back.saxs.save(path)  # the opened file is closed: overwriting works
    xr.testing.assert_identical(open_series(path), ds)
    with pytest.raises(SaxsFileError, match="overwrite=False"):
        save_series(ds, path, overwrite=False)


def test_chunks_give_dask_and_dask_series_save(tmp_path, rng):
    ds = rich_series(rng)
    path = tmp_path / "s.nc"
    save_series(ds.chunk({"frame": 2}), path)
    lazy = open_series(path, chunks={"frame": 2})
    assert lazy.intensity.chunks is not None
    xr.testing.assert_identical(lazy.compute(), ds)
    lazy.close()


def test_unknown_extension_and_missing_file(tmp_path, rng):
    ds = rich_series(rng)
    with pytest.raises(SaxsInputError, match="extension"):
        save_series(ds, tmp_path / "s.xlsx")
    with pytest.raises(SaxsFileError, match="no such file"):
        open_series(tmp_path / "missing.nc")


def test_not_a_netcdf_file(tmp_path):
    path = tmp_path / "junk.nc"
    path.write_bytes(b"not netcdf at all")
    with pytest.raises(SaxsFileError, match="junk.nc"):
        open_series(path)


def test_netcdf_that_is_not_a_series(tmp_path):
    path = tmp_path / "other.nc"
    xr.Dataset({"x": ("t", np.arange(3.0))}).to_netcdf(path, engine="h5netcdf")
    with pytest.raises(SaxsFileError, match="not a saxsnb series"):
        open_series(path)
