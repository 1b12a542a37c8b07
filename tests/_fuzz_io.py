"""Generators of good, odd and bad files for the readers, with what a correct reader must do.

Used by tests/test_io_fuzz.py (a few hundred derandomised cases) and by
benchmarks/fuzz_io.py (the large run). Each generator takes a ``numpy.random.Generator``
and a folder and returns a :class:`Case`: the file written, and either the values a
reader must return (``expect``) or ``refuse_line`` (the file must be refused by an
error of the saxsnb family naming the file and, for text rows, that line; 0 means any
or no line).

A case is judged by :func:`judge`, which returns one of
``"exact"`` (read, equal to what was written), ``"refused"`` (family error naming the
file, and the right line where one is asked for), ``"refused-benign"`` (a file that
could have been read was refused: allowed, counted), ``"silent"`` (read with other
values than expected, or read where a refusal was due: the worst outcome),
``"badline"`` (refused, but naming the wrong line or no file), ``"crash"`` (an
exception outside the family), ``"slow-refused"`` (refused by the time bound of
:func:`saxsnb.io._h5guard.run_bounded`, after more than ``limit`` seconds) and
``"hang"`` (any other read slower than ``limit`` seconds).
"""

from __future__ import annotations

import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

import saxsnb
from saxsnb.errors import SaxsError, SaxsFileError

__all__ = ["Case", "text_case", "xml_case", "store_case", "judge", "OUTCOMES"]

OUTCOMES = ("exact", "refused", "refused-benign", "slow-refused", "silent", "badline", "crash", "hang")


@dataclass
class Case:
    path: Path
    kind: str  # "text", "xml", "store"
    what: str  # the mutation applied ("benign" when none)
    expect: dict | None = None  # arrays a read must give: q (1/nm), intensity, sigma, mask
    refuse_line: int | None = None  # None: must read; 0: must refuse (any line); n: at line n
    extra: dict = field(default_factory=dict)


# ----------------------------------------------------------------------------- text
_FORMATS = ["%.8e", "%.6e", "%.10g", "%.6f", "%.17g"]


def _rows(rng, n: int, ncols: int, fmt: str):
    q = np.sort(rng.uniform(0.05, 5.0, n))
    while np.unique(np.array([fmt % v for v in q], dtype=object)).size < n:
        q = np.sort(rng.uniform(0.05, 5.0, n))
    I = rng.uniform(1.0, 1e4, n) * (1.0 if rng.random() < 0.7 else rng.choice([-1.0, 1.0], n))
    S = rng.uniform(0.01, 10.0, n)
    D = rng.uniform(0.001, 0.01, n)
    cols = [q, I, S, D][:ncols]
    text = [[fmt % v for v in row] for row in zip(*cols)]
    # the values a reader must give are those of the text (decimal -> double: float())
    values = np.array([[float(t) for t in r] for r in text])
    return text, values


def text_case(rng: np.random.Generator, folder: Path, index: int = 0) -> Case:
    n = int(rng.integers(3, 40))
    ncols = int(rng.integers(2, 5))
    fmt = str(rng.choice(_FORMATS))
    fixed = fmt.endswith("e") and "." in fmt
    tokens, values = _rows(rng, n, ncols, fmt)
    sep = str(rng.choice([" ", "  ", "\t", ", ", ",", " ; ", ";"]))
    header = ["# q_unit = 1/nm"]
    if rng.random() < 0.5:
        header.append(f"# temperature = {rng.uniform(0, 90):.3f} degC")
    if rng.random() < 0.3:
        header.append("free text: measured on a Tuesday")
    if rng.random() < 0.3:
        header.append("# attr.note = " + str(rng.choice(['"plain"', "[1, 2, 3]", '{"a": [1, {"b": 2}]}'])))
    if rng.random() < 0.3:
        header.append("")
    if rng.random() < 0.3:
        header.append("# " + " ".join(["q", "I", "sigma", "dq"][:ncols]))
    lines = header + [sep.join(r) for r in tokens]
    first = len(header) + 1  # line of the first data row
    row_line = [first + k for k in range(n)]
    mask = np.zeros(n, dtype=bool)
    refuse: int | None = None
    what = "benign"
    comment_lines = rng.random() < 0.2
    kinds = [
        "none", "none", "none", "trunc_exp", "hash_in_token", "inf_word", "decimal_comma", "control",
        "trailer", "summary", "extra_token", "drop_token", "garbage", "nonfinite", "q_nan", "cut_last",
        "blank_inside", "hash_after",
    ]
    kind = str(rng.choice(kinds))
    k = int(rng.integers(0, n))
    L = first + k - 1  # index in ``lines``
    if kind == "trunc_exp" and fixed:
        c = int(rng.integers(0, ncols))
        tok = tokens[k][c]
        tokens[k][c] = tok[: tok.index("e") + int(rng.integers(1, 3))]
        lines[L] = sep.join(tokens[k])
        what, refuse = kind, row_line[k]
    elif kind in ("hash_in_token", "inf_word"):
        c = int(rng.integers(1, ncols))
        tokens[k][c] = "1.#INF" if kind == "inf_word" else tokens[k][c][:3] + "#" + tokens[k][c][3:]
        lines[L] = sep.join(tokens[k])
        what, refuse = kind, row_line[k]
    elif kind == "decimal_comma" and "," not in sep and ";" not in sep and any("." in t for t in tokens[k]):
        c = next(j for j, t in enumerate(tokens[k]) if "." in t)
        tokens[k][c] = tokens[k][c].replace(".", ",")
        lines[L] = sep.join(tokens[k])
        what, refuse = kind, row_line[k]
    elif kind == "control":
        b = chr(int(rng.choice([1, 8, 11, 12, 27, 31, 127])))
        s = lines[L]
        pos = int(rng.integers(0, len(s) + 1))
        lines[L] = s[:pos] + b + s[pos:]
        what, refuse = kind, row_line[k]
    elif kind == "trailer":
        lines.append("")
        lines.append(sep.join([str(int(rng.integers(1, 999)))] * ncols))
        what, refuse = kind, len(lines)
    elif kind == "summary":
        m = int(rng.choice([c for c in (2, 3, 4) if c != ncols]))
        lines.insert(first - 1, " ".join([str(int(rng.integers(1, 999)))] * m))
        row_line = [r + 1 for r in row_line]
        what, refuse = kind, first
    elif kind == "extra_token":
        lines[L] = lines[L] + sep + "1.0"
        what, refuse = kind, row_line[k]
    elif kind == "drop_token" and (ncols >= 3 or k > 0):
        tokens[k] = tokens[k][:-1]
        lines[L] = sep.join(tokens[k])
        what, refuse = kind, row_line[k]
    elif kind == "garbage":
        c = int(rng.integers(0, ncols))
        # a word alone in the first row makes it read as a header line: ambiguous, not generated
        words = ["1.2.3", "--1", "0x10", "1e5e3", "1_000", "1.5d3", "5..1"] + (["abc", "e5"] if k else [])
        tokens[k][c] = str(rng.choice(words))
        lines[L] = sep.join(tokens[k])
        what, refuse = kind, row_line[k]
    elif kind == "nonfinite" and ncols >= 3:
        c = int(rng.integers(1, 3))
        tokens[k][c] = str(rng.choice(["nan", "inf", "-inf", "NaN", "Infinity"]))
        lines[L] = sep.join(tokens[k])
        values[k, c] = float(tokens[k][c])
        mask[k] = True
        what = kind
    elif kind == "q_nan":
        tokens[k][0] = "nan"
        lines[L] = sep.join(tokens[k])
        what, refuse = kind, row_line[k]
    elif kind == "cut_last" and fixed and n >= 3:
        s = lines[-1]
        cut = int(rng.integers(len(s) - len(tokens[-1][-1]) + 1, len(s)))  # inside the last token
        lines[-1] = s[:cut]
        what, refuse = kind, row_line[-1]
    elif kind == "blank_inside" and k > 0:
        lines.insert(L, "")  # a blank line between data rows: the rows stay data
        row_line = [r + (1 if j >= k else 0) for j, r in enumerate(row_line)]
        what = kind
        if k == n - 1:  # the last row alone after a blank line: a trailer? refused
            refuse = row_line[-1]
    elif kind == "hash_after":
        lines[L] = lines[L] + " # a note"
        what = kind
    if comment_lines and refuse is None and n > 3:
        lines.insert(first + 1, "# a comment line between rows")
        what += "+comment"
    meta: dict = {}
    if rng.random() < 0.4 and what != "cut_last":
        # trailing metadata after the rows (common practice: instrument software appends a
        # JSON object or key: value / key = value lines after the numeric block)
        refuse, what, meta = _trailer(rng, lines, refuse, what, sep, ncols)
    if n < 5 and refuse is None:
        refuse, what = 0, what + "+few_points"  # fewer than saxsnb.io.text.MIN_Q_POINTS rows
    eol = "\r\n" if rng.random() < 0.2 else "\n"
    text = eol.join(lines)
    if not (what == "cut_last") and rng.random() < 0.9:
        text += eol
    elif what != "cut_last" and fixed:
        text += eol  # a complete last row without newline is fine, but not tested with cuts
    data = text.encode("latin-1")
    if rng.random() < 0.1:
        data = b"\xef\xbb\xbf" + data
    path = folder / f"t{index}.dat"
    path.write_bytes(data)
    expect = None
    if refuse is None:
        expect = {
            "q": values[:, 0],
            "intensity": values[:, 1],
            "sigma": values[:, 2] if ncols > 2 else None,
            "mask": mask,
            "meta": meta,
        }
    return Case(path, "text", what, expect, refuse)


def _trailer(rng, lines: list, refuse, what: str, sep: str, ncols: int):
    """Append a trailing metadata section (JSON, key: value or key = value lines, or both)
    to ``lines``, sometimes damaged; returns (refuse_line, what, expected metadata)."""
    tr = float(f"{rng.uniform(0.1, 1.0):.6f}")
    wl = float(f"{rng.uniform(0.05, 0.2):.5f}")
    day, hour, sec = int(rng.integers(1, 29)), int(rng.integers(0, 24)), int(rng.integers(0, 10))
    stamp = f"2024-05-{day:02d}T{hour:02d}:00:0{sec}"
    style = str(rng.choice(["json", "json_lines", "colon", "equals", "both"]))
    block: list[str] = []
    if style in ("json", "both"):
        block.append(
            f'{{"exposure_start": "{stamp}", "beam": {{"wavelength": {wl:.5f}, "transmission": {tr:.6f}}}}}'
        )
    elif style == "json_lines":
        block += ["{", f'  "exposure_start": "{stamp}",', '  "beam": {', f'    "wavelength": {wl:.5f},',
                  f'    "transmission": {tr:.6f}', "  }", "}"]
    else:
        s = ": " if style == "colon" else " = "
        block += [f"exposure_start{s}{stamp}", f"beam.wavelength{s}{wl:.5f}", f"beam.transmission{s}{tr:.6f}"]
    if style == "both":
        block.insert(0, "# trailing metadata")
        block.append("operator = A. Person")
    meta = {"exposure_start": stamp, "beam.wavelength": wl, "beam.transmission": tr}
    if rng.random() < 0.3:
        block.insert(0, "")  # a blank line between the rows and the metadata
    mutation = str(rng.choice(["none", "none", "none", "row_after", "bad_json", "free_text", "count_row"]))
    if refuse is not None:
        mutation = "none"
    if mutation == "row_after":
        block.append(sep.join(["1.0"] * ncols))  # a row after the metadata: refused, not data
        # named: the first metadata line, read as a row of the data block
        refuse = len(lines) + 1 + next(i for i, b in enumerate(block) if b and not b.startswith("#"))
    elif mutation == "bad_json" and style in ("json", "json_lines"):
        if style == "json":
            block[-1] = block[-1][:-1] + ",}"  # a trailing comma: invalid JSON
            refuse = len(lines) + len(block)
        else:
            block[-2] = "  },"
            refuse = len(lines) + len(block)  # the closing brace after the comma
    elif mutation == "free_text":
        block.append("end of file")
        refuse = len(lines) + len(block)
    elif mutation == "count_row":
        # the last row alone after a blank line, before the metadata: a count, not data
        block[:0] = ["", sep.join([str(int(rng.integers(1, 999)))] * ncols)]
        refuse = len(lines) + 2
    else:
        mutation = "none"
    lines.extend(block)
    return refuse, f"{what}+trailer_{style}" + ("" if mutation == "none" else f"_{mutation}"), meta


def _read_text(path):
    return saxsnb.read_series(path)


# ------------------------------------------------------------------------------ XML
def xml_case(rng: np.random.Generator, folder: Path, index: int = 0) -> Case:
    n = int(rng.integers(2, 20))
    tokens, values = _rows(rng, n, 3, str(rng.choice(["%.8e", "%.10g", "%.6f"])))
    ns = ' xmlns="urn:cansas1d:1.1"' if rng.random() < 0.5 else ""
    nl = "\n" if rng.random() < 0.7 else ""
    rows = []
    for q, i, s in tokens:
        rows.append(
            f'<Idata><Q unit="1/A">{q}</Q>{nl}<I unit="1/cm">{i}</I><Idev unit="1/cm">{s}</Idev></Idata>'
        )
    mask = np.zeros(n, dtype=bool)
    kind = str(rng.choice(
        ["none", "none", "dup", "mixed", "garbage", "noI", "unit", "doctype", "cut", "inf_dev", "text_in_row"]
    ))
    k = int(rng.integers(0, n))
    what, refuse = "benign", None
    if kind == "dup":
        tag = str(rng.choice(["Q", "I", "Idev"]))
        rows[k] = rows[k].replace("</Idata>", f"<{tag}>1.0</{tag}></Idata>")
        what, refuse = kind, 0
    elif kind == "mixed":
        rows[k] = rows[k].replace("</I>", "<b>9</b>2</I>")
        what, refuse = kind, 0
    elif kind == "garbage":
        rows[k] = rows[k].replace(f">{tokens[k][1]}<", ">1.2.3<")
        what, refuse = kind, 0
    elif kind == "noI":
        rows[k] = rows[k].replace(f'<I unit="1/cm">{tokens[k][1]}</I>', "")
        what, refuse = kind, 0
    elif kind == "unit" and k > 0:
        rows[k] = rows[k].replace('<Q unit="1/A">', '<Q unit="1/nm">')
        what, refuse = kind, 0
    elif kind == "inf_dev":
        rows[k] = rows[k].replace(f">{tokens[k][2]}</Idev>", ">inf</Idev>")
        values[k, 2] = np.inf
        mask[k] = True
        what = kind
    elif kind == "text_in_row":
        rows[k] = rows[k].replace("<Idata>", "<Idata>7")
        what, refuse = kind, 0
    body = "\n".join(rows)
    doc = f'<?xml version="1.0"?>\n<SASroot version="1.1"{ns}><SASentry><Title>t</Title><SASdata>\n{body}\n'
    doc += "</SASdata></SASentry></SASroot>\n"
    if kind == "doctype":
        doc = doc.replace("<SASroot", '<!DOCTYPE x [<!ENTITY a "1">]>\n<SASroot', 1)
        what, refuse = kind, 0
    if kind == "cut":
        doc = doc[: int(rng.integers(10, len(doc) - 20))]
        what, refuse = kind, 0
    path = folder / f"x{index}.xml"
    path.write_text(doc, encoding="utf-8")
    expect = None
    if refuse is None:
        expect = {"q": 10 * values[:, 0], "intensity": values[:, 1], "sigma": values[:, 2], "mask": mask}
    return Case(path, "xml", what, expect, refuse)


# ------------------------------------------------------------------- NetCDF / NXcanSAS
def _series(rng):
    n_f, n_q = int(rng.integers(1, 6)), int(rng.integers(2, 30))
    q = np.sort(rng.uniform(0.05, 5.0, n_q))
    while np.unique(q).size < n_q:
        q = np.sort(rng.uniform(0.05, 5.0, n_q))
    I = rng.normal(100, 30, (n_f, n_q))
    S = rng.uniform(0.1, 2, (n_f, n_q))
    mask = rng.random((n_f, n_q)) < 0.1 if rng.random() < 0.5 else None
    scan = {"temperature": (np.round(rng.uniform(0, 90, n_f), 3), "degC")}
    ds = saxsnb.from_arrays(q, I, S, scan=scan, mask=mask, sample="fuzz ☃")
    ds.attrs["count"] = np.int64(rng.integers(0, 100))
    return ds


def store_case(rng: np.random.Generator, folder: Path, index: int = 0, *, strip_trailer: float = 0.3) -> Case:
    """A series saved as .nc or .h5, then damaged: byte flips, overwritten or cut blocks
    (the whole-file checksum must refuse them), or, with the checksum record removed as
    another program would, damage that only the per-array checksums and the guards see."""
    ext = str(rng.choice([".nc", ".h5"]))
    ds = _series(rng)
    path = folder / f"s{index}{ext}"
    saxsnb.save_series(ds, path)
    raw = bytearray(path.read_bytes())
    original = bytes(raw)
    kind = str(rng.choice(["none", "flip", "flip", "flips", "block", "zero", "cut"]))
    stripped = rng.random() < strip_trailer
    from saxsnb.io._integrity import TRAILER_SIZE

    if stripped:
        raw = raw[:-TRAILER_SIZE]
    end = len(raw) - (0 if stripped else TRAILER_SIZE)
    if kind == "flip":
        i = int(rng.integers(0, end))
        raw[i] ^= 1 << int(rng.integers(0, 8))
    elif kind == "flips":
        for _ in range(int(rng.integers(2, 20))):
            i = int(rng.integers(0, end))
            raw[i] ^= 1 << int(rng.integers(0, 8))
    elif kind == "block":
        i = int(rng.integers(0, end))
        m = int(rng.integers(1, 64))
        m = min(m, end - i)
        raw[i : i + m] = rng.integers(0, 256, m).astype(np.uint8).tobytes()
    elif kind == "zero":
        i = int(rng.integers(0, end))
        m = min(512, end - i)
        raw[i : i + m] = bytes(m)
    elif kind == "cut":
        raw = raw[: int(rng.integers(0, len(raw)))]
    if kind == "cut" and len(raw) >= end:
        kind, stripped = "none", True  # only the checksum record was cut: as if stripped
    elif kind != "cut" and raw[:end] == original[:end]:
        kind = "none"  # the damage changed nothing (zeros over zeros)
    path.write_bytes(bytes(raw))
    expect = {
        "q": ds.q.values,
        "intensity": ds.intensity.values,
        "sigma": ds.sigma.values,
        "mask": ds["mask"].values if "mask" in ds else np.zeros(ds.intensity.shape, bool),
    }
    if kind == "none":
        return Case(path, "store", f"{ext} intact{' (no file checksum)' if stripped else ''}", expect, None,
                    {"ds": ds})
    # damaged: with the whole-file checksum, a refusal is due; without it, a read is
    # allowed only if it gives the same arrays (the damage hit unused bytes)
    return Case(path, "store", f"{ext} {kind}{' (no file checksum)' if stripped else ''}", expect,
                None if stripped else 0, {"ds": ds, "may_read": stripped})


# ------------------------------------------------------------------------------ judge
def _equal(ds, expect) -> bool:
    def same(a, b):
        a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
        return a.shape == b.shape and bool(np.all((a == b) | (np.isnan(a) & np.isnan(b))))

    I = ds.intensity.values
    if I.ndim == 2 and np.asarray(expect["intensity"]).ndim == 1:
        I = I[0]
    S = ds.sigma.values[0] if np.asarray(expect["intensity"]).ndim == 1 else ds.sigma.values
    M = ds["mask"].values if "mask" in ds else np.zeros(ds.intensity.shape, bool)
    M = M[0] if np.asarray(expect["intensity"]).ndim == 1 else M
    if not same(ds.q.values, expect["q"]):
        return False
    if not same(I, expect["intensity"]):
        return False
    if expect.get("sigma") is not None and not same(S, expect["sigma"]):
        return False
    for name, value in (expect.get("meta") or {}).items():
        if name not in ds.coords and name not in ds.attrs:
            return False
        # text equal in all frames is an attr, other values per-frame coordinates
        got = ds[name].values.ravel()[0] if name in ds.coords else ds.attrs[name]
        if (got != value) if isinstance(value, str) else not same(got, value):
            return False
    return bool(np.array_equal(M, np.asarray(expect["mask"], dtype=bool)))


def _read(case: Case):
    if case.kind == "text":
        return saxsnb.read_series(case.path)
    if case.kind == "xml":
        return saxsnb.read_cansas_xml(case.path)
    return saxsnb.open_series(case.path)


def judge(case: Case, limit: float = 1.0) -> tuple[str, str]:
    """(outcome, detail) of reading ``case``."""
    t0 = time.perf_counter()
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ds = _read(case)
        outcome = None
    except SaxsError as exc:
        ds, outcome = None, exc
    except Exception as exc:  # noqa: BLE001 - what the fuzzer looks for
        return "crash", f"{type(exc).__name__}: {exc}"
    dt = time.perf_counter() - t0
    if dt > limit:
        if outcome is not None and "did not finish within" in str(outcome):
            return "slow-refused", f"{dt:.2f} s: {outcome}"  # the bounded child read stopped it
        return "hang", f"{dt:.2f} s"
    if ds is not None:
        if case.expect is None or case.refuse_line is not None:
            if case.extra.get("may_read") and _equal(ds, case.expect):
                return "exact", "damage in unused bytes"
            return "silent", "read where a refusal was due"
        return ("exact", "") if _equal(ds, case.expect) else ("silent", "values differ")
    exc = outcome
    name = case.path.name
    if name not in str(exc):
        return "badline", f"no file name: {exc}"
    if case.refuse_line is None:
        if case.extra.get("may_read"):
            return "refused", str(exc)
        return "refused-benign", str(exc)
    if case.refuse_line > 0 and not (isinstance(exc, SaxsFileError) and exc.line == case.refuse_line):
        return "badline", f"expected line {case.refuse_line}: {exc}"
    return "refused", str(exc)
