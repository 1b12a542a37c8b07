"""NXcanSAS (HDF5) writing and reading, including files laid out as other writers do."""

import h5py
import numpy as np
import pytest
import xarray as xr
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from test_io_netcdf import rich_series

from saxsnb.errors import SaxsError, SaxsFileError
from saxsnb.io import open_series, save_series

Q = np.linspace(0.01, 0.3, 25)  # 1/A


def test_round_trip_is_identical(tmp_path, rng):
    ds = rich_series(rng)
    before = ds.copy(deep=True)
    path = tmp_path / "s.h5"
    save_series(ds, path)
    xr.testing.assert_identical(ds, before)
    xr.testing.assert_identical(open_series(path), ds)
    ds.saxs.save(tmp_path / "s.nxs")
    xr.testing.assert_identical(open_series(tmp_path / "s.nxs"), ds)


def test_written_file_follows_the_nxcansas_layout(tmp_path, rng):
    ds = rich_series(rng)
    path = tmp_path / "s.h5"
    save_series(ds, path)
    # NXcanSAS application definition (canSAS working group), from memory
    with h5py.File(path, "r") as f:
        e = f["sasentry01"]
        assert e.attrs["canSAS_class"] == "SASentry" and e.attrs["NX_class"] == "NXentry"
        assert e["definition"].asstr()[()] == "NXcanSAS"
        d = e["sasdata01"]
        assert d.attrs["canSAS_class"] == "SASdata" and d.attrs["signal"] == "I"
        assert d.attrs["I_axes"] == "temperature,Q"
        assert d["I"].shape == (4, 30) and d["I"].attrs["uncertainties"] == "Idev"
        assert d["Q"].attrs["units"] == "1/nm" and d["Q"].attrs["resolutions"] == "Qdev"
        assert d["temperature"].attrs["units"] == "degC"
        assert d["Mask"].dtype == np.int8 and d["Mask"][1, 0] == 1
        assert e["sasprocess"]["note001"].asstr()[()] == ds.attrs["history"][0]


def _sasdata(g, q, I, S, q_unit="1/A"):
    g.attrs.update({"NX_class": "NXdata", "canSAS_class": "SASdata", "signal": "I", "I_axes": "Q"})
    g["Q"] = q
    g["Q"].attrs["units"] = q_unit
    g["I"] = I
    g["I"].attrs.update({"units": "1/cm", "uncertainties": "Idev"})
    g["Idev"] = S
    g["Idev"].attrs["units"] = "1/cm"


def _entry(f, name, T=None):
    e = f.create_group(name)
    e.attrs.update({"NX_class": "NXentry", "canSAS_class": "SASentry", "version": "1.1"})
    e["definition"] = "NXcanSAS"
    e["title"] = f"scan point {name}"
    e["run"] = "7"
    if T is not None:
        s = e.create_group("sassample")
        s.attrs.update({"NX_class": "NXsample", "canSAS_class": "SASsample"})
        s["name"] = "capillary 3"
        s["temperature"] = T
        s["temperature"].attrs["units"] = "K"
    return e


def test_reads_one_sasentry_per_frame(tmp_path):
    path = tmp_path / "foreign.h5"
    with h5py.File(path, "w") as f:
        for k, T in enumerate([300.0, 310.0, 320.0]):
            e = _entry(f, f"sasentry{k + 1:02d}", T)
            _sasdata(e.create_group("sasdata"), Q, (k + 1) * np.exp(-Q), 0.01 * np.ones_like(Q))
    ds = open_series(path)
    assert dict(ds.sizes) == {"frame": 3, "q": 25}
    np.testing.assert_allclose(ds.q.values, 10 * Q)  # 1/A -> 1/nm (common practice)
    np.testing.assert_allclose(ds.intensity.values[2], 3 * np.exp(-Q))
    assert ds.intensity.attrs["units"] == "1/cm"
    assert ds.temperature.values.tolist() == [300.0, 310.0, 320.0]
    assert ds.temperature.attrs["units"] == "K"
    assert ds.attrs["sample"] == "capillary 3"
    assert ds.attrs["source_files"] == ["foreign.h5"]


def test_reads_several_sasdata_in_one_entry_and_a_stacked_one(tmp_path):
    path = tmp_path / "multi.nxs"
    with h5py.File(path, "w") as f:
        e = _entry(f, "entry")
        for k in range(2):
            _sasdata(e.create_group(f"sasdata{k}"), Q, (k + 1) * np.exp(-Q), 0.1 * np.ones_like(Q))
    assert open_series(path).sizes["frame"] == 2
    path = tmp_path / "stacked.h5"
    with h5py.File(path, "w") as f:
        e = _entry(f, "entry")
        d = e.create_group("data")
        _sasdata(d, Q, np.outer([1, 2, 3, 4], np.exp(-Q)), np.full((4, Q.size), 0.1))
        d.attrs["I_axes"] = "time,Q"
        d["time"] = [0.0, 10.0, 20.0, 30.0]
        d["time"].attrs["units"] = "s"
        d["Mask"] = np.zeros((4, Q.size), dtype=np.int8)
        d["Mask"][0, 0] = 1
        d.attrs["mask"] = "Mask"
    ds = open_series(path)
    assert ds.time.values.tolist() == [0.0, 10.0, 20.0, 30.0] and ds.time.attrs["units"] == "s"
    assert bool(ds.mask.values[0, 0]) and int(ds.mask.sum()) == 1


def test_missing_required_parts(tmp_path):
    path = tmp_path / "bad.h5"
    with h5py.File(path, "w") as f:
        e = _entry(f, "entry")
        _sasdata(e.create_group("sasdata"), Q, np.exp(-Q), np.ones_like(Q))
        del e["sasdata"]["Q"].attrs["units"]
    with pytest.raises(SaxsFileError, match=r"bad\.h5.*'units'"):
        open_series(path)
    with h5py.File(path, "w") as f:
        f.create_group("something")
    with pytest.raises(SaxsFileError, match="no NXcanSAS entry"):
        open_series(path)
    with h5py.File(path, "w") as f:
        e = _entry(f, "entry")
        g = e.create_group("sasdata")
        g.attrs["canSAS_class"] = "SASdata"
        g["Q"] = Q
    with pytest.raises(SaxsFileError, match="'I'"):
        open_series(path)
    path.write_bytes(b"not hdf5")
    with pytest.raises(SaxsFileError, match="bad.h5"):
        open_series(path)


def test_entries_on_different_grids(tmp_path):
    path = tmp_path / "grids.h5"
    with h5py.File(path, "w") as f:
        _sasdata(_entry(f, "a").create_group("d"), Q, np.exp(-Q), np.ones_like(Q))
        _sasdata(_entry(f, "b").create_group("d"), Q * 1.1, np.exp(-Q), np.ones_like(Q))
    with pytest.raises(SaxsFileError, match="q grid"):
        open_series(path)


def test_chunks(tmp_path, rng):
    ds = rich_series(rng)
    save_series(ds, tmp_path / "s.h5")
    lazy = open_series(tmp_path / "s.h5", chunks=2)
    assert lazy.intensity.chunks[0] == (2, 2)
    xr.testing.assert_identical(lazy.compute(), ds)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    drop=st.sets(st.sampled_from(["canSAS_class", "units", "I", "Q", "Idev", "layout", "signal"])),
    junk=st.binary(max_size=64),
)
def test_property_damaged_nxcansas_raises_only_our_errors(tmp_path, drop, junk):
    path = tmp_path / "d.h5"
    with h5py.File(path, "w") as f:
        e = _entry(f, "entry", 300.0)
        d = e.create_group("sasdata")
        _sasdata(d, Q, np.exp(-Q), np.full(Q.size, 0.1))
        if "canSAS_class" in drop:
            del e.attrs["canSAS_class"], e.attrs["NX_class"]
        if "units" in drop:
            del d["Q"].attrs["units"]
        for name in ("I", "Q", "Idev"):
            if name in drop:
                del d[name]
        if "signal" in drop:
            d.attrs["signal"] = "nothing"
        if "layout" in drop:
            # HDF5 string attributes cannot hold NUL bytes (h5py refuses them on write)
            d.attrs["saxsnb_layout"] = junk.replace(b"\x00", b"").decode("latin-1")
    try:
        ds = open_series(path)
    except SaxsError:
        return
    assert ds.sizes["frame"] == 1


# ------------------------------------------------ a dask series, chunk by chunk (issue 13)
def test_dask_series_is_written_chunk_by_chunk(tmp_path, rng, never_whole):
    ds = rich_series(rng)
    save_series(ds, tmp_path / "whole.h5")
    lazy = ds.chunk({"frame": 3})
    shape = ds["intensity"].shape
    with never_whole(shape) as calls:
        with pytest.raises(AssertionError, match="whole"):  # the guard works
            _ = lazy["intensity"].values
        calls.n = 0
        save_series(lazy, tmp_path / "s.h5")
    # one computation per chunk (every variable's block together), one for the string label
    assert calls.n == 3
    xr.testing.assert_identical(open_series(tmp_path / "s.h5"), ds)
    with h5py.File(tmp_path / "s.h5", "r") as f, h5py.File(tmp_path / "whole.h5", "r") as g:
        d, e = f["sasentry01/sasdata01"], g["sasentry01/sasdata01"]
        for name in ("I", "Idev", "Mask", "Qdev", "temperature"):
            assert d[name].chunks[0] == 3, name  # chunked along frame like the series
            assert d[name].attrs["saxsnb_sha256"] == e[name].attrs["saxsnb_sha256"], name
            np.testing.assert_array_equal(d[name][()], e[name][()])


def test_dask_series_failing_midway_leaves_no_file(tmp_path, rng):
    da = pytest.importorskip("dask.array")
    ds = rich_series(rng)
    path = tmp_path / "s.h5"
    save_series(ds, path)
    before = path.read_bytes()

    def second_fails(block, block_info=None):
        if block_info[0]["chunk-location"][0] == 1:
            raise RuntimeError("disk of the beamline went away")
        return block

    lazy = ds.chunk({"frame": 2})
    lazy["sigma"] = (("frame", "q"), da.map_blocks(second_fails, lazy["sigma"].data, dtype=float),
                     ds["sigma"].attrs)
    with pytest.raises(RuntimeError, match="went away"):
        save_series(lazy, path)
    assert path.read_bytes() == before  # the old file is untouched (atomic write)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["s.h5"]  # no temporary left
