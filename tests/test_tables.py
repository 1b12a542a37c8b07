"""Results as tables: one row per frame, units in the column names, pandas round trip."""

import numpy as np
import pandas as pd
import pytest

import saxsnb
from saxsnb.errors import SaxsInputError


def test_table_of_every_per_frame_result(tmp_path):
    ds, bg = saxsnb.demo.make_series("flow-growth", seed=0)
    sub = ds.saxs.subtract(bg)
    for res in (
        sub.saxs.guinier(),
        sub.saxs.porod(),
        sub.saxs.invariant(),
        sub.saxs.kratky_summary(),
        sub.saxs.index_phases(),
    ):
        df = res.saxs.to_dataframe()
        assert len(df) == ds.sizes["frame"] and df.columns[0] == "position [mm]"
        path = tmp_path / f"{res.attrs['operation']}.csv"
        res.saxs.to_csv(path)
        back = pd.read_csv(path, index_col="frame")
        assert list(back.columns) == list(df.columns)
        for c in df.columns:
            if df[c].dtype.kind == "f":
                np.testing.assert_allclose(back[c].to_numpy(float), df[c].to_numpy(), rtol=1e-12)
    g = sub.saxs.guinier()
    assert "rg [nm]" in g.saxs.to_dataframe() and "rg" in g.saxs.to_dataframe(units=False)


def test_table_needs_frames():
    with pytest.raises(SaxsInputError):
        saxsnb.demo.example_series().isel(frame=0).saxs.to_dataframe()
