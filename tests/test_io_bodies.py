"""The numeric bodies read by maintained parsers (saxsnb/io/_bodies.py, issue 14).

References: Python's ``float`` (correctly rounded) for every value; the errors name the
file and line found by reading the text by hand (the line numbers are counted here).
"""

import numpy as np
import pytest
import xarray as xr

import saxsnb.io._bodies as bodies
from saxsnb.errors import SaxsFileError
from saxsnb.io import read_series

H = "# q_unit = 1/nm\n"


def _rows(rng, n, fmt, sep=" ", lead=""):
    q = np.linspace(0.05, 3.0, n)
    cols = np.column_stack([q, rng.normal(0, 1e3, n), rng.uniform(1e-3, 10, n)])
    return [lead + sep.join(fmt % v for v in row) for row in cols]


def _expected(lines, sep=None):
    # the reference: Python's float of each token
    return np.array([[float(t) for t in ln.replace(",", " ").replace(";", " ").split()] for ln in lines])


LAYOUTS = [
    ("%.8e", " ", ""),
    ("%.6g", " ", ""),
    ("%.17g", ",", ""),
    ("%.10g", ";", ""),
    ("%.6g", "\t", ""),
    ("% .7e", "  ", "  "),  # fixed padding, Fortran style: empty fields at fixed places
    ("%r", " ", ""),
]


@pytest.mark.parametrize(("fmt", "sep", "lead"), LAYOUTS)
def test_values_equal_python_float_on_both_parsers(tmp_path, rng, monkeypatch, fmt, sep, lead):
    files = []
    expected = []
    for k in range(4):
        if fmt == "%r":  # shortest round-trip repr of random doubles (17 digits at most)
            vals = np.column_stack([np.linspace(0.01, 1, 40), rng.normal(0, 1, 40), rng.uniform(0.1, 1, 40)])
            lines = [" ".join(repr(float(v * s)) for v, s in zip(row, (1, 10.0**k, 10.0**k))) for row in vals]
        else:
            lines = _rows(rng, 40, fmt, sep, lead)
        p = tmp_path / f"f{k}.dat"
        p.write_text(H + "\n".join(lines) + "\n")
        files.append(p)
        expected.append(_expected(lines))
    fast = read_series(files)
    for k, e in enumerate(expected):
        np.testing.assert_array_equal(fast.intensity.values[k], e[:, 1])
        np.testing.assert_array_equal(fast.sigma.values[k], e[:, 2])
    np.testing.assert_array_equal(fast.q.values, expected[0][:, 0])
    monkeypatch.setattr(bodies, "fast_parser", lambda: None)
    xr.testing.assert_identical(read_series(files), fast)


def test_files_laid_out_alike_are_read_in_one_polars_call(tmp_path, rng, monkeypatch):
    for k in range(6):
        (tmp_path / f"f{k}.dat").write_text(H + "\n".join(_rows(rng, 30, "%.6g")) + "\n")

    def refuse(raw):  # the per-file reader must not be needed
        raise AssertionError(raw.path)

    monkeypatch.setattr(bodies, "_alone", refuse)
    assert read_series(tmp_path).sizes == {"frame": 6, "q": 30}


@pytest.mark.parametrize("byte", [0x01, 0x08, 0x0B, 0x0C, 0x1B, 0x1F, 0x7F])
@pytest.mark.parametrize("where", ["before", "inside", "after"])
def test_a_control_byte_deep_in_a_body_names_its_line(tmp_path, rng, byte, where):
    lines = _rows(rng, 50, "%.6g")
    row = 37
    t = lines[row].split(" ")
    c = chr(byte)
    t[1] = {"before": c + t[1], "inside": t[1][:1] + c + t[1][1:], "after": t[1] + c}[where]
    lines[row] = " ".join(t)
    (tmp_path / "good.dat").write_text(H + "\n".join(_rows(rng, 50, "%.6g")) + "\n")
    (tmp_path / "bad.dat").write_text(H + "\n".join(lines) + "\n")
    with pytest.raises(SaxsFileError, match="control byte") as info:
        read_series(tmp_path)
    assert info.value.path.endswith("bad.dat") and info.value.line == row + 2


@pytest.mark.parametrize(
    ("token", "message"),
    [("1_0", "as a number"), ("\u0661", "as a number"), ("0x10", "as a number"), ("1.0.0", "as a number")],
)
def test_tokens_float_alone_would_take_are_refused(tmp_path, rng, token, message):
    lines = _rows(rng, 20, "%.6g")
    t = lines[12].split(" ")
    t[2] = token
    lines[12] = " ".join(t)
    (tmp_path / "a.dat").write_bytes((H + "\n".join(lines) + "\n").encode("utf-8"))
    with pytest.raises(SaxsFileError, match=message) as info:
        read_series(tmp_path / "a.dat")
    assert info.value.line == 14


def test_blank_and_comment_lines_among_rows_keep_their_line_numbers(tmp_path, rng):
    lines = _rows(rng, 20, "%.6g")
    text = H + "\n".join(lines[:5]) + "\n\n# a note\n" + "\n".join(lines[5:]) + "\n"
    (tmp_path / "a.dat").write_text(text)
    ds = read_series(tmp_path / "a.dat")
    np.testing.assert_array_equal(ds.intensity.values[0], _expected(lines)[:, 1])
    # a duplicate q names the real line (after the blank and the comment lines)
    lines[10] = lines[9]
    (tmp_path / "a.dat").write_text(H + "\n".join(lines[:5]) + "\n\n# a note\n" + "\n".join(lines[5:]) + "\n")
    with pytest.raises(SaxsFileError, match="duplicate") as info:
        read_series(tmp_path / "a.dat")
    assert info.value.line == 1 + 5 + 2 + (10 - 5) + 1  # header, 5 rows, blank, comment, rows 5..10


@pytest.mark.parametrize("fast", [True, False])
@pytest.mark.parametrize("fmt", ["%r", "%.17g", "%.25e", "%.40f"])
def test_random_doubles_of_every_magnitude_are_read_bit_exactly(tmp_path, monkeypatch, fmt, fast):
    # random bit patterns (every exponent), subnormals and long decimal expansions;
    # reference: Python's float (correctly rounded) of each printed token
    rng = np.random.default_rng(11)
    x = np.concatenate(
        [np.frombuffer(rng.bytes(8 * 3000), dtype=np.float64), rng.uniform(size=500) * 1e-310]
    )
    x = x[np.isfinite(x)]
    tokens = [repr(float(v)) if fmt == "%r" else fmt % v for v in x]
    q = np.arange(1, x.size + 1) / 1000.0
    rows = [f"{float(qi)!r} {t} 1" for qi, t in zip(q, tokens)]
    (tmp_path / "a.dat").write_text(H + "\n".join(rows) + "\n")
    (tmp_path / "b.dat").write_text(H + "\n".join(rows) + "\n")
    if not fast:  # numpy.loadtxt, file by file
        monkeypatch.setattr(bodies, "fast_parser", lambda: None)
    ds = read_series(tmp_path)
    ref = np.array([float(t) for t in tokens])
    assert np.array_equal(ds.intensity.values[1].view(np.uint64), ref.view(np.uint64))
