"""``ds.saxs`` methods that turn a per-frame result into a table (pandas, CSV)."""

from __future__ import annotations

from ..errors import SaxsInputError
from ..io._atomic import atomic_write_bytes
from ._core import AccessorBase

__all__ = ["TableMethods"]


class TableMethods(AccessorBase):
    """Results as tables: one row per frame, scan coordinates first, units in the names."""

    def to_dataframe(self, *, units: bool = True):
        """The per-frame variables of a result as a :class:`pandas.DataFrame`.

        One row per frame; the columns are the scan coordinates first, then every
        variable on ``frame`` alone (variables on (frame, peak), (frame, q), ... are
        left out: select them first, e.g. ``res.isel(slot=0)``). With ``units`` each
        column name carries its unit in brackets, e.g. ``"rg [nm]"``.

        Examples
        --------
        >>> import saxsnb
        >>> res = saxsnb.demo.example_series("spheres").saxs.guinier()
        >>> df = res.saxs.to_dataframe()
        >>> list(df.columns[:2]), len(df), df["rg [nm]"].round(3).tolist()
        (['time [s]', 'q_min [1/nm]'], 2, [1.567, 1.96])
        """
        import pandas as pd

        ds = self._ds
        if "frame" not in ds.dims:
            raise SaxsInputError("a table needs a result on the 'frame' dimension", parameter="ds")
        names = [c for c in ds.coords if ds[c].dims == ("frame",) and c != "frame"]
        names += [v for v in ds.data_vars if ds[v].dims == ("frame",)]

        def label(n):
            # a scan coordinate renamed beside a variable of its name (a peak "position"
            # on a "position" scan) keeps its own name when that variable is not a column
            scan = ds[n].attrs.get("scan_coordinate")
            name = scan if scan and scan not in names else n
            u = ds[n].attrs.get("units")
            return f"{name} [{u}]" if units and u not in (None, "") else name

        cols = {label(n): ds[n].values for n in names}
        return pd.DataFrame(cols, index=pd.Index(ds["frame"].values, name="frame"))

    def to_csv(self, path, *, units: bool = True) -> None:
        """Write :meth:`to_dataframe` to a CSV file, atomically.

        Examples
        --------
        >>> import os, tempfile, pandas as pd, saxsnb
        >>> res = saxsnb.demo.example_series("spheres").saxs.guinier()
        >>> path = os.path.join(tempfile.mkdtemp(), "guinier.csv")
        >>> res.saxs.to_csv(path)
        >>> pd.read_csv(path, index_col="frame")["status"].tolist()
        ['ok', 'ok']
        """
        text = self.to_dataframe(units=units).to_csv()
        atomic_write_bytes(path, text.encode("utf-8"))

