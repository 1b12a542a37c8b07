"""Integrity of written files (issue 12): checksums refuse damage, writes are atomic
(old file or complete new one, never a part or a mix), file modes and symlinks behave
like a plain write, text export is one set.

Reference for the checksums: hashlib's SHA-256; for modes: POSIX umask semantics
(a new file gets 0o666 & ~umask, common practice).
"""

import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

import saxsnb
from saxsnb.errors import SaxsError, SaxsFileError, SaxsInputError
from saxsnb.io import _atomic, _integrity, write_text_series
from saxsnb.io._integrity import TRAILER_SIZE


def _series(scale=1.0, n_f=3, n_q=40):
    q = np.linspace(0.1, 2.0, n_q)
    I = scale * (1.0 + np.arange(n_f)[:, None] + np.exp(-q))[: n_f] * np.ones((n_f, n_q))
    return saxsnb.from_arrays(q, I, 0.01 * I, scan={"temperature": (20.0 + np.arange(n_f), "degC")})


# ------------------------------------------------------------------- checksums
@pytest.mark.parametrize("ext", [".nc", ".h5"])
def test_one_flipped_byte_in_an_array_is_refused(tmp_path, ext):
    ds = _series()
    p = tmp_path / f"a{ext}"
    saxsnb.save_series(ds, p)
    raw = bytearray(p.read_bytes())
    data = ds.intensity.values.tobytes()  # stored contiguous, little-endian float64
    i = raw.find(data)
    assert i > 0
    flipped = bytearray(raw)
    flipped[i + 100] ^= 0x01
    p.write_bytes(bytes(flipped))
    with pytest.raises(SaxsFileError, match="checksum saxsnb wrote at its end"):
        saxsnb.open_series(p)
    # without the whole-file record (as after another program's rewrite) the array's
    # own checksum refuses the flip
    p.write_bytes(bytes(flipped[:-TRAILER_SIZE]))
    with pytest.raises(SaxsFileError, match="differ from the checksum stored with them"):
        saxsnb.open_series(p)
    # the intact file without its trailer still reads exactly
    p.write_bytes(bytes(raw[:-TRAILER_SIZE]))
    xr.testing.assert_identical(saxsnb.open_series(p), ds)


@pytest.mark.parametrize("ext", [".nc", ".h5"])
def test_byte_damage_returns_or_raises_from_the_family_in_bounded_time(tmp_path, ext):
    ds = _series()
    p = tmp_path / f"a{ext}"
    saxsnb.save_series(ds, p)
    raw = p.read_bytes()
    rng = np.random.default_rng(12)
    slowest = 0.0
    for k in range(40):
        b = bytearray(raw[:-TRAILER_SIZE] if k % 2 else raw)
        end = len(b) - (0 if k % 2 else TRAILER_SIZE)
        i = int(rng.integers(0, end))
        b[i : i + 8] = rng.integers(0, 256, len(b[i : i + 8])).astype(np.uint8).tobytes()
        p.write_bytes(bytes(b))
        t0 = time.perf_counter()
        try:
            back = saxsnb.open_series(p)
        except SaxsError as exc:
            assert "a" + ext in str(exc)
        else:  # read: only possible without the trailer, and then exactly
            assert k % 2
            np.testing.assert_array_equal(back.intensity.values, ds.intensity.values)
        slowest = max(slowest, time.perf_counter() - t0)
    assert slowest < 10.0  # a hang guard, not a speed target (benchmarks/fuzz_io.py times reads)


def test_digest_is_sha256_of_canonical_bytes():
    import hashlib

    a = np.array([1.5, -2.0])
    h = hashlib.sha256(b"f:(2,):<f8" + a.astype("<f8").tobytes()).hexdigest()  # reference: hashlib
    assert _integrity.digest(a) == "sha256:" + h
    assert _integrity.digest(a.astype(">f8")) == _integrity.digest(a)


# ------------------------------------------------------------------ atomic writes
@pytest.fixture
def umask():
    old = os.umask(0o022)
    yield lambda m: os.umask(m)
    os.umask(old)


def test_modes_follow_umask_and_overwrite_keeps_mode(tmp_path, umask):
    ds = _series()
    for mask, mode in ((0o022, 0o644), (0o077, 0o600), (0o002, 0o664)):
        umask(mask)
        for ext in (".nc", ".h5"):
            p = tmp_path / f"m{mask}{ext}"
            saxsnb.save_series(ds, p)
            assert p.stat().st_mode & 0o777 == mode
    umask(0o022)
    p = tmp_path / "keep.nc"
    saxsnb.save_series(ds, p)
    os.chmod(p, 0o640)
    saxsnb.save_series(ds, p)
    assert p.stat().st_mode & 0o777 == 0o640
    folder = tmp_path / "set"
    write_text_series(ds, folder)
    assert all(f.stat().st_mode & 0o777 == 0o644 for f in folder.iterdir())


def test_symlinked_target_is_written_through(tmp_path):
    real_dir = tmp_path / "real"
    real_dir.mkdir()
    target = real_dir / "data.h5"
    saxsnb.save_series(_series(1.0), target)
    link = tmp_path / "link.h5"
    link.symlink_to(target)
    saxsnb.save_series(_series(2.0), link)
    assert link.is_symlink() and os.readlink(link) == str(target)
    np.testing.assert_array_equal(saxsnb.open_series(target).intensity.values, _series(2.0).intensity.values)
    assert [p.name for p in real_dir.iterdir()] == ["data.h5"]


def test_data_are_fsynced_before_the_rename(tmp_path, monkeypatch):
    events = []
    real_fsync, real_replace = os.fsync, os.replace
    monkeypatch.setattr(os, "fsync", lambda fd: (events.append("fsync"), real_fsync(fd))[1])
    monkeypatch.setattr(os, "replace", lambda a, b: (events.append("replace"), real_replace(a, b))[1])
    saxsnb.save_series(_series(), tmp_path / "a.nc")
    assert events[:2] == ["fsync", "replace"] and events[-1] == "fsync"  # file, rename, folder


def test_stale_temporary_files_are_removed_by_the_next_write(tmp_path):
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True)
    pid = int(dead.stdout)
    stale_file = tmp_path / f".a.nc.{pid}-xyz{_atomic.TMP_SUFFIX}"
    stale_file.write_bytes(b"half")
    stale_set = tmp_path / f".set.{pid}-abc{_atomic.TMP_SUFFIX}"
    stale_set.mkdir()
    (stale_set / "frame_0000.dat").write_text("half")
    mine = tmp_path / f".a.nc.{os.getpid()}-live{_atomic.TMP_SUFFIX}"  # a write of this process
    mine.write_bytes(b"busy")
    saxsnb.save_series(_series(), tmp_path / "a.nc")
    write_text_series(_series(), tmp_path / "set")
    assert not stale_file.exists() and not stale_set.exists() and mine.exists()


def _raise_after(monkeypatch, module, name, n=1):
    """Make ``module.name`` raise (as a kill would stop the write) on its n-th call."""
    real = getattr(module, name)
    calls = {"n": 0}

    def wrapper(*args, **kwargs):
        calls["n"] += 1
        if calls["n"] >= n:
            raise KeyboardInterrupt("killed mid-write")
        return real(*args, **kwargs)

    monkeypatch.setattr(module, name, wrapper)


@pytest.mark.parametrize("ext", [".nc", ".h5"])
@pytest.mark.parametrize("where", ["data", "before-rename"])
def test_interrupted_write_leaves_the_old_file(tmp_path, monkeypatch, ext, where):
    old, new = _series(1.0), _series(2.0, n_f=5)
    p = tmp_path / f"a{ext}"
    saxsnb.save_series(old, p)
    before = p.read_bytes()
    with monkeypatch.context() as m:
        if where == "data":
            import h5py

            _raise_after(m, h5py.Group, "create_dataset", 3)
        else:
            _raise_after(m, _atomic, "_fsync_file")
        with pytest.raises(KeyboardInterrupt):
            saxsnb.save_series(new, p)
    assert p.read_bytes() == before
    assert [f.name for f in tmp_path.iterdir()] == [p.name]  # no temporary file left


def test_interrupted_text_export_leaves_the_old_set(tmp_path, monkeypatch):
    folder = tmp_path / "set"
    write_text_series(_series(1.0, n_f=3), folder, fmt="%.17g")
    before = {f.name: f.read_bytes() for f in folder.iterdir()}
    with monkeypatch.context() as m:
        _raise_after(m, _atomic, "_fsync_file", 4)
        with pytest.raises(KeyboardInterrupt):
            write_text_series(_series(2.0, n_f=5), folder, fmt="%.17g", overwrite=True)
    assert {f.name: f.read_bytes() for f in folder.iterdir()} == before
    assert sorted(f.name for f in tmp_path.iterdir()) == ["set"]


_CHILD = textwrap.dedent(
    """
    import sys, numpy as np, saxsnb
    from saxsnb.io import write_text_series
    out = sys.argv[1]
    def series(scale, n_f):
        q = np.linspace(0.1, 2.0, 3000)
        I = scale * (1.0 + np.arange(n_f)[:, None] + np.exp(-q)) * np.ones((n_f, q.size))
        return saxsnb.from_arrays(q, I, 0.01 * I)
    sets = [series(1.0, 4), series(2.0, 7)]
    print("ready", flush=True)
    k = 0
    while True:
        ds = sets[k % 2]
        saxsnb.save_series(ds, out + "/a.nc")
        saxsnb.save_series(ds, out + "/a.h5")
        write_text_series(ds, out + "/set", fmt="%.17g", overwrite=True)
        k += 1
    """
)


def test_killed_writer_leaves_old_or_complete_new_file(tmp_path):
    """A real SIGKILL at random moments of a loop of writes of two different series:
    each target is then one of the two, complete (never a part, never a mix)."""
    script = tmp_path / "child.py"
    script.write_text(_CHILD)
    out = tmp_path / "out"
    out.mkdir()
    rng = np.random.default_rng(5)
    sizes = set()
    for _ in range(3):
        proc = subprocess.Popen([sys.executable, str(script), str(out)], stdout=subprocess.PIPE, text=True)
        assert proc.stdout.readline().strip() == "ready"
        time.sleep(0.3 + float(rng.uniform(0, 1.2)))
        proc.send_signal(signal.SIGKILL)
        proc.wait()
        proc.stdout.close()
        for name in ("a.nc", "a.h5"):
            if (out / name).exists():
                ds = saxsnb.open_series(out / name)  # verified by its checksums, too
                sizes.add(ds.sizes["frame"])
                scale = 1.0 if ds.sizes["frame"] == 4 else 2.0
                assert ds.sizes["frame"] in (4, 7)
                q = ds.q.values
                expect = scale * (1.0 + np.arange(ds.sizes["frame"])[:, None] + np.exp(-q))
                np.testing.assert_allclose(ds.intensity.values, expect, rtol=1e-15)
        if (out / "set").exists():
            files = sorted((out / "set").iterdir())
            assert len(files) in (4, 7)
            ds = saxsnb.read_series(files)
            scale = ds.intensity.values[0, 0] / (1.0 + np.exp(-0.1))
            assert np.isclose(scale, 1.0) or np.isclose(scale, 2.0)
            assert ds.sizes["frame"] == (4 if np.isclose(scale, 1.0) else 7)
    assert sizes  # at least one complete file was seen


# ------------------------------------------------------------ text export as a set
def test_text_export_is_a_set(tmp_path):
    folder = tmp_path / "set"
    paths = write_text_series(_series(1.0, n_f=5), folder)
    assert [p.name for p in paths] == [f"frame_{i:04d}.dat" for i in range(5)]
    with pytest.raises(SaxsFileError, match="not empty"):
        write_text_series(_series(2.0, n_f=2), folder)
    (folder / "notes.txt").write_text("old")
    write_text_series(_series(2.0, n_f=2), folder, overwrite=True)
    assert sorted(p.name for p in folder.iterdir()) == ["frame_0000.dat", "frame_0001.dat"]
    ds = saxsnb.read_series(folder)
    assert ds.sizes["frame"] == 2
    empty = tmp_path / "empty"
    empty.mkdir()
    assert len(write_text_series(_series(), empty)) == 3


def test_text_export_refuses_header_injection(tmp_path):
    ds = _series()
    ds["intensity"].attrs["units"] = "arb\n0.5 1 1"
    with pytest.raises(SaxsInputError, match="line break"):
        write_text_series(ds, tmp_path / "x")
    ds = _series()
    with pytest.raises(SaxsInputError, match="fmt"):
        write_text_series(ds, tmp_path / "y", fmt="%.3e\n1 2 3")
    assert not (tmp_path / "x").exists() and not (tmp_path / "y").exists()


def test_one_atomic_writer():
    # the demo writer uses the package's one atomic writer (no second implementation)
    import saxsnb.demo.files as files

    src = Path(files.__file__).read_text()
    assert "mkstemp" not in src and "os.replace" not in src
