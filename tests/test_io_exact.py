"""Readers that refuse what they cannot read exactly (issue 12): text rows, canSAS XML
value elements, NXcanSAS/NetCDF structure and units.

Expected values are those of the decimal text itself (Python's ``float``, correctly
rounded: the reference) or of the arrays written; units by the definitions
1/A = 10/nm (common practice).
"""

import time
import warnings

import h5py
import numpy as np
import pytest
import xarray as xr

import saxsnb
from saxsnb.errors import SaxsError, SaxsFileError, SaxsInputError, SaxsWarning
from saxsnb.io import read_cansas_xml, read_series

H = "# q_unit = 1/nm\n"


def _read(tmp_path, text, name="a.dat"):
    p = tmp_path / name
    p.write_bytes(text.encode("latin-1") if isinstance(text, str) else text)
    return read_series(p)


# ------------------------------------------------------------------ text: refusals
@pytest.mark.parametrize(
    ("body", "line", "message"),
    [
        # a malformed first data row is an error, not a header line
        ("0.1 5e 0.1\n0.2 4 0.1\n0.3 3 0.1\n", 2, "'5e'"),
        ("0.1 5.0e+ 0.1\n0.2 4 0.1\n0.3 3 0.1\n", 2, "as a number"),
        # the row just before the data with a damaged number is not header either
        ("0.1 1e5e3 0.1\n0.2 4 0.1\n0.3 3 0.1\n", 2, "'1e5e3'"),
        # a trailer (row count) after a blank line at the end is not data
        ("0.1 5 0.1\n0.2 4 0.1\n0.3 3 0.1\n\n9 8 7\n", 6, "trailer"),
        # a summary line before the data that does not fit the columns
        ("100 3\n0.1 5 0.1\n0.2 4 0.1\n0.3 3 0.1\n", 2, "summary"),
        ("100 3 4 5\n0.1 5 0.1\n0.2 4 0.1\n0.3 3 0.1\n", 2, "summary"),
        # tokens are read whole: '#' inside a token, 1.#INF words
        ("0.1 5 1.#INF\n0.2 4 0.1\n0.3 3 0.1\n", 2, "1.#INF"),
        ("0.1 5 0.1\n0.2 1.#INF\n0.3 3 0.1\n", 3, "1.#INF"),
        ("0.1 5 0.1\n0.2 4#2 0.1\n0.3 3 0.1\n", 3, "4#2"),
        # decimal commas, also among integer-looking columns, refused as such
        ("0,1 5 1\n0,2 4 1\n", 2, "decimal"),
        ("1,5,2\n2,4,3\n", 2, "decimal"),
        ("0,1;5\n0,1;4\n", 2, "decimal"),
        ("0.1 5 1 1\n0,2 4 1\n", 3, "decimal"),
        ("0.1 5 1\n0.2 4,5 1\n", 3, "decimal"),
        # control bytes
        ("0.1 5\x0b0.1\n0.2 4 0.1\n", 2, "control byte"),
        ("0.1 5 0.1\n0.2 4\x1b 0.1\n", 3, "control byte"),
        ("0.1 5 0.1\n0.2 4 0.1\x7f\n", 3, "control byte"),
        # a last value cut short in a file without final newline
        (
            "1.000e-01 5.000e+00\n2.000e-01 -4.000e+00\n3.000e-01 3.000e+00\n4.000e-01 2.000e+0",
            5,
            "cut off",
        ),
        ("1.000e-01 5.000e+00\n2.000e-01 4.000e+00\n3.000e-01 3.000e+00\n4.000e-01 2.0", 5, "cut off"),
    ],
)
def test_text_refusals_name_file_and_real_line(tmp_path, body, line, message):
    with pytest.raises(SaxsFileError, match=message) as info:
        _read(tmp_path, H + body)
    assert info.value.line == line and info.value.path.endswith("a.dat")


def test_text_header_refusals(tmp_path):
    with pytest.raises(SaxsFileError, match="control byte") as info:
        _read(tmp_path, "# q_unit = 1/nm\x1b\n0.1 5 0.1\n0.2 4 0.1\n")
    assert info.value.line == 1
    with pytest.raises(SaxsFileError, match="nested") as info:
        _read(tmp_path, H + "# attr.x = " + "[" * 5000 + "]" * 5000 + "\n0.1 5 0.1\n0.2 4 0.1\n")
    assert info.value.line == 2
    for attr, what in (("history = 5", "history"), ("scan = [1]", "scan"), ("sigma_estimated = 7", "sigma")):
        with pytest.raises(SaxsFileError, match=what):
            _read(tmp_path, H + f"# attr.{attr}\n0.1 5 0.1\n0.2 4 0.1\n")
    with pytest.raises(SaxsFileError, match="furlong") as info:
        _read(tmp_path, "# q_unit = furlong\n0.1 5 0.1\n0.2 4 0.1\n")
    assert info.value.path.endswith("a.dat")


def test_long_blank_header_lines_parse(tmp_path, few_points):
    # 32 KB lines of blanks: the header regexes are linear (possessive quantifiers); a
    # quadratic one would take minutes here. The bound below only catches such a hang.
    blank = " " * 32000
    head = "# a" + blank + "\n# q(" + blank + "\n# t = 5" + blank + "x\n" + blank + "\n"
    t0 = time.perf_counter()
    ds = _read(tmp_path, H + head + "0.1 5 0.1\n0.2 4 0.1\n")
    assert time.perf_counter() - t0 < 5.0
    assert ds.intensity.values.tolist() == [[5.0, 4.0]]


def test_text_odd_but_exact(tmp_path, few_points):
    # one-number lines before the data are header (a count), not a point
    ds = _read(tmp_path, H + "100\n0.1 5 0.1\n0.2 4 0.1\n")
    assert ds.intensity.values.tolist() == [[5.0, 4.0]]
    # a '#' after a blank starts a comment; blank lines inside the data keep the rows
    ds = _read(tmp_path, H + "0.1 5 0.1 # note\n\n0.2 4 0.1\n0.3 3 0.1\n")
    assert ds.intensity.values.tolist() == [[5.0, 4.0, 3.0]]
    # CSV with decimal points and comma separators
    ds = _read(tmp_path, H + "0.1,5,0.1\n0.2,4,0.1\n")
    assert ds.intensity.values.tolist() == [[5.0, 4.0]]
    # a complete last row without final newline
    ds = _read(tmp_path, H + "1.000e-01 5.000e+00\n2.000e-01 4.000e+00\n3.000e-01 3.000e+00")
    assert ds.intensity.values.tolist() == [[5.0, 4.0, 3.0]]


def test_non_finite_intensity_and_sigma_masked_warning_names_files(tmp_path, few_points):
    files = (("a.dat", "0.1 5 inf\n0.2 nan 0.1\n0.3 3 0.1\n"),
             ("b.dat", "0.1 5 0.1\n0.2 4 0.1\n0.3 3 -inf\n"))
    for name, body in files:
        (tmp_path / name).write_text(H + body)
    with pytest.warns(SaxsWarning, match=r"3 points.*in 2 of 2 curves: a\.dat, b\.dat"):
        ds = read_series(tmp_path)
    assert ds["mask"].values.tolist() == [[True, True, False], [False, False, True]]


# --------------------------------------------------------------------------- XML
def _xml(rows):
    return "<SASroot><SASentry><SASdata>" + rows + "</SASdata></SASentry></SASroot>"


def _row(q, i, s="0.1", extra=""):
    return f'<Idata><Q unit="1/A">{q}</Q><I>{i}</I><Idev>{s}</Idev>{extra}</Idata>'


@pytest.mark.parametrize(
    ("doc", "message"),
    [
        (_xml(_row(0.01, 1, extra="<Q>0.5</Q>") + _row(0.02, 2)), "second <Q>"),
        (_xml(_row(0.01, 1, extra="<Idev>0.5</Idev>") + _row(0.02, 2)), "second <Idev>"),
        (_xml(_row(0.01, "1<b>9</b>2") + _row(0.02, 2)), "mixed content"),
        (_xml(_row(0.01, "1_0") + _row(0.02, 2)), "not a number"),
        (_xml('<Idata>5<Q unit="1/A">0.01</Q><I>1</I></Idata>' + _row(0.02, 2)), "text outside"),
        (_xml(_row(0.01, 1) + '<Idata><Q unit="1/nm">0.02</Q><I>2</I><Idev>0.1</Idev></Idata>'), "1/nm"),
    ],
)
def test_xml_refusals(tmp_path, doc, message):
    p = tmp_path / "a.xml"
    p.write_text(doc)
    with pytest.raises(SaxsFileError, match=message) as info:
        read_cansas_xml(p)
    assert info.value.line is not None and info.value.path.endswith("a.xml")


def test_xml_infinite_uncertainty_masked(tmp_path):
    p = tmp_path / "a.xml"
    p.write_text(_xml(_row(0.01, 1, "inf") + _row(0.02, 2)))
    with pytest.warns(SaxsWarning, match="masked"):
        ds = read_cansas_xml(p)
    assert ds["mask"].values.tolist() == [[True, False]]


def test_xml_limits_are_clear_errors(tmp_path, monkeypatch):
    from saxsnb.io import cansas_xml

    p = tmp_path / "a.xml"
    p.write_text(_xml("".join(_row(0.01 * k, 1) for k in range(1, 30))))
    monkeypatch.setattr(cansas_xml, "MAX_ELEMENTS", 50)
    with pytest.raises(SaxsFileError, match="more than 50 elements"):
        read_cansas_xml(p)
    monkeypatch.setattr(cansas_xml, "MAX_BYTES", 100)
    with pytest.raises(SaxsFileError, match="over 100 bytes"):
        read_cansas_xml(p)


# ------------------------------------------------------------- NXcanSAS / NetCDF
def _series():
    return saxsnb.from_arrays(
        np.linspace(0.1, 1.0, 6), np.arange(12.0).reshape(2, 6) + 1, np.ones((2, 6)),
        scan={"temperature": ([20.0, 25.0], "degC")},
    )


def _edit(path, fn):
    """Change a file in place as another program would (HDF5 cuts saxsnb's trailing
    whole-file checksum when it closes a changed file)."""
    from saxsnb.io._integrity import TRAILER_SIZE

    raw = path.read_bytes()
    path.write_bytes(raw[:-TRAILER_SIZE])
    with h5py.File(path, "r+") as f:
        fn(f)


def test_standard_q_units_win_over_the_private_record(tmp_path):
    ds = _series()
    p = tmp_path / "a.h5"
    saxsnb.save_series(ds, p)

    def to_angstrom(f):  # a conforming converter: values and units attribute
        q = f["sasentry01/sasdata01/Q"]
        q[...] = q[()] / 10.0
        q.attrs["units"] = "1/A"

    _edit(p, to_angstrom)
    with pytest.warns(SaxsWarning, match="record is ignored"):
        back = saxsnb.open_series(p)
    np.testing.assert_allclose(back.q.values, ds.q.values, rtol=1e-15)  # 1/A -> 1/nm: x10
    assert back.q.attrs["units"] == "1/nm"
    np.testing.assert_array_equal(back.intensity.values, ds.intensity.values)


def test_units_relabelled_in_place_is_refused(tmp_path):
    # only the attribute changed, by a byte edit: the whole-file checksum refuses it
    p = tmp_path / "a.h5"
    saxsnb.save_series(_series(), p)
    raw = bytearray(p.read_bytes())
    i = raw.find(b"1/nm")
    raw[i : i + 4] = b"1/A\x00"
    p.write_bytes(bytes(raw))
    with pytest.raises(SaxsFileError, match="checksum"):
        saxsnb.open_series(p)


@pytest.mark.parametrize(
    ("edit", "where", "message"),
    [
        (lambda f: (f["sasentry01/sasdata01"].__delitem__("I"), f["sasentry01/sasdata01"].create_group("I")),
         "/sasentry01/sasdata01/I", "group where a dataset belongs"),
        (lambda f: f["sasentry01/sasdata01"].__setitem__("Idev2", np.ones(3)) or f["sasentry01/sasdata01/I"]
         .attrs.__setitem__("uncertainties", "Idev2"), "", "differ|shape"),
        (lambda f: (f["sasentry01/sasdata01"].__delitem__("Idev"),
                    f["sasentry01/sasdata01"].__setitem__("Idev", h5py.ExternalLink("elsewhere.h5", "/x"))),
         "/sasentry01/sasdata01/Idev", "external link"),
        (lambda f: (f["sasentry01/sasdata01"].__delitem__("Idev"),
                    f["sasentry01/sasdata01"].__setitem__("Idev", h5py.SoftLink("/nowhere"))),
         "/sasentry01/sasdata01/Idev", "dangling"),
        (lambda f: f["sasentry01/sasdata01"].attrs.__setitem__("saxsnb_layout", "{broken"),
         "saxsnb_layout", "layout record"),
    ],
)
def test_nxcansas_structural_faults_are_named(tmp_path, edit, where, message):
    p = tmp_path / "a.h5"
    saxsnb.save_series(_series(), p)
    _edit(p, edit)
    with pytest.raises(SaxsFileError, match=message) as info:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", SaxsWarning)
            saxsnb.open_series(p)
    assert "a.h5" in str(info.value) and where in str(info.value)
    assert not (tmp_path / "elsewhere.h5").exists()


def _foreign(path, I, mask=None, q_unit="1/A"):
    with h5py.File(path, "w") as f:
        e = f.create_group("entry")
        e.attrs["canSAS_class"] = "SASentry"
        d = e.create_group("data")
        d.attrs.update({"canSAS_class": "SASdata", "signal": "I", "I_axes": "Q"})
        d["Q"] = np.linspace(0.01, 0.1, I.shape[-1])
        d["Q"].attrs["units"] = q_unit
        d["I"] = I
        if mask is not None:
            d["Mask"] = mask


def test_foreign_nxcansas_float_mask_and_shapes_refused(tmp_path):
    p = tmp_path / "f.h5"
    _foreign(p, np.ones(5), mask=np.full(5, 0.5))
    with pytest.raises(SaxsFileError, match="mask"):
        saxsnb.open_series(p)
    _foreign(p, np.ones(5), mask=np.array([0, 1, 2, 0, 0], dtype=np.int8))
    with pytest.raises(SaxsFileError, match="0 or 1"):
        saxsnb.open_series(p)
    _foreign(p, np.ones((2, 3, 5)))
    with pytest.raises(SaxsFileError, match="/entry/data/I"):
        saxsnb.open_series(p)
    _foreign(p, np.ones(5))
    ds = saxsnb.open_series(p)  # a plain foreign file still reads, q in 1/A -> 1/nm
    np.testing.assert_allclose(ds.q.values, 10 * np.linspace(0.01, 0.1, 5))


def test_netcdf_malformed_private_json_is_a_family_error(tmp_path):
    p = tmp_path / "a.nc"
    ds = _series()
    ds.attrs["history"] = ["one"]
    saxsnb.save_series(ds, p)

    def damage(f):
        f.attrs["history"] = "saxsnb-json:[broken"
        del f.attrs["saxsnb_attrs_sha256"]

    _edit(p, damage)
    with pytest.raises(SaxsFileError, match="a.nc"):
        saxsnb.open_series(p)


def test_round_trips_nc_h5_identical(tmp_path):
    ds = saxsnb.from_arrays(
        np.linspace(0.1, 1, 5), np.arange(10.0).reshape(2, 5) + 1, np.ones((2, 5)),
        scan={"temperature": ([20.0, 25.0], "degC")}, mask=np.eye(2, 5, dtype=bool), sample="µ résumé ☃",
    )
    ds["intensity"][0, 1] = np.nan
    ds.attrs.update(n_int=np.int64(3), n_small=np.int16(-2), flag=True, history=["a", "b"])
    ds = ds.assign_coords(
        time=("frame", np.array(["2024-01-01T00:00", "2024-01-02T00:00"], dtype="datetime64[ns]")),
        label=("frame", np.array(["α", "b c"])),
    )
    ds = ds.assign_coords({"pump power": ("frame", [1.0, 2.0])})
    for a, b in (("a.nc", "b.h5"), ("a.h5", "b.nc")):
        saxsnb.save_series(ds, tmp_path / a)
        x = saxsnb.open_series(tmp_path / a)
        xr.testing.assert_identical(x, ds)
        saxsnb.save_series(x, tmp_path / b)
        xr.testing.assert_identical(saxsnb.open_series(tmp_path / b), ds)
        assert type(x.attrs["n_small"]) is np.int16 or a.endswith(".nc")


def test_q_not_positive_and_float_masks_refused_on_input():
    with pytest.raises(SaxsInputError, match="q must be finite and > 0"):
        saxsnb.from_arrays([0.0, 0.1], [[1.0, 2.0]], [[0.1, 0.1]])
    with pytest.raises(SaxsInputError, match="mask"):
        saxsnb.from_arrays([0.1, 0.2], [[1.0, 2.0]], [[0.1, 0.1]], mask=[[0.5, 0.0]])
    ds = saxsnb.from_arrays([0.1, 0.2], [[1.0, 2.0]], [[0.1, 0.1]])
    ds["mask"] = (("frame", "q"), np.zeros((1, 2)))
    with pytest.raises(SaxsError, match="mask"):
        saxsnb.validate(ds)
