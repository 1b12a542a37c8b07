"""Text-column readers and writers: read_series, write_text_series (saxsnb.io.text)."""

import os
import warnings
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import saxsnb
from saxsnb.errors import SaxsError, SaxsFileError, SaxsInputError, SaxsWarning
from saxsnb.io import read_series, write_text_series
from saxsnb.series import add_history

Q = np.linspace(0.1, 3.0, 40)


def _write(path, rows, header="# q_unit = 1/nm\n", fmt="%.8e", sep=" "):
    text = header + "\n".join(sep.join(fmt % v for v in r) for r in rows) + "\n"
    Path(path).write_text(text)
    return Path(path)


def _curve(scale=1.0, q=Q):
    I = scale * 100.0 * np.exp(-q)
    return np.column_stack([q, I, 0.02 * I])


def _series(rng, n=5):
    I = 50.0 * np.exp(-np.outer(np.linspace(1, 2, n), Q)) * (1 + 0.01 * rng.normal(size=(n, Q.size)))
    ds = saxsnb.from_arrays(
        Q,
        I,
        0.02 * I,
        scan={"temperature": 20.0 + 2.5 * np.arange(n), "time": (60.0 * np.arange(n), "min")},
        sample="Lipid mix ü-7",
        wavelength_nm=0.1,
    )
    return add_history(ds, "test_step", value=1)


# ------------------------------------------------------------------ round trip
def test_write_then_read_gives_back_values_scan_coords_and_units(tmp_path, rng):
    ds = _series(rng)
    before = ds.copy(deep=True)
    paths = write_text_series(ds, tmp_path / "out")
    xr.testing.assert_identical(ds, before)  # input not modified
    assert [p.name for p in paths] == [f"frame_{i:04d}.dat" for i in range(5)]
    text = paths[2].read_text()
    assert "# q_unit = 1/nm" in text and "# temperature = 25.0" in text
    assert "# temperature_units = degC" in text and "# time_units = min" in text
    back = read_series(tmp_path / "out", scan="temperature")
    # %.8e keeps 9 significant digits: relative error <= 5e-9
    np.testing.assert_allclose(back.intensity, ds.intensity, rtol=6e-9)
    np.testing.assert_allclose(back.sigma, ds.sigma, rtol=6e-9)
    np.testing.assert_allclose(back.q, ds.q, rtol=6e-9)
    np.testing.assert_array_equal(back.temperature, ds.temperature)
    np.testing.assert_array_equal(back.time, ds.time)
    assert back.temperature.attrs["units"] == "degC" and back.time.attrs["units"] == "min"
    assert back.attrs["sample"] == "Lipid mix ü-7"
    assert back.attrs["wavelength_nm"] == 0.1
    # the files' history comes back, and the read is appended (where a recipe starts)
    assert back.attrs["history"][:-1] == ds.attrs["history"]
    assert '"operation": "read_series"' in back.attrs["history"][-1]
    assert back.attrs["scan"] == "temperature"
    assert back.attrs["source_files"] == [p.name for p in paths]
    assert back.attrs["sigma_estimated"] == 0


def test_write_is_atomic_and_leaves_no_temporary_files(tmp_path, rng):
    write_text_series(_series(rng, 3), tmp_path, stem="run")
    assert sorted(os.listdir(tmp_path)) == ["run_0000.dat", "run_0001.dat", "run_0002.dat"]


def test_reader_equals_numpy_loadtxt_exactly(tmp_path, rng):
    # numpy.loadtxt as the reference parser: both must give the correctly rounded doubles
    rows = np.column_stack([Q, rng.normal(size=Q.size) * 1e3, rng.random(Q.size) + 0.1])
    for k, fmt in enumerate(["%.8e", "%.17g", "%.5f", "%g"]):
        _write(tmp_path / f"f{k}.dat", rows, fmt=fmt)
        ref = np.loadtxt(tmp_path / f"f{k}.dat")
        ds = read_series(tmp_path / f"f{k}.dat")
        np.testing.assert_array_equal(ds.intensity.values[0], ref[:, 1])
        np.testing.assert_array_equal(ds.sigma.values[0], ref[:, 2])


def test_fixed_and_variable_layouts_parse_the_same(tmp_path, rng):
    rows = np.column_stack([Q, rng.random(Q.size) * 10, rng.random(Q.size) + 0.5])
    a = read_series(_write(tmp_path / "a.dat", rows, fmt="%.8e"))
    neg = rows.copy()
    neg[::3, 1] *= -1  # rows of different width: the general token path
    b = read_series(_write(tmp_path / "b.dat", neg, fmt="%.8e"))
    expect = np.array([float(f"{v:.8e}") for v in neg[:, 1]])
    np.testing.assert_array_equal(b.intensity.values[0], expect)
    np.testing.assert_array_equal(np.abs(a.intensity.values[0]), np.abs(b.intensity.values[0]))


# ------------------------------------------------------------------ headers
def test_header_metadata_units_and_string_values(tmp_path):
    for i, (T, op) in enumerate([(30.0, "ann"), (20.0, "bob")]):
        header = (
            "Reduced curve, some instrument\n"
            "# sample: buffer A\n"
            f"temperature = {T} degC\n"
            f"pressure = {1 + i}\n"
            "pressure_units = kbar\n"
            f"operator = {op}\n"
            "q(1/A) I(q) err\n"
        )
        _write(tmp_path / f"x{i}.txt", _curve(1 + i), header=header)
    ds = read_series(tmp_path, scan="temperature")
    assert ds.temperature.values.tolist() == [20.0, 30.0]
    assert ds.temperature.attrs["units"] == "degC"
    assert ds.pressure.values.tolist() == [2.0, 1.0] and ds.pressure.attrs["units"] == "kbar"
    assert ds.operator.values.tolist() == ["bob", "ann"]
    assert ds.attrs["sample"] == "buffer A"
    assert ds.attrs["source_files"] == ["x1.txt", "x0.txt"]
    # q(1/A) column header: q converted to 1/nm (1/A = 10/nm, common practice)
    np.testing.assert_allclose(ds.q.values, 10 * Q, rtol=6e-9)
    assert any('"convert_q_unit"' in h for h in ds.attrs["history"])


def test_pattern_gives_coordinates_and_sorting(tmp_path):
    for T in [35.5, -5, 12]:
        _write(tmp_path / f"run_T{T}C_p3.dat", _curve(), header="# q_unit = 1/A\n")
    ds = read_series(tmp_path, pattern=r"T(?P<temperature>[-\d.]+)C_p(?P<position>\d+)", scan="temperature")
    assert ds.temperature.values.tolist() == [-5.0, 12.0, 35.5]
    assert ds.temperature.attrs["units"] == "degC" and ds.position.attrs["units"] == "mm"
    assert ds.attrs["scan"] == "temperature"
    assert ds.attrs["source_files"][0] == "run_T-5C_p3.dat"


def test_unknown_scan_lists_available_names(tmp_path):
    _write(tmp_path / "a.dat", _curve(), header="# q_unit = 1/nm\n# time = 3\n# pressure = 2\n")
    with pytest.raises(SaxsInputError, match=r"temperatur.*available: pressure, time"):
        read_series(tmp_path, scan="temperatur")


def test_missing_scan_value_in_one_file(tmp_path):
    _write(tmp_path / "a.dat", _curve(), header="# q_unit = 1/nm\n# time = 3\n")
    _write(tmp_path / "b.dat", _curve(), header="# q_unit = 1/nm\n")
    with pytest.raises(SaxsFileError, match=r"b\.dat.*no value for the scan coordinate 'time'"):
        read_series(tmp_path, scan="time")


def test_missing_q_unit_asks_for_it(tmp_path):
    _write(tmp_path / "a.dat", _curve(), header="")
    with pytest.raises(SaxsInputError, match="q_unit="):
        read_series(tmp_path)
    ds = read_series(tmp_path, q_unit="1/A")
    np.testing.assert_allclose(ds.q, 10 * Q)


def test_mixed_q_units_in_one_folder(tmp_path):
    _write(tmp_path / "a.dat", _curve(), header="# q_unit = 1/nm\n")
    _write(tmp_path / "b.dat", _curve(), header="# q_unit = 1/A\n")
    with pytest.raises(SaxsFileError, match=r"b\.dat.*1/A.*a\.dat"):
        read_series(tmp_path)


# ------------------------------------------------------------------ columns
def test_two_columns_estimate_sigma_and_flag_it(tmp_path):
    _write(tmp_path / "a.dat", _curve()[:, :2], sep=",")
    ds = read_series(tmp_path)
    assert ds.attrs["sigma_estimated"] == 1
    assert np.all(ds.sigma.values > 0)


def test_four_columns_keep_dq_in_inverse_nm(tmp_path):
    rows = np.column_stack([_curve(), np.full(Q.size, 0.002)])
    _write(tmp_path / "a.dat", rows, header="# q_unit = 1/A\n", sep=";")
    ds = read_series(tmp_path)
    assert ds.dq.dims == ("frame", "q") and ds.dq.attrs["units"] == "1/nm"
    np.testing.assert_allclose(ds.dq.values, 0.02)


@pytest.mark.parametrize("sep", [" ", "\t", ",", ";", " , ", "   "])
def test_separators(tmp_path, sep):
    ds = read_series(_write(tmp_path / "a.csv", _curve(), sep=sep, fmt="%.6g"))
    np.testing.assert_allclose(ds.intensity.values[0], _curve()[:, 1], rtol=1e-5)


def test_comments_blank_lines_and_crlf(tmp_path, few_points):
    body = "# q_unit = 1/nm\r\n\r\n0.1 5 0.1 # first\r\n\r\n0.2 4 0.1\r\n# trailing note\r\n0.3 3 0.1\r\n"
    (tmp_path / "a.dat").write_bytes(body.encode())
    ds = read_series(tmp_path / "a.dat")
    assert ds.intensity.values.tolist() == [[5.0, 4.0, 3.0]]


# ------------------------------------------------------------------ grids
def test_different_grids_are_an_error_naming_the_file(tmp_path):
    _write(tmp_path / "a.dat", _curve())
    _write(tmp_path / "b.dat", _curve(q=Q * 1.01))
    with pytest.raises(SaxsInputError, match=r"b\.dat: its q grid.*regrid="):
        read_series(tmp_path)


def test_regrid_first_interpolates_and_masks_outside(tmp_path):
    _write(tmp_path / "a.dat", _curve())
    q2 = np.linspace(0.5, 3.5, 61)
    _write(tmp_path / "b.dat", np.column_stack([q2, 2 * q2 + 1, np.full(q2.size, 0.1)]))
    ds = read_series(tmp_path, regrid="first")
    np.testing.assert_array_equal(ds.q.values, [float(f"{v:.8e}") for v in Q])
    inside = Q >= 0.5
    # linear data: np.interp reproduces it (numpy reference), to the 9 digits written
    np.testing.assert_allclose(ds.intensity.values[1, inside], 2 * Q[inside] + 1, rtol=1e-8)
    assert ds.mask.values[1].tolist() == (~inside).tolist()
    assert not ds.mask.values[0].any()
    assert np.isnan(ds.intensity.values[1, ~inside]).all()
    assert any('"regrid"' in h and '"first"' in h for h in ds.attrs["history"])


def test_regrid_log_uses_common_range(tmp_path):
    _write(tmp_path / "a.dat", _curve())
    q2 = np.linspace(0.5, 3.5, 61)
    _write(tmp_path / "b.dat", np.column_stack([q2, 2 * q2 + 1, np.full(q2.size, 0.1)]))
    ds = read_series(tmp_path, regrid="log")
    assert ds.sizes["q"] == 61
    np.testing.assert_allclose(ds.q.values[[0, -1]], [0.5, 3.0])
    np.testing.assert_allclose(np.diff(np.log(ds.q.values)), np.log(6.0) / 60)
    assert "mask" not in ds


def test_unknown_regrid_strategy(tmp_path):
    _write(tmp_path / "a.dat", _curve())
    with pytest.raises(SaxsInputError, match="regrid"):
        read_series(tmp_path, regrid="spline")


# ------------------------------------------------------------------ bad input
@pytest.mark.parametrize(
    "body, line, message",
    [
        ("0.1 5 0.1\n0.2 4\n0.3 3 0.1\n", 3, "2 columns"),
        ("0.1 5 0.1\n0.2 4 0.1\n0.3 abc 0.1\n", 4, "'abc'"),
        ("0.1 5 0.1\n0.2 4 0.1 7 8\n", 3, "columns"),
        ("0,1 5,0 0,1\n0,2 4,0 0,1\n", 2, "comma as decimal"),
        ("0.1 5 0.1\n-0.2 4 0.1\n", 3, "q must be > 0"),
        ("0.1 5 0.1\n0.1 4 0.1\n", 3, "duplicate q"),
        ("0.1 5 0.1\nnan 4 0.1\n", 3, "finite"),
    ],
)
def test_bad_lines_name_file_and_line(tmp_path, body, line, message):
    path = tmp_path / "bad.dat"
    path.write_text("# q_unit = 1/nm\n" + body)
    with pytest.raises(SaxsFileError, match=message) as info:
        read_series(path)
    assert info.value.path == str(path) and info.value.line == line
    assert f"bad.dat, line {line}" in str(info.value)


@pytest.mark.parametrize(
    "content, message",
    [
        (b"", "empty"),
        (b"# q_unit = 1/nm\n# only a header\n", "header only"),
        (b"\x89PNG\r\n\x00\x00", "not a text"),
    ],
)
def test_empty_header_only_and_binary_files(tmp_path, content, message):
    (tmp_path / "x.dat").write_bytes(content)
    with pytest.raises(SaxsFileError, match=message):
        read_series(tmp_path / "x.dat")


def test_nan_intensity_and_bad_sigma_are_masked_with_a_warning(tmp_path):
    path = tmp_path / "a.dat"
    path.write_text("# q_unit = 1/nm\n0.1 5 0.1\n0.2 nan 0.1\n0.3 3 0\n0.4 2 -1\n0.5 1 0.1\n")
    with pytest.warns(SaxsWarning, match="3 points"):
        ds = read_series(path)
    assert ds.mask.values[0].tolist() == [False, True, True, True, False]


def test_unsorted_q_is_sorted_with_a_warning(tmp_path, few_points):
    path = tmp_path / "a.dat"
    path.write_text("# q_unit = 1/nm\n0.2 4 0.1\n0.1 5 0.1\n0.3 3 0.1\n")
    with pytest.warns(SaxsWarning, match="sorted"):
        ds = read_series(path)
    assert ds.q.values.tolist() == [0.1, 0.2, 0.3] and ds.intensity.values[0].tolist() == [5, 4, 3]


@pytest.mark.skipif(os.name != "posix" or os.geteuid() == 0, reason="root reads any file")
def test_unreadable_file(tmp_path):
    path = _write(tmp_path / "a.dat", _curve())
    path.chmod(0)
    with pytest.raises(SaxsFileError, match="cannot read"):
        read_series(path)


def test_sources_folder_glob_list_and_errors(tmp_path):
    for name in ["s10.dat", "s2.dat", "s1.dat", ".hidden.dat", "notes.md"]:
        _write(tmp_path / name, _curve())
    ds = read_series(tmp_path)
    assert ds.attrs["source_files"] == ["s1.dat", "s2.dat", "s10.dat"]  # natural order, data files only
    assert read_series(str(tmp_path / "s1*.dat")).attrs["source_files"] == ["s1.dat", "s10.dat"]
    files = [tmp_path / "s2.dat", tmp_path / "s1.dat"]
    assert read_series(files).attrs["source_files"] == ["s2.dat", "s1.dat"]
    (tmp_path / "empty").mkdir()
    with pytest.raises(SaxsInputError, match="no data files"):
        read_series(tmp_path / "empty")
    with pytest.raises(SaxsInputError, match="no file matches"):
        read_series(str(tmp_path / "*.xyz"))
    with pytest.raises(SaxsFileError, match="no such file"):
        read_series(tmp_path / "missing.dat")


def test_input_files_are_not_modified(tmp_path):
    path = _write(tmp_path / "a.dat", _curve())
    before = (path.read_bytes(), path.stat().st_mtime_ns)
    read_series(tmp_path)
    assert (path.read_bytes(), path.stat().st_mtime_ns) == before
    assert os.listdir(tmp_path) == ["a.dat"]


def test_chunks_give_dask_backed_series(tmp_path, rng):
    write_text_series(_series(rng, 6), tmp_path)
    lazy = read_series(tmp_path, chunks={"frame": 4})
    assert lazy.intensity.chunks == ((4, 2), (40,))
    eager = read_series(tmp_path)
    xr.testing.assert_identical(lazy.compute(), eager)
    assert read_series(tmp_path, chunks=3).intensity.chunks[0] == (3, 3)


def test_many_files_span_several_batches(tmp_path):
    rows = _curve()
    header = "# q_unit = 1/nm\n"
    for i in range(300):
        _write(tmp_path / f"f{i:03d}.dat", rows * [1, 1 + i, 1], header=header + f"# time = {i}\n")
    ds = read_series(tmp_path, progress=False)
    assert ds.sizes["frame"] == 300
    np.testing.assert_allclose(ds.intensity.values[:, 0], rows[0, 1] * (1 + np.arange(300)), rtol=1e-8)
    np.testing.assert_array_equal(ds.time.values, np.arange(300.0))


# ------------------------------------------------------------------ properties
_finite = st.floats(min_value=-1e12, max_value=1e12, allow_nan=False, allow_infinity=False, width=64)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    values=st.lists(st.tuples(_finite, st.floats(1e-6, 1e6)), min_size=2, max_size=30),
    sep=st.sampled_from([" ", "\t", ",", ";", ", ", "  "]),
    fmt=st.sampled_from(["%.8e", "%.17g", "%r", "%.6E"]),
)
def test_property_text_round_trip(tmp_path, values, sep, fmt, few_points):
    n = len(values)
    q = np.linspace(0.01, 5.0, n)
    I = np.array([v[0] for v in values])
    S = np.array([v[1] for v in values])
    form = (lambda v: repr(float(v))) if fmt == "%r" else (lambda v: fmt % v)
    text = "# q_unit = 1/nm\n" + "\n".join(sep.join(form(v) for v in r) for r in zip(q, I, S)) + "\n"
    path = tmp_path / "p.dat"
    path.write_text(text)
    ds = read_series(path)
    # formatting precision: 9 significant digits for %.8e, 7 for %.6E, exact for repr/%.17g
    rtol = {"%.8e": 5.1e-9, "%.6E": 5.1e-7}.get(fmt, 0.0)
    np.testing.assert_allclose(ds.intensity.values[0], I, rtol=rtol, atol=1e-300)
    np.testing.assert_allclose(ds.sigma.values[0], S, rtol=rtol)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    st.lists(
        st.one_of(
            st.sampled_from(
                ["0.1 5 0.1", "0.2 4", "x y z", "1,5 2,5", "nan 1 1", "-1 2 3", "", "# c", "q = 1"]
            ),
            st.text(max_size=20),
        ),
        max_size=8,
    ),
    st.binary(max_size=20),
)
def test_property_malformed_files_raise_only_our_errors(tmp_path, lines, junk):
    path = tmp_path / "m.dat"
    path.write_bytes("\n".join(lines).encode("utf-8", "surrogatepass") + junk)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", SaxsWarning)
        try:
            ds = read_series(path, q_unit="1/nm")
        except SaxsError:
            return
    assert ds.sizes["frame"] == 1


def test_write_dq_and_masked_points_round_trip(tmp_path, rng):
    ds = _series(rng, 3)
    ds["dq"] = (("frame", "q"), np.full((3, Q.size), 0.004), {"units": "1/nm", "long_name": "q resolution"})
    mask = np.zeros((3, Q.size), dtype=bool)
    mask[2, -2:] = True
    ds["mask"] = (("frame", "q"), mask, {"long_name": "excluded points"})
    write_text_series(ds, tmp_path)
    with pytest.warns(SaxsWarning, match="2 points"):  # masked points are written as NaN
        back = read_series(tmp_path)
    np.testing.assert_allclose(back.dq.values, 0.004)
    np.testing.assert_array_equal(back.mask.values, mask)
    np.testing.assert_allclose(back.intensity.values[~mask], ds.intensity.values[~mask], rtol=6e-9)


def test_write_in_inverse_angstrom_keeps_q(tmp_path, rng):
    ds = _series(rng, 2).saxs.to_q_unit("1/A")
    write_text_series(ds, tmp_path)
    assert "# q_unit = 1/A" in (tmp_path / "frame_0000.dat").read_text()
    back = read_series(tmp_path)
    np.testing.assert_allclose(back.q.values, Q, rtol=6e-9)  # back in 1/nm


@pytest.mark.parametrize("fmt", ["% .8e", "%+.6e", "%12.5f", "%.3e"])
def test_signed_fixed_width_layouts(tmp_path, rng, fmt):
    rows = np.column_stack([Q, rng.normal(size=Q.size) * 50, rng.random(Q.size) + 0.5])
    path = _write(tmp_path / "s.dat", rows, fmt=fmt)
    ds = read_series(path)
    ref = np.loadtxt(path)  # numpy reference parser
    np.testing.assert_array_equal(ds.intensity.values[0], ref[:, 1])
    np.testing.assert_array_equal(ds.sigma.values[0], ref[:, 2])


def test_unreadable_file_is_named(tmp_path, monkeypatch):
    import saxsnb.io.text as text

    path = _write(tmp_path / "locked.dat", _curve())

    class NoOpen:
        """The os module, except that opening a file is refused (as for a file without
        read permission, which the root user running CI could read anyway)."""

        def __getattr__(self, name):
            return getattr(os, name)

        @staticmethod
        def open(p, *args, **kwargs):
            raise PermissionError(13, "Permission denied", str(p))

    monkeypatch.setattr(text, "os", NoOpen())
    with pytest.raises(SaxsFileError, match=r"locked\.dat.*cannot read the file: Permission denied"):
        read_series(path)


def test_byte_order_mark_and_progress_bar(tmp_path, capsys, few_points):
    (tmp_path / "a.dat").write_bytes(b"\xef\xbb\xbf# q_unit = 1/A\n0.1 5 0.1\n0.2 4 0.1\n")
    ds = read_series(tmp_path, progress=True)
    np.testing.assert_allclose(ds.q.values, [1.0, 2.0])
    assert "reading" in capsys.readouterr().err


def test_multiline_sample_name_survives_text_round_trip(tmp_path, few_points):
    ds = saxsnb.from_arrays([0.1, 0.2], [[2.0, 1.0]], [[0.1, 0.1]], sample="line one\nline two")
    write_text_series(ds, tmp_path)
    assert read_series(tmp_path).attrs["sample"] == "line one\nline two"


@pytest.mark.parametrize(
    "header, factor",
    [("# q [nm^-1]  I [1/cm]  sigma\n", 1.0), ("q(1/A),I,err\n", 10.0), ("# Q (A-1) I\n", 10.0)],
)
def test_q_unit_from_column_header(tmp_path, header, factor):
    path = _write(tmp_path / "c.dat", _curve(), header=header, fmt="%.17g")
    np.testing.assert_allclose(read_series(path).q.values, factor * Q, rtol=1e-15)  # 1/A = 10/nm


def test_equal_width_columns_with_different_layouts(tmp_path, few_points):
    # every row the same length, but the columns differ in layout ("2.2323" vs "811596"):
    # each column must be parsed with its own layout; Python's float is the reference
    rows = ["0.1000 811596 0.5000", "0.2000 702113 0.2500", "0.3000 612000 0.1250"]
    path = tmp_path / "w.dat"
    path.write_text("# q_unit = 1/nm\n" + "\n".join(rows) + "\n")
    ds = read_series(path)
    expect = [[float(t) for t in r.split()] for r in rows]
    np.testing.assert_array_equal(ds.intensity.values[0], [r[1] for r in expect])
    np.testing.assert_array_equal(ds.sigma.values[0], [r[2] for r in expect])


@pytest.mark.parametrize("pos, byte", [(20, "x"), (25, ","), (26, "*"), (1, "-")])
def test_fixed_layout_row_with_a_bad_byte_names_its_line(tmp_path, pos, byte):
    # rows of one byte layout except one of the same length with one byte changed
    # (a digit, an exponent sign, a separator): the error names the file and its line
    good = [f"{0.1 * (k + 1):.8e} {2.0:.8e} {0.1:.8e}" for k in range(5)]
    bad = good[3][:pos] + byte + good[3][pos + 1 :]
    path = tmp_path / "b.dat"
    path.write_text("# q_unit = 1/nm\n" + "\n".join(good[:3] + [bad] + good[4:]) + "\n")
    with pytest.raises(SaxsFileError) as info:
        read_series(path)
    assert info.value.line == 5 and info.value.path == str(path)



@pytest.mark.parametrize("body", ["inf inf inf\n", "nan nan\n", "nan 1.0 1.0\nnan 2.0 1.0\n"])
def test_rows_of_equal_layout_made_of_nan_or_inf(tmp_path, body):
    # every row laid out alike, but with words rather than digits: q is not a number
    path = tmp_path / "n.dat"
    path.write_text("# q_unit = 1/nm\n" + body)
    with pytest.raises(SaxsFileError, match="finite") as info:
        read_series(path)
    assert info.value.path == str(path) and info.value.line == 2


def test_decimal_comma_with_semicolon_columns_is_refused(tmp_path):
    # "0.01;5,0;0.1": with ';' between columns the comma can only be a decimal comma
    p = tmp_path / "semi.csv"
    p.write_text("# q_unit = 1/nm\n0.01;5,0;0.1\n0.02;4,0;0.1\n")
    with pytest.raises(SaxsFileError, match="comma as decimal") as err:
        saxsnb.read_series(p)
    assert err.value.line == 2 and "semi.csv" in str(err.value)
