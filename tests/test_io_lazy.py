"""read_series(folder, chunks=N): a lazy series from blocks of files (issue 13 item 1).

Reference: the eager ``read_series(folder)`` of the same files (equal values, coords,
attrs and history: xarray.testing.assert_identical), and the text written here (the
line numbers of errors are counted by hand).
"""

import json
import warnings

import numpy as np
import pytest
import xarray as xr

pytest.importorskip("dask")
pytest.importorskip("zarr")

import saxsnb.io.text as text  # noqa: E402
from saxsnb.errors import SaxsFileError, SaxsWarning  # noqa: E402
from saxsnb.io import open_series, read_series, save_series  # noqa: E402
from tests.test_io_zarr import LargestBlock  # noqa: E402

Q = np.linspace(0.1, 2.0, 40)


def _folder(tmp_path, n=23, nan_in=5, no_sigma=7, with_dq=False):
    for i in range(n):
        I = 100 * np.exp(-Q * (i + 1) / 10)
        cols = [Q, I, 0.01 * I] + ([np.full(Q.size, 0.002)] if with_dq else [])
        if i == nan_in:
            cols[1] = cols[1].copy()
            cols[1][3] = np.nan
        if i == no_sigma and not with_dq:
            cols = cols[:2]
        body = "\n".join(" ".join(f"{v:.6g}" for v in row) for row in np.column_stack(cols))
        head = f"# q_unit = 1/A\n# temperature = {50 - 1.5 * i} degC\n# label = x{i % 3}\n# sample = gel\n"
        trailer = json.dumps({"exposure": {"value": i, "units": "s"}})
        (tmp_path / f"f{i}.dat").write_text(f"{head}{body}\n{trailer}\n")
    return tmp_path


@pytest.mark.parametrize("n", [1, 4, 7, 23, 100])
@pytest.mark.parametrize("with_dq", [False, True])
def test_lazy_read_equals_the_eager_read(tmp_path, n, with_dq):
    folder = _folder(tmp_path, with_dq=with_dq)
    with pytest.warns(SaxsWarning, match="masked"):
        eager = read_series(folder, scan="temperature")
    with pytest.warns(SaxsWarning, match="masked"):  # warned at once, as the eager read does
        lazy = read_series(folder, scan="temperature", chunks=n)
    assert lazy.intensity.chunks[0][0] == min(n, 23)
    assert lazy["mask"].chunks is not None and ("dq" in lazy) == with_dq
    xr.testing.assert_identical(lazy.compute(), eager)


def test_lazy_read_with_a_dict_and_q_chunks(tmp_path):
    folder = _folder(tmp_path, nan_in=-1)
    eager = read_series(folder)
    lazy = read_series(folder, chunks={"frame": 5, "q": 20})
    assert lazy.intensity.chunks == ((5, 5, 5, 5, 3), (20, 20))
    xr.testing.assert_identical(lazy.compute(), eager)


def test_errors_are_raised_at_once_naming_file_and_line(tmp_path):
    folder = _folder(tmp_path, nan_in=-1)
    p = folder / "f13.dat"
    lines = p.read_text().split("\n")
    lines[4 + 6] = "0.5 abc 0.1"  # 4 header lines, then row 6 of the data
    p.write_text("\n".join(lines))
    with pytest.raises(SaxsFileError, match="abc") as info:
        read_series(folder, chunks=4)
    assert info.value.path.endswith("f13.dat") and info.value.line == 11


def test_other_grid_is_refused_at_once(tmp_path):
    folder = _folder(tmp_path, nan_in=-1)
    p = folder / "f9.dat"
    p.write_text(p.read_text().replace("0.1 ", "0.11 ", 1))
    with pytest.raises(Exception, match="f9.dat.*q grid"):
        read_series(folder, chunks=4)


def test_blocks_of_files_are_read_and_never_all_at_once(tmp_path, monkeypatch):
    folder = _folder(tmp_path, nan_in=-1)
    calls = []
    original = text._read_batch

    def counting(paths):
        calls.append(len(paths))
        return original(paths)

    monkeypatch.setattr(text, "_read_batch", counting)
    monkeypatch.setattr(text, "_BATCH", 6)
    lazy = read_series(folder, chunks=4)
    assert max(calls) <= 6 and sum(calls) == 23 + 1  # the first pass (+ the first file for its grid)
    calls.clear()
    _ = lazy.intensity.isel(frame=slice(4, 8)).values  # one block: its 4 files only
    assert calls == [4]


def test_a_folder_converts_to_a_store_block_by_block(tmp_path, capsys):
    (tmp_path / "in").mkdir()
    folder = _folder(tmp_path / "in", nan_in=-1)
    eager = read_series(folder)
    cb = LargestBlock(Q.size)
    with cb:
        save_series(read_series(folder, chunks=5), tmp_path / "s.zarr", progress=True)
    assert cb.frames <= 5
    assert "writing" in capsys.readouterr().err  # the tqdm bar
    stored = open_series(tmp_path / "s.zarr", chunks={})
    assert stored.intensity.chunks[0][0] == 5
    xr.testing.assert_identical(stored.compute(), eager)


def test_regrid_reads_whole_then_chunks(tmp_path):
    folder = _folder(tmp_path, nan_in=-1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", SaxsWarning)
        eager = read_series(folder, regrid="first")
        lazy = read_series(folder, regrid="first", chunks=4)
    xr.testing.assert_identical(lazy.compute(), eager)


def test_unsorted_rows_are_sorted_as_in_the_eager_read(tmp_path):
    folder = _folder(tmp_path, nan_in=-1)
    for name in ("f0.dat", "f6.dat"):  # the first file too: its grid is the reference
        p = folder / name
        lines = p.read_text().split("\n")
        lines[5], lines[6] = lines[6], lines[5]
        p.write_text("\n".join(lines))
    with pytest.warns(SaxsWarning, match="sorted"):
        eager = read_series(folder)
    with pytest.warns(SaxsWarning, match="sorted"):
        lazy = read_series(folder, chunks=4)
    xr.testing.assert_identical(lazy.compute(), eager)
