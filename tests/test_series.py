"""The series data model (DESIGN.md): from_arrays, validate, units, history."""

import json

import numpy as np
import pytest
import xarray as xr

import saxsnb
from saxsnb.errors import SaxsError, SaxsInputError
from saxsnb.series import add_history, estimate_sigma, main_scan, q_unit_factor


def _series(n=4, m=50, **kw):
    q = np.linspace(0.1, 2.0, m)
    I = np.outer(np.arange(1, n + 1), np.exp(-q))
    return saxsnb.from_arrays(q, I, 0.01 * I, **kw)


def test_layout_matches_design():
    ds = _series(scan={"temperature": [20.0, 21.0, 22.0, 23.0]})
    assert dict(ds.sizes) == {"frame": 4, "q": 50}
    assert ds.intensity.dims == ("frame", "q") and ds.sigma.dims == ("frame", "q")
    assert ds.q.dtype == np.float64 and ds.q.attrs["units"] == "1/nm"
    assert ds.frame.dtype == np.int64
    assert ds.temperature.dims == ("frame",) and ds.temperature.attrs["units"] == "degC"
    assert ds.attrs["history"] == [] and ds.attrs["sigma_estimated"] == 0
    assert main_scan(ds) == "temperature"


def test_q_in_inverse_angstrom_is_converted():
    # 1 1/A = 10 1/nm (definition of the angstrom)
    assert q_unit_factor("1/A") == 10.0
    ds = saxsnb.from_arrays([0.01, 0.02], [[1.0, 2.0]], [[0.1, 0.1]], q_unit="A^-1")
    np.testing.assert_allclose(ds.q.values, [0.1, 0.2])
    entry = json.loads(ds.attrs["history"][-1])
    assert entry["operation"] == "convert_q_unit" and entry["parameters"]["source_unit"] == "1/A"


def test_inputs_are_copied_not_modified():
    q = np.linspace(0.1, 1, 5)
    I = np.ones((2, 5))
    ds = saxsnb.from_arrays(q, I, q_unit="1/A")
    ds.intensity[:] = 7.0
    assert np.all(I == 1.0) and q[0] == 0.1


def test_missing_sigma_is_estimated_and_flagged(rng):
    q = np.linspace(0.1, 2, 1000)
    I = 50.0 + rng.normal(0, 0.5, (3, 1000))
    ds = saxsnb.from_arrays(q, I)
    assert ds.attrs["sigma_estimated"] == 1
    # the true noise is 0.5 (the draw above); the estimate is within 20 %: common practice
    assert 0.4 < float(np.median(ds.sigma)) < 0.6


def test_estimate_sigma_keeps_nan_positions():
    I = np.array([[1.0, 2.0, np.nan, 4.0, 5.0]])
    s = estimate_sigma(I)
    assert np.isnan(s[0, 2]) and np.all(s[0, [0, 1, 3, 4]] > 0)


@pytest.mark.parametrize(
    ("kwargs", "parameter"),
    [
        ({"q": [[1.0, 2.0]]}, "q"),
        ({"intensity": np.ones((2, 3))}, "intensity"),
        ({"sigma": np.ones((1, 5))}, "sigma"),
        ({"scan": {"temperature": [1.0, 2.0, 3.0]}}, "scan"),
        ({"q_unit": "furlongs"}, "q_unit"),
        ({"mask": np.ones((3, 3), bool)}, "mask"),
    ],
)
def test_bad_input_names_the_parameter(kwargs, parameter):
    args = {"q": [0.1, 0.2], "intensity": np.ones((2, 2)), "sigma": None}
    args.update(kwargs)
    q, I, s = args.pop("q"), args.pop("intensity"), args.pop("sigma")
    with pytest.raises(SaxsInputError) as err:
        saxsnb.from_arrays(q, I, s, **args)
    assert err.value.parameter == parameter
    assert isinstance(err.value, SaxsError)


def test_validate_rejects_foreign_datasets():
    with pytest.raises(SaxsInputError, match="frame"):
        saxsnb.validate(xr.Dataset({"x": ("t", [1.0])}))
    ds = _series()
    with pytest.raises(SaxsInputError, match="increasing"):
        saxsnb.validate(ds.isel(q=slice(None, None, -1)))


def test_history_is_appended_on_a_copy():
    ds = _series()
    out = add_history(ds, "scale", factor=2.0, arr=np.array([1, 2]))
    assert ds.attrs["history"] == []
    entry = json.loads(out.attrs["history"][0])
    assert entry["parameters"] == {"factor": 2.0, "arr": [1, 2]}
    assert entry["version"] == saxsnb.__version__


def test_scan_with_units_pair_and_dataarray():
    T = xr.DataArray([300.0, 310.0], dims="frame", attrs={"units": "K"})
    ds = _series(n=2, scan={"temperature": T, "time": ([0.0, 60.0], "min")})
    assert ds.temperature.attrs["units"] == "K" and ds.time.attrs["units"] == "min"


def test_one_exception_family_is_a_value_error():
    # issue 2: every error is a saxsnb.InputError, a ValueError
    from saxsnb.errors import SaxsFileError, SaxsFitError

    for cls in (SaxsInputError, SaxsFileError, SaxsFitError):
        assert issubclass(cls, saxsnb.InputError) and issubclass(cls, ValueError)
    with pytest.raises(saxsnb.InputError):
        saxsnb.read_series("no-such-folder-anywhere/*.dat")
