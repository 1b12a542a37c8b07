"""Chunked stores (issue 13 item 1): Zarr save/open, NetCDF written chunked from dask input,
and neither computing a dask-backed series whole.

References: the series written (round trips must be identical, xarray.testing); the
chunks and codecs reported by the zarr and h5py libraries themselves; dask's own
callback mechanism (dask.callbacks.Callback) to see the size of every computed array.
"""

import os

import numpy as np
import pytest
import xarray as xr

dask = pytest.importorskip("dask")
pytest.importorskip("zarr")

from dask.callbacks import Callback  # noqa: E402

from saxsnb.errors import SaxsFileError, SaxsInputError  # noqa: E402
from saxsnb.io import open_series, save_series  # noqa: E402
from tests.test_io_netcdf import rich_series  # noqa: E402


class LargestBlock(Callback):
    """Records the most frames of any (frame, q) array a dask task returned."""

    def __init__(self, n_q):
        super().__init__()
        self.n_q, self.frames, self.tasks = n_q, 0, 0

    def _posttask(self, key, result, dsk, state, id):
        self.tasks += 1
        if isinstance(result, np.ndarray) and result.ndim == 2 and result.shape[1] == self.n_q:
            self.frames = max(self.frames, result.shape[0])


def test_zarr_round_trip_in_memory_and_lazily(tmp_path, rng):
    ds = rich_series(rng, n=9)
    path = tmp_path / "series.zarr"
    ds.saxs.save(path)
    xr.testing.assert_identical(open_series(path), ds)
    lazy = open_series(path, chunks={})
    assert lazy.intensity.chunks is not None
    xr.testing.assert_identical(lazy.compute(), ds)
    assert lazy.attrs["history"] == ds.attrs["history"]


@pytest.mark.parametrize("fmt", ["zarr", "nc"])
@pytest.mark.parametrize("n", [1, 4, 9])
def test_dask_chunks_along_frame_are_kept_on_disk_and_on_opening(tmp_path, rng, fmt, n):
    ds = rich_series(rng, n=23)
    path = tmp_path / f"series.{fmt}"
    save_series(ds.chunk({"frame": n}), path)
    if fmt == "zarr":
        import zarr

        arr = zarr.open_group(str(path), mode="r")["intensity"]
        assert arr.chunks == (n, ds.sizes["q"])
        assert arr.compressors  # compressed (zarr's own report of the codecs)
        lazy = open_series(path, chunks={})  # the store's own chunks
    else:
        import h5py

        with h5py.File(path, "r") as f:
            assert f["intensity"].chunks == (n, ds.sizes["q"])
        lazy = open_series(path, chunks=n)
    assert lazy.intensity.chunks[0] == (n,) * (23 // n) + ((23 % n,) if 23 % n else ())
    xr.testing.assert_identical(lazy.compute(), ds)
    lazy.close()


def test_irregular_dask_chunks_are_made_uniform_for_zarr(tmp_path, rng):
    ds = rich_series(rng, n=10)
    path = tmp_path / "series.zarr"
    save_series(ds.chunk({"frame": (3, 5, 2)}), path)
    xr.testing.assert_identical(open_series(path), ds)


@pytest.mark.parametrize("fmt", ["zarr", "nc"])
def test_saving_and_opening_a_dask_series_never_computes_it_whole(tmp_path, rng, fmt):
    ds = rich_series(rng, n=40)
    path = tmp_path / f"series.{fmt}"
    seen = []

    def note(block):  # every block of intensity computed, as it is computed
        seen.append(block.shape[0])
        return block

    lazy = ds.chunk({"frame": 5})
    lazy["intensity"] = lazy.intensity.copy(data=lazy.intensity.data.map_blocks(note, dtype=float))
    cb = LargestBlock(ds.sizes["q"])
    with cb:
        save_series(lazy, path)
    # blocks were computed, and no task ever returned more than one chunk's frames (a
    # whole computation ends with a task that joins all blocks: it would be seen)
    assert seen and max(seen) == 5 and cb.tasks > 0 and cb.frames <= 5
    cb = LargestBlock(ds.sizes["q"])
    with cb:
        lazy = open_series(path, chunks=5 if fmt == "nc" else {})  # NetCDF checksums: block by block
        assert lazy.intensity.chunks[0][0] == 5
    assert cb.frames <= 5
    xr.testing.assert_identical(lazy.compute(), ds)
    lazy.close()


def test_the_block_counter_sees_a_whole_computation(rng):
    # the check above is meaningful: computing the series whole is seen
    ds = rich_series(rng, n=40).chunk({"frame": 5})
    cb = LargestBlock(ds.sizes["q"])
    with cb:
        _ = ds.intensity.values
    assert cb.frames == 40


def test_zarr_write_is_atomic_and_overwrite_replaces_the_store(tmp_path, rng):
    ds = rich_series(rng, n=6)
    path = tmp_path / "s.zarr"
    save_series(ds, path)
    with pytest.raises(SaxsFileError, match="exists"):
        save_series(ds, path, overwrite=False)
    other = ds.isel(frame=slice(0, 3))
    other.attrs["source_files"] = ds.attrs["source_files"][:3]
    save_series(other, path)
    xr.testing.assert_identical(open_series(path), other)
    assert sorted(os.listdir(tmp_path)) == ["s.zarr"]  # no temporary folder left


def test_a_damaged_zarr_chunk_is_refused(tmp_path, rng):
    ds = rich_series(rng, n=6)
    path = tmp_path / "s.zarr"
    save_series(ds.chunk({"frame": 3}), path)
    chunk = next(p for p in sorted((path / "intensity").rglob("*")) if p.is_file() and p.name != "zarr.json")
    data = bytearray(chunk.read_bytes())
    data[len(data) // 2] ^= 0xFF
    chunk.write_bytes(bytes(data))
    with pytest.raises(SaxsFileError, match="s.zarr"):
        open_series(path)


def test_missing_store_and_not_a_series(tmp_path):
    with pytest.raises(SaxsFileError, match="no such Zarr store"):
        open_series(tmp_path / "missing.zarr")
    xr.Dataset({"x": ("t", np.arange(3.0))}).to_zarr(tmp_path / "other.zarr", consolidated=False)
    with pytest.raises(SaxsFileError, match="not a saxsnb series"):
        open_series(tmp_path / "other.zarr")
    with pytest.raises(SaxsInputError, match="extension"):
        open_series(tmp_path / "s.zip")


def test_a_failed_zarr_write_keeps_the_old_store(tmp_path, rng):
    ds = rich_series(rng, n=6)
    path = tmp_path / "s.zarr"
    save_series(ds, path)
    lazy = ds.chunk({"frame": 2})

    def fail_third(block, block_info=None):  # the write stops half way
        if block_info[0]["chunk-location"][0] == 2:
            raise RuntimeError("disk gone")
        return block

    lazy["intensity"] = lazy.intensity.copy(data=lazy.intensity.data.map_blocks(fail_third, dtype=float))
    with pytest.raises(RuntimeError, match="disk gone"):
        save_series(lazy, path)
    xr.testing.assert_identical(open_series(path), ds)
    assert sorted(os.listdir(tmp_path)) == ["s.zarr"]
