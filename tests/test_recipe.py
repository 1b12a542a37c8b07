"""result.saxs.recipe(): code from the files that rebuilds the result identically (issue 11)."""

import numpy as np
import pytest
import xarray as xr

import saxsnb
from saxsnb.errors import SaxsInputError


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    d = tmp_path_factory.mktemp("demo")
    saxsnb.demo.write_demo(d)
    return d


def _rerun(code):
    ns = {}  # a fresh namespace that holds nothing but what the code makes from the files
    exec(code, ns)
    return ns


def test_recipe_from_files_through_subtraction_and_fits(folder):
    flow = saxsnb.read_series(str(folder / "flow-growth"), scan="position")
    bg = saxsnb.read_series(str(folder / "flow-growth" / "background"), scan="position")
    sub = flow.saxs.subtract(bg)
    for res in (sub.saxs.guinier(), sub.saxs.porod((1.5, 3.0)), sub.saxs.kratky_summary(),
                sub.saxs.guinier(shape="rod", q_range=(0.5, 1.5))):
        code = res.saxs.recipe("flow")
        assert "saxsnb.read_series(" in code and "flow.saxs.subtract(background" in code
        xr.testing.assert_identical(_rerun(code)["result"], res)
    xr.testing.assert_identical(_rerun(sub.saxs.recipe("flow", result="x"))["flow"], sub)


def test_recipe_of_peaks_and_phases(folder):
    ramp = saxsnb.read_series(str(folder / "phase-ramp"), scan="temperature").isel(frame=slice(0, 141, 10))
    # a selection is not in the history: start from the whole series
    ramp = saxsnb.read_series(str(folder / "phase-ramp"), scan="temperature")
    pk = ramp.saxs.find_peaks(min_prominence=8.0)
    ix = ramp.saxs.index_phases(pk, overrides={3: {"phase": "lamellar", "lattice": 6.0}})
    code = ix.saxs.recipe("ramp")
    assert "peaks = ramp.saxs.find_peaks(" in code and "index_phases(peaks=peaks" in code
    xr.testing.assert_identical(_rerun(code)["result"], ix)


def test_recipe_of_a_distance_distribution():
    ds, bg = saxsnb.demo.make_series("unfolding", seed=2)
    pr = ds.saxs.subtract(bg).isel(frame=slice(None)).saxs.distance_distribution(dmax=12.0)
    xr.testing.assert_identical(_rerun(pr.saxs.recipe())["result"], pr)


def test_recipe_refuses_what_it_cannot_write():
    ds = saxsnb.demo.example_series()
    with pytest.raises(SaxsInputError, match="no history"):
        ds.saxs.guinier().saxs.recipe()
    d, _ = saxsnb.demo.make_series("unfolding", seed=0)
    ranges = np.tile([0.1, 0.4], (d.sizes["frame"], 1))
    with pytest.raises(SaxsInputError, match="per-frame"):
        d.saxs.guinier(q_range=ranges).saxs.recipe()
    with pytest.raises(SaxsInputError, match="variable name"):
        d.saxs.recipe("not a name")


def test_metadata_cannot_inject_code(tmp_path):
    # issue 12, item 7: text from files enters the code only as a literal
    f = tmp_path / "evil\nimport os; os.system('echo injected')#.dat"
    try:
        f.write_text("# temperature = 20\n0.1 1.0 0.1\n0.2 0.9 0.1\n0.3 0.8 0.1\n0.4 0.7 0.1\n0.5 0.6 0.1\n")
    except OSError:
        pytest.skip("file system refuses the name")
    ds = saxsnb.read_series([str(f)], q_unit="1/nm")
    code = ds.saxs.recipe()
    compile(code, "recipe", "exec")
    assert sum(1 for line in code.splitlines() if "import os" in line and not line.lstrip().startswith(
        ("ds = saxsnb.read_series([",))) == 0
