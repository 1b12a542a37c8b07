"""Text files as instruments write them (issue 10, item 1): metadata after the rows (a JSON
object, ``key: value`` or ``key = value`` lines), timestamps, damaged first rows, too few
points. Trailing metadata after the numeric block is common practice in the output of
reduction software; ISO 8601 is the timestamp format of that metadata (ISO 8601:2004)."""

import numpy as np
import pytest

from saxsnb import read_series
from saxsnb.errors import SaxsFileError, SaxsInputError
from saxsnb.io.text import MIN_Q_POINTS

H = "# q_unit = 1/nm\n"
ROWS = "".join(f"{0.1 * k:.1f} {10.0 - k:.1f} 0.1\n" for k in range(1, 7))  # lines 2..7 after H


def _write(tmp_path, text, name="a.dat"):
    p = tmp_path / name
    p.write_text(text)
    return p


def test_json_trailer_nested_keys_flattened_with_dots(tmp_path):
    trailer = ('{"timestamp": "2024-05-01T12:00:03", "beam": {"transmission": 0.81, '
               '"wavelength": {"value": 0.154, "units": "nm"}}, "flags": [1, 2], "ok": true}\n')
    ds = read_series(_write(tmp_path, H + ROWS + "\n" + trailer))
    assert ds.intensity.values.tolist() == [[9.0, 8.0, 7.0, 6.0, 5.0, 4.0]]  # the trailer is not data
    assert ds["beam.transmission"].values.tolist() == [0.81]
    assert ds["beam.wavelength"].attrs["units"] == "nm"
    assert ds.attrs["timestamp"] == "2024-05-01T12:00:03"  # text equal in all frames: an attr
    assert ds.attrs["flags"] == [1, 2] and ds.attrs["ok"] == "true"


@pytest.mark.parametrize("sep", [": ", " = ", ":", "="])
def test_key_value_trailer(tmp_path, sep):
    trailer = f"# metadata\n[instrument]\nexposure time{sep}0.5 s\nTransmission{sep}0.7\nsample{sep}water\n"
    ds = read_series(_write(tmp_path, H + ROWS + trailer))
    assert ds["exposure_time"].values.tolist() == [0.5] and ds["exposure_time"].attrs["units"] == "s"
    assert ds["transmission"].values.tolist() == [0.7]
    assert ds.sizes["q"] == 6


def test_multiline_json_and_key_value_lines_together(tmp_path):
    trailer = 'operator: someone\n{\n  "a": {"b": 2.5},\n  "c": "x"\n}\n# end\n'
    ds = read_series(_write(tmp_path, H + ROWS + trailer))
    assert ds["a.b"].values.tolist() == [2.5] and ds.attrs["c"] == "x" and ds.attrs["operator"] == "someone"


def test_per_frame_metadata_and_scan_from_trailer(tmp_path):
    for i, (t, tr) in enumerate([(20.0, 0.8), (0.0, 0.9), (10.0, 0.85)]):
        _write(tmp_path, H + ROWS + f'{{"exposure_start": {t}, "transmission": {tr}, "label": "f{i}"}}\n',
               name=f"f{i}.dat")
    ds = read_series(tmp_path, scan="exposure_start")
    assert ds.exposure_start.values.tolist() == [0.0, 10.0, 20.0]
    assert ds.transmission.values.tolist() == [0.9, 0.85, 0.8]  # sorted with the frames
    assert ds.label.values.tolist() == ["f1", "f2", "f0"]  # text that varies: per frame


def test_time_from_iso_timestamps(tmp_path):
    stamps = ["2024-05-01T12:00:03.5Z", "2024-05-01T11:59:58Z", "2024-05-01T13:00:00+01:00"]
    for i, s in enumerate(stamps):
        _write(tmp_path, H + ROWS + f"start: {s}\n", name=f"f{i}.dat")
    ds = read_series(tmp_path, time_from="start", scan="time")
    # 13:00+01:00 is 12:00Z: 2 s after the earliest (11:59:58Z); 12:00:03.5Z is 5.5 s after
    assert ds.time.values.tolist() == [0.0, 2.0, 5.5] and ds.time.attrs["units"] == "s"
    assert ds.start.values.tolist()[0] == "2024-05-01T11:59:58Z"


def test_time_from_refusals(tmp_path):
    _write(tmp_path, H + ROWS + "start: 2024-05-01T12:00:00Z\n", name="a.dat")
    _write(tmp_path, H + ROWS + "start: 2024-05-01T12:00:01\n", name="b.dat")
    with pytest.raises(SaxsFileError, match="time zone") as info:
        read_series(tmp_path, time_from="start")
    assert "b.dat" in str(info.value)
    _write(tmp_path, H + ROWS + "start: yesterday\n", name="b.dat")
    with pytest.raises(SaxsFileError, match="ISO 8601"):
        read_series(tmp_path, time_from="start")
    with pytest.raises(SaxsFileError, match="no 'stop'"):
        read_series(tmp_path, time_from="stop")
    with pytest.raises(SaxsInputError, match="time_from"):
        read_series(tmp_path, time_from=5)


@pytest.mark.parametrize(
    ("tail", "line", "message"),
    [
        ("transmission: 0.7\n0.7 3.0 0.1\n", 8, "metadata"),  # a row after the metadata
        ("transmission: 0.7\nend of file\n", 9, "neither"),
        ('{"a": 1,}\n', 8, "JSON"),
        ('{\n "a": 1,\n "b": [1, 2\n}\n', 11, "JSON"),
        ("\n99 99 99\ntransmission: 0.7\n", 9, "alone after a blank line"),  # a count, not data
        ("x = 1\n" + "7 " * 0 + "0.8 1.0 0.1 9\n", 8, "metadata"),
    ],
)
def test_trailer_refusals_name_the_line(tmp_path, tail, line, message):
    with pytest.raises(SaxsFileError, match=message) as info:
        read_series(_write(tmp_path, H + ROWS + tail))
    assert info.value.line == line and "a.dat" in str(info.value)


def test_trailer_that_contradicts_the_header(tmp_path):
    with pytest.raises(SaxsFileError, match="header") as info:
        read_series(_write(tmp_path, H + "# transmission = 0.8\n" + ROWS + "transmission: 0.7\n"))
    assert info.value.line == 9


@pytest.mark.parametrize("first", ["0.1 abc 0.1\n", "abc 9.5 0.1\n", "0.1 9.5 x\n"])
def test_a_damaged_first_row_is_refused(tmp_path, first):
    with pytest.raises(SaxsFileError, match="as a number") as info:
        read_series(_write(tmp_path, H + first + ROWS))
    assert info.value.line == 2


def test_free_text_column_names_and_counts_before_the_data(tmp_path):
    head = "Measured on a Tuesday\n6\nq I sigma\nTemperature 25.0\n"
    ds = read_series(_write(tmp_path, H + head + ROWS))
    assert ds.sizes["q"] == 6 and ds.intensity.values[0, 0] == 9.0


def test_fewer_than_five_points_refused(tmp_path):
    assert MIN_Q_POINTS == 5
    rows = "".join(f"{0.1 * k:.1f} 5.0 0.1\n" for k in range(1, MIN_Q_POINTS))
    with pytest.raises(SaxsFileError, match="at least 5 q points") as info:
        read_series(_write(tmp_path, H + rows))
    assert "a.dat" in str(info.value)
    rows += "0.9 5.0 0.1\n"
    assert read_series(_write(tmp_path, H + rows)).sizes["q"] == 5


def test_demo_preparation_files_carry_trailers(tmp_path):
    import saxsnb
    from saxsnb.demo.preparation import TRANSMISSION

    folder = saxsnb.demo.write_demo(tmp_path, names=["preparation"])["preparation"]
    s = read_series(folder / "sample" / "*.dat", scan="exposure_start", time_from="timestamp")
    b = read_series(folder / "buffer" / "*.dat", scan="exposure_start", time_from="timestamp")
    assert np.all(s["beam.transmission"].values == TRANSMISSION["sample"])
    assert np.all(b["beam.transmission"].values == TRANSMISSION["buffer"])
    np.testing.assert_array_equal(s.time.values, s.exposure_start.values)  # 2 s apart, from 0
    assert "{" in (sorted((folder / "sample").glob("*.dat"))[0]).read_text()
