"""The shortcuts of the text reader for files laid out alike (issue 14) give what the
full reading gives.

:func:`saxsnb.io._textparse.split_file` with a :class:`HeaderCache` (a header template,
the verdict on a first-row layout) must give, file by file, the same metadata, line
numbers, body and errors as without one; the joined polars read must split the rows by
file as the files hold them. The reference is the full reading of each file on its own
(itself checked against hand-counted lines and Python's ``float`` in tests/test_io_text.py,
tests/test_io_bodies.py and tests/test_io_exact.py).
"""

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import saxsnb.io._bodies as bodies
from saxsnb.errors import SaxsFileError
from saxsnb.io import read_series
from saxsnb.io._textparse import HeaderCache, split_file

_KEYS = ["q_unit", "intensity_unit", "temperature", "temperature_units", "Sample", "attr.tag",
         "beam.wavelength", "Exposure Time", "t-1", "x_unit", "frame", "_"]
_VALUES = st.text(alphabet="0123456789 .-+e=:#\tabcQ()/é[]{}\",", max_size=12)
_FREE = ["# saxsnb series frame 12", "free text 3 of 40", "#", "", "   # a note 7", "# q I sigma",
         "q(1/A) I(1/cm) sigma", "# Q [1/nm]", "Temperature 25.0", "[section 2]", "1 abc", "## 12:30"]


@st.composite
def _line(draw):
    if draw(st.booleans()):
        return draw(st.sampled_from(_FREE))
    lead = draw(st.sampled_from(["", "# ", "#", "  ", "\t# "]))
    key = draw(st.sampled_from(_KEYS))
    sep = draw(st.sampled_from([" = ", "=", ": ", ":", " =  ", "\t=\t"]))
    return f"{lead}{key}{sep}{draw(_VALUES)}"


def _vary(draw, line: str) -> str:
    """The same line with other values and digits, or now and then another line."""
    what = draw(st.sampled_from(["same", "value", "digits", "digits", "value", "other", "inject", "inject"]))
    if what == "inject":  # other text where a digit or any character was (a key may appear)
        at = [i for i, c in enumerate(line) if c.isdigit()] or list(range(len(line) + 1))
        i = draw(st.sampled_from(at))
        other = draw(st.sampled_from(["=", ":", " x = ", "1=2", "\t", "#", draw(_VALUES)]))
        return line[:i] + other + line[i + 1 :]
    if what == "value" and ("=" in line or ":" in line):
        cut = min(i for i in (line.find("="), line.find(":")) if i >= 0)
        return line[: cut + 1] + draw(st.sampled_from(["", " ", "  ", "\t"])) + draw(_VALUES)
    if what == "digits":
        return "".join(str(draw(st.integers(0, 99))) if c.isdigit() else c for c in line)
    if what == "other":
        return draw(_line())
    return line


def _summary(raw):
    return (raw.meta, raw.units, raw.attrs, raw.q_unit, raw.intensity_unit, raw.key_lines, raw.attr_lines,
            raw.first_line, raw.ncols, raw.comma, raw.cut_check, bytes(raw.body))


def _outcome(path, data, cache):
    try:
        return _summary(split_file(path, "f", data, cache))
    except SaxsFileError as exc:
        return (type(exc).__name__, str(exc), exc.line)


_ROWS = ["0.1 2.0 0.1\n0.2 1.5 0.1\n0.3 1.2 0.1\n", "1.0e-01,2.0e+00\n2.0e-01,1.0e+00\n",
         " 1.00 2 3\n 2.00 3 4\n", "0.1 2 0.1 0.01\r\n0.2 1 0.1 0.01\r\n", "5 6\n7 8\n9 1\n",
         "0.1 abc 0.3\n0.2 1 0.4\n"]


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.data())
def test_a_header_cache_changes_nothing(data):
    """Reference: split_file without a cache (each file read in full on its own)."""
    template = data.draw(st.lists(_line(), min_size=0, max_size=7))
    crlf = data.draw(st.booleans())
    outcomes = []
    cache = HeaderCache()
    for _ in range(data.draw(st.integers(2, 5))):
        lines = [_vary(data.draw, ln) for ln in template]
        rows = data.draw(st.sampled_from(_ROWS))
        if data.draw(st.booleans()):  # another layout of the same rows
            rows = "".join(str(data.draw(st.integers(0, 9))) if c.isdigit() else c for c in rows)
        text = "".join(ln + ("\r\n" if crlf else "\n") for ln in lines) + rows
        raw = text.encode("utf-8")
        outcomes.append((_outcome("f", raw, cache), _outcome("f", raw, None)))
    for cached, full in outcomes:
        assert cached == full


def test_the_cache_is_used_by_read_series(tmp_path, monkeypatch):
    # files alike take the template; the result equals the read of each file alone
    texts = [f"# frame {k}\n# temperature = {20 + k}.5 degC\n# q_unit = 1/nm\n0.1 {k + 1} 0.1\n0.2 1 0.1\n"
             "0.3 1 0.1\n0.4 1 0.1\n0.5 1 0.1\n" for k in range(12)]
    for k, t in enumerate(texts):
        (tmp_path / f"f{k:02d}.dat").write_text(t)
    ds = read_series(tmp_path)
    alone = [read_series(tmp_path / f"f{k:02d}.dat") for k in range(12)]
    assert ds.temperature.values.tolist() == [a.temperature.item() for a in alone]
    np.testing.assert_array_equal(ds.intensity.values, np.concatenate([a.intensity.values for a in alone]))


@pytest.mark.parametrize("n_rows", [[5, 5, 5], [7, 5, 9, 5], [5], [1000, 5, 6]])
def test_joined_bodies_split_by_file(rng, n_rows, monkeypatch):
    """Rows per file and their line numbers as written (counted here), in one polars call."""
    raws, expect = [], []
    for k, n in enumerate(n_rows):
        q = np.arange(1, n + 1) / 100
        I = rng.uniform(1, 2, n)
        text = "# q_unit = 1/nm\n# k = 1\n" + "".join(f"{float(a)!r} {float(b)!r}\n" for a, b in zip(q, I))
        raws.append(split_file(f"f{k}", f"f{k}", text.encode()))
        expect.append(np.column_stack([q, I]))

    def refuse(raw):
        raise AssertionError(raw.path)

    monkeypatch.setattr(bodies, "_alone", refuse)
    for (data, lines), e in zip(bodies.parse_bodies(raws), expect):
        np.testing.assert_array_equal(data, e)
        np.testing.assert_array_equal(lines, np.arange(3, 3 + e.shape[0]))


@pytest.mark.parametrize("bad", ["\n", "   \n", " \n", "\r\n"])
def test_a_blank_line_among_joined_rows_keeps_line_numbers(tmp_path, rng, bad):
    # a blank line inside one body is not taken for the end of a file
    rows = [f"{q:.3f} {v:.6g} 0.1\n" for q, v in zip(np.arange(1, 21) / 100, rng.uniform(1, 2, 20))]
    for k in range(3):
        (tmp_path / f"f{k}.dat").write_text("# q_unit = 1/nm\n" + "".join(rows))
    text = "# q_unit = 1/nm\n" + "".join(rows[:10]) + bad + "".join(rows[10:])
    (tmp_path / "f1.dat").write_text(text)
    rows[14] = rows[13]  # a duplicate q after the blank line names its line
    (tmp_path / "f2.dat").write_text("# q_unit = 1/nm\n" + "".join(rows[:10]) + bad + "".join(rows[10:]))
    with pytest.raises(SaxsFileError, match="duplicate") as info:
        read_series(tmp_path)
    assert info.value.path.endswith("f2.dat") and info.value.line == 1 + 10 + 1 + 4 + 1
