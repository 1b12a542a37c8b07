"""Parsing of text-column files: header/body split, header metadata, numeric body.

The numeric bodies are parsed by maintained parsers (see :mod:`._bodies`): the bodies
of many files laid out alike (one separator byte, the same empty fields on every line,
the usual output of a program) are joined and read by polars' multi-threaded CSV
reader in one call; any other body by ``numpy.loadtxt``. Any file that does not parse
cleanly is re-read line by line, only to name the line that is wrong. Files laid out
alike (the usual series) share the work that depends only on the layout through a
:class:`HeaderCache`: one regular expression reads a header made like the last one,
and a first row laid out like one accepted before is accepted without its tokens.
"""

from __future__ import annotations

import functools
import json
import re
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..errors import SaxsFileError

__all__ = ["HeaderCache", "RawFile", "split_file"]

_NUMROW = re.compile(rb"^[ \t]*[-+]?(?:\d|\.\d|nan|inf)", re.M | re.I)
_TOKSPLIT = re.compile(rb"[\s,;]+")
# a '#' starts a comment only where a token could start (line start or after a
# separator): inside a token such as "1.#INF" it is part of the token
_COMMENT = re.compile(rb"(?<![^\s,;])#[^\n]*")
# bytes that are neither text nor the usual white space (tab, newline, carriage return)
_CONTROL = re.compile(rb"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]")
# a token that starts like a number and holds nothing but what numbers are made of
_NUMBERLIKE = re.compile(rb"^[-+]?(?:\d|\.\d)[\w.+\-#]*$")
_DIGIT_COMMA_DIGIT = re.compile(rb"\d,\d")
_BLANK_SEP = re.compile(rb"[^\s,;][ \t;]+[^\s,;]")
_INTEGER = re.compile(rb"^[-+]?\d+$")
_DIGITS = bytes.maketrans(b"0123456789", b"0000000000")


def _is_comma_decimal(line: bytes) -> bool:
    """True for a row whose commas may be decimal commas: a comma between two digits in a
    row whose columns are separated by blanks or ';', or a row of integers separated by
    commas alone (``1,5,2,5``: two decimal numbers or four integers cannot be told apart)."""
    if not _DIGIT_COMMA_DIGIT.search(line):
        return False
    if _BLANK_SEP.search(line.strip()):
        return True
    return all(_INTEGER.match(t) for t in line.strip().split(b","))


def _strip_comments(data: bytes) -> bytes:
    return _COMMENT.sub(b"", data)


def _line_of(data: bytes, pos: int) -> int:
    return data.count(b"\n", 0, pos) + 1


def _refuse_control(path: str, data: bytes, start: int = 0, end: int | None = None) -> None:
    m = _CONTROL.search(data, start, len(data) if end is None else end)
    if m is not None:
        raise SaxsFileError(
            f"control byte {m.group()!r} in the text: not a plain text file (or damaged)",
            path=path,
            line=_line_of(data, m.start()),
        )


# key and value without their trailing blanks (stripped after the match); possessive
# quantifiers: no backtracking, linear time on any line
_KEYVAL = re.compile(r"^[ \t#]*+([A-Za-z_][\w \t.\-]*+)[=:][ \t]*+([^\n]*)", re.M)
_QCOLUMN = re.compile(r"(?:^|[\s#,;])[qQ][ \t]*+[\(\[]([^\)\]\n]*+)[\)\]]")
_Q_KEYS = {"q_unit", "q_units", "qunit", "qunits", "unit_q", "q_axis_unit"}
_I_KEYS = {"intensity_unit", "intensity_units", "i_unit", "i_units", "unit_i"}
_MAX_DEPTH = 32


@dataclass
class RawFile:
    """One text file split into header and numeric body."""

    path: str
    name: str
    body: bytes | memoryview
    first_line: int
    ncols: int
    meta: dict[str, str] = field(default_factory=dict)
    units: dict[str, str] = field(default_factory=dict)
    attrs: dict[str, Any] = field(default_factory=dict)
    q_unit: str | None = None
    intensity_unit: str | None = None
    source: bytes = b""
    comma: bool = False
    cut_check: int = -1
    attr_lines: dict[str, int] = field(default_factory=dict)
    key_lines: dict = field(default_factory=dict)
    shape: bytes | None = None  # the body's first line with its digits turned into 0


def _floatable(tokens) -> bool:
    try:
        for t in tokens:
            if b"_" in t:
                return False
            float(t)
    except ValueError:
        return False
    return True


@functools.lru_cache(maxsize=4096)
def _classify_key(raw_key: str) -> tuple[str, str]:
    """("attr" | "q_unit" | "intensity_unit" | "units" | "meta", name) of a header key."""
    raw_key = raw_key.strip()
    if raw_key.lower().startswith("attr.") and len(raw_key) > 5:
        return "attr", raw_key[5:].strip()
    # nested keys (a JSON trailer, ``beam.wavelength = ...``) keep their dots
    key = re.sub(r"\.+", ".", re.sub(r"[^\w.]+", "_", raw_key.lower())).strip("_.")
    if key in _Q_KEYS:
        return "q_unit", key
    if key in _I_KEYS:
        return "intensity_unit", key
    for end in ("_units", "_unit", ".units", ".unit"):
        if key.endswith(end) and len(key) > len(end):
            return "units", key[: -len(end)]
    return "meta", key


def _depth(text: str) -> int:
    """Deepest nesting of JSON brackets in ``text`` (an upper bound, strings included)."""
    depth = best = 0
    for ch in text:
        if ch in "[{":
            depth += 1
            best = max(best, depth)
        elif ch in "]}":
            depth -= 1
    return best


def _put(raw: RawFile, raw_key: str, value: str, line: int, trailer_line: int = 0) -> None:
    """Store one ``key = value`` of the header (``trailer_line == 0``) or of the trailing
    metadata (then a key the header gave another value is an error naming both lines)."""
    kind, key = _classify_key(raw_key.rstrip(" \t"))
    if not key:
        return
    if kind == "attr":
        if value[:1] in ("[", "{") and _depth(value) > _MAX_DEPTH:
            raise SaxsFileError(
                f"attr.{key} is nested more than {_MAX_DEPTH} levels deep", path=raw.path, line=line
            )
        try:
            parsed = json.loads(value)
        except ValueError:
            parsed = value
        old, store = raw.attrs.get(key, parsed), raw.attrs
    elif kind == "meta":
        old, store = raw.meta.get(key, value), raw.meta
    elif kind == "units":
        old, store = raw.units.get(key, value), raw.units
    else:
        old = getattr(raw, kind) or value
        store = None
    if trailer_line and old != (parsed if kind == "attr" else value):
        first = raw.key_lines.get((kind, key))
        where = f" (line {first})" if first else ""
        raise SaxsFileError(
            f"the trailing metadata gives {key!r} = {value!r} but the header{where} gives {old!r}",
            path=raw.path,
            line=line,
        )
    raw.key_lines[(kind, key)] = line
    if store is None:
        setattr(raw, kind, value)
    elif kind == "attr":
        store[key] = parsed
        raw.attr_lines[key] = line
    else:
        store[key] = value


_DIGIT_RUN = re.compile(r"([0-9]+)")


class _Template:
    """The layout of one header, to read the headers of the files that share it with one
    regular expression instead of a search per line.

    Each ``key = value`` line of the header it is made from keeps its text up to and
    including the ``=`` or ``:``, then any blanks, then its value (a group); every other
    line keeps its text, with each run of ASCII digits standing for any run of them
    (``# frame 12``). A header it matches gives the same keys, on the same lines, as
    :data:`_KEYVAL` searched line by line: the key of a line and whether a line holds one
    depend only on the part kept, and on digits only through their class, which stays
    (tests/test_io_fastpath.py checks both readings agree on varied headers)."""

    __slots__ = ("regex", "keys")

    def __init__(self, text: str):
        pieces, keys = [], []
        for lineno, line in enumerate(text.split("\n"), start=1):
            m = _KEYVAL.match(line)
            if m is None:
                parts = _DIGIT_RUN.split(line)
                pieces.append("".join("[0-9]+" if k % 2 else re.escape(t) for k, t in enumerate(parts)))
            else:
                pieces.append(re.escape(line[: m.end(1) + 1]) + "[ \t]*+([^\n]*)")
                keys.append((m.group(1), *_classify_key(m.group(1).rstrip(" \t")), lineno))
        self.regex = re.compile("\n".join(pieces))
        self.keys = tuple(keys)


class HeaderCache:
    """What the last files read on one thread had in common: the template of their header
    (:class:`_Template`) and the verdict on the layout of their first row of data.

    A verdict is kept by the layout of the row with every digit turned into ``0``: what
    :func:`split_file` decides about a first row (comments, a decimal comma, the count of
    numbers, whether each token reads as a number) depends on its digits only through
    their class. Not shared between threads."""

    __slots__ = ("template", "rows")

    def __init__(self):
        self.template: _Template | None = None
        self.rows: dict[bytes, tuple[bytes, list[bytes]]] = {}


def _header(raw: RawFile, text: str, cache: HeaderCache | None = None) -> None:
    template = None if cache is None else cache.template
    m = None if template is None else template.regex.fullmatch(text)
    if m is not None:  # what _put does with a header line, its key classified once
        for (raw_key, kind, key, lineno), value in zip(template.keys, m.groups()):
            value = value.rstrip(" \t\r")
            if not key:
                continue
            if kind == "meta":
                raw.meta[key] = value
            elif kind == "units":
                raw.units[key] = value
            elif kind == "attr":
                _put(raw, raw_key, value, lineno)
                continue
            else:
                setattr(raw, kind, value)
            raw.key_lines[(kind, key)] = lineno
    else:
        for m in _KEYVAL.finditer(text):
            raw_key, value = m.group(1), m.group(2)
            _put(raw, raw_key, value.rstrip(" \t\r"), text.count("\n", 0, m.start()) + 1)
        if cache is not None and text:
            cache.template = _Template(text)
    if raw.q_unit is None:
        qm = _QCOLUMN.search(text)
        if qm:
            raw.q_unit = qm.group(1).strip()


# a line of a trailing metadata section: blank, a comment, a [title] or key = value / key: value
_TRAILER_LINE = re.compile(
    rb"^[ \t]*(?:#[^\n]*|\[[^\]\n]*\][ \t]*|#?[ \t]*[A-Za-z_][\w \t.\-]*[=:][^\n]*|)\r?$"
)
_KEYVAL_BYTES = re.compile(rb"^[ \t]*[A-Za-z_][\w \t.\-]*[=:]")
_SPACE = frozenset(b" \t\r\n")


def _trailer_start(data: bytes, after: int) -> int | None:
    """Where a trailing metadata section starts (a line start after position ``after``,
    the end of the first data row), or None when the file ends with a row of numbers.

    The section is a JSON object (from a line starting with ``{``) and/or ``key = value``
    / ``key: value`` lines, comments and blank lines, up to the end of the file; it is
    never data (a row after it makes the file an error)."""
    j = len(data)
    while True:
        while j > after and data[j - 1] in _SPACE:
            j -= 1
        if j <= after:
            return None
        ls = data.rfind(b"\n", 0, j) + 1
        if ls <= after:
            return None
        k = ls
        while data[k] in (32, 9):
            k += 1
        if data[k] != 35:  # not a comment line
            break
        j = ls
    if _NUMROW.match(data, ls):
        return None  # ends with a row of numbers: no trailer
    jp = data.find(b"\n{", after)
    t0 = jp + 1 if 0 <= jp < ls else ls
    while True:  # metadata lines just above belong to the section too
        ps = data.rfind(b"\n", 0, t0 - 1) + 1
        if ps <= after or not _TRAILER_LINE.match(data[ps : t0 - 1]):
            return t0
        t0 = ps


def _flatten(obj: dict, prefix: str, out: list) -> None:
    for k, v in obj.items():
        name = f"{prefix}{k}"
        if isinstance(v, dict):
            unit_key = next((u for u in ("units", "unit") if u in v), None)
            if unit_key and set(v) == {"value", unit_key} and not isinstance(v["value"], (dict, list)):
                out.append((name, v["value"]))
                out.append((f"{name}_units", v[unit_key]))
            else:
                _flatten(v, f"{name}.", out)
        else:
            out.append((name, v))


def _json_text(value) -> str | None:
    if value is None:
        return None
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return repr(value)
    if isinstance(value, (int, str)):
        return str(value)
    return None


def _trailer(raw: RawFile, data: bytes, t0: int) -> None:
    """Read the trailing metadata section starting at byte ``t0`` into ``raw``."""
    _refuse_control(raw.path, data, t0)
    first = _line_of(data, t0)
    try:
        text = data[t0:].decode("utf-8")
    except UnicodeDecodeError:
        text = data[t0:].decode("latin-1")
    decoder = json.JSONDecoder()
    pos, n = 0, len(text)
    while pos < n:
        end = text.find("\n", pos)
        end = n if end < 0 else end
        line = text[pos:end]
        lineno = first + text.count("\n", 0, pos)
        stripped = line.strip()
        if stripped.startswith("{"):
            brace = pos + line.index("{")
            if _depth(text[brace:]) > _MAX_DEPTH:
                raise SaxsFileError(
                    f"the trailing JSON metadata is nested more than {_MAX_DEPTH} levels deep",
                    path=raw.path,
                    line=lineno,
                )
            try:
                obj, stop = decoder.raw_decode(text, brace)
            except ValueError as exc:
                where = first + text.count("\n", 0, getattr(exc, "pos", brace))
                raise SaxsFileError(
                    f"the trailing metadata is not valid JSON: {getattr(exc, 'msg', exc)}",
                    path=raw.path,
                    line=where,
                ) from None
            items: list = []
            _flatten(obj, "", items)
            for key, value in items:
                if isinstance(value, list):
                    _put(raw, f"attr.{key}", json.dumps(value), lineno, trailer_line=lineno)
                    continue
                shown = _json_text(value)
                if shown is not None:
                    _put(raw, key, shown.strip(), lineno, trailer_line=lineno)
            rest_end = text.find("\n", stop)
            rest_end = n if rest_end < 0 else rest_end
            if text[stop:rest_end].strip():
                raise SaxsFileError(
                    "text after the JSON object on the same line", path=raw.path,
                    line=first + text.count("\n", 0, stop),
                )
            pos = rest_end + 1
            continue
        m = _KEYVAL.match(line)
        if m is not None:
            _put(raw, m.group(1), m.group(2).rstrip(" \t\r"), lineno, trailer_line=lineno)
        elif stripped and not stripped.startswith("#") and not (stripped[0] == "[" and stripped[-1] == "]"):
            raise SaxsFileError(
                "after the data, a line that is neither 'key = value', 'key: value', a JSON object nor "
                "a '#' comment (rows of data cannot follow the trailing metadata)",
                path=raw.path,
                line=lineno,
            )
        pos = end + 1


def _row_tokens(line: bytes) -> list[bytes]:
    tokens = _TOKSPLIT.split(line.strip())
    return [t for t in tokens if t]


def _layout(line: bytes) -> bytes:
    return line.rstrip(b"\r").translate(bytes.maketrans(b"0123456789+", b"0000000000-"))


def split_file(path: str, name: str, data: bytes, cache: HeaderCache | None = None) -> RawFile:
    """Split raw file bytes into header metadata and numeric body.

    The first line holding 2 to 4 numbers starts the body; every line before it is
    header. Raises :class:`SaxsFileError` for binary, empty or header-only files, a
    malformed first row, a summary line before the data, a decimal comma, control
    bytes and a last row cut short. ``cache`` (one per thread) lets files laid out alike
    skip the work they share; the result is the same without it.
    """
    if b"\x00" in data:
        raise SaxsFileError("this is not a text file (it contains NUL bytes)", path=path)
    if data.startswith(b"\xef\xbb\xbf"):  # UTF-8 byte order mark
        data = data[3:]
    pos = 0
    known = None if cache is None else cache.rows
    while True:
        m = _NUMROW.search(data, pos)
        if m is None:
            _refuse_control(path, data)
            what = "the file is empty" if not data.strip() else "no rows of numbers found (header only?)"
            raise SaxsFileError(what, path=path)
        start = m.start()
        end = data.find(b"\n", start)
        end = len(data) if end < 0 else end
        shape = data[start:end].translate(_DIGITS)
        if known is not None and shape in known:  # a first row laid out as one accepted before
            n_tokens, comma = known[shape]
            break
        line = _strip_comments(data[start:end]).strip()
        if _is_comma_decimal(line):
            raise SaxsFileError(
                "numbers use a comma as decimal separator; convert them to a decimal point",
                path=path,
                line=_line_of(data, start),
            )
        tokens = _row_tokens(line)
        if len(tokens) > 1 and _floatable(tokens):
            if len(tokens) > 4:
                raise SaxsFileError(
                    f"{len(tokens)} columns; expected 2 to 4 (q, I, sigma, dq)",
                    path=path,
                    line=_line_of(data, start),
                )
            n_tokens, comma = len(tokens), b"," in line
            if known is not None:
                if len(known) >= 64:  # rows of varying width: keep the cache small
                    known.clear()
                known[shape] = (n_tokens, comma)
            break
        if 2 <= len(tokens) <= 4 and all(_NUMBERLIKE.match(t) for t in tokens):
            bad = next(t for t in tokens if not _floatable([t]))
            raise SaxsFileError(
                f"cannot read {bad.decode('utf-8', 'replace')!r} as a number (first row of data)",
                path=path,
                line=_line_of(data, start),
            )
        pos = end + 1
    _refuse_control(path, data, 0, end)
    _refuse_malformed_before(path, data, start, n_tokens)
    # a line with another count of numbers than the two rows after it (a summary, a row
    # count before the data) is not the first row of data
    e2 = data.find(b"\n", end + 1)
    same = e2 > 0 and data[end + 1 : e2].translate(_DIGITS) == shape
    # a row laid out like the first, or two plain rows of as many tokens: fine
    counts = [] if same or _next_two_alike(data, end + 1, n_tokens) else _next_counts(data, end + 1, 2)
    if len(counts) == 2 and counts[0] == counts[1] != n_tokens:
        raise SaxsFileError(
            f"this line holds {n_tokens} numbers but the rows after it hold {counts[0]}: a summary "
            "or count line before the data? Start it with '#' to make it a comment",
            path=path,
            line=_line_of(data, start),
        )
    try:
        text = data[:start].decode("utf-8")
    except UnicodeDecodeError:
        text = data[:start].decode("latin-1")
    t0 = _trailer_start(data, end)
    stop = len(data) if t0 is None else t0
    body: bytes | memoryview
    stripped = None
    if data.find(b"#", start, stop) >= 0:
        body = stripped = _strip_comments(data[start:stop])
        if not body.endswith(b"\n"):
            body += b"\n"
    elif t0 is not None or data.endswith(b"\n"):
        body = memoryview(data)[start:stop]  # no copy; joined with the others later
    else:
        body = data[start:] + b"\n"
    raw = RawFile(path, name, body, _line_of(data, start), n_tokens, source=data)
    if stripped is None:  # the body starts with the row found
        raw.shape = shape
    # a last value cut short: checked once the rows have parsed
    raw.cut_check = -1 if (t0 is not None or data.endswith(b"\n")) else start
    raw.comma = comma
    _header(raw, text, cache)
    if t0 is not None:
        _trailer(raw, data, t0)
    return raw


def _next_two_alike(data: bytes, pos: int, n_tokens: int) -> bool:
    """Whether the next two lines after ``pos`` are plain (no ',', ';' or '#', not blank)
    and hold ``n_tokens`` blank-separated tokens each: then :func:`_next_counts` cannot
    find another count of numbers (a shortcut for rows of varying width)."""
    for _ in range(2):
        e = data.find(b"\n", pos)
        line = data[pos : len(data) if e < 0 else e]
        if b"," in line or b";" in line or b"#" in line or len(line.split()) != n_tokens:
            return False
        if e < 0:
            return True
        pos = e + 1
    return True


def _next_counts(data: bytes, pos: int, n: int) -> list[int]:
    """Numbers of tokens of the next ``n`` non-blank lines after ``pos`` (fewer if a line is
    not all numbers)."""
    out: list[int] = []
    while pos < len(data) and len(out) < n:
        e = data.find(b"\n", pos)
        e = len(data) if e < 0 else e
        line = _strip_comments(data[pos:e]).strip()
        pos = e + 1
        if not line:
            continue
        t = _row_tokens(line)
        if not _floatable(t) or _is_comma_decimal(line):
            break
        out.append(len(t))
    return out


def _refuse_truncated(path: str, data: bytes, start: int) -> None:
    """A file without a final newline whose last value is shorter than, and laid out
    like the start of, the last values of all the rows above, which share one layout
    (signs aside): the last value was cut (e.g. ``1.234e-0`` of ``1.234e-01``)."""
    lines = [ln for ln in data[start:].split(b"\n") if ln.strip()]
    if len(lines) < 3:
        return
    last_tokens = [_row_tokens(_strip_comments(ln)) for ln in lines]
    if len({len(t) for t in last_tokens}) != 1 or not last_tokens[0]:
        return

    def shape(t: bytes) -> bytes:
        return _layout(t.lstrip(b"+-"))

    shapes = {shape(t[-1]) for t in last_tokens[:-1]}
    if len(shapes) != 1:
        return
    above, last = shapes.pop(), shape(last_tokens[-1][-1])
    if len(last) < len(above) and above.startswith(last):
        raise SaxsFileError(
            "the last value is shorter than those above it and the file has no final newline: "
            "it may have been cut off",
            path=path,
            line=data.count(b"\n") + 1,
        )


def _refuse_malformed_before(path: str, data: bytes, start: int, ncols: int) -> None:
    """The line just before the first row of data, with as many tokens as the rows and
    every token holding a digit (at least one a number), or with 3 or 4 tokens all but
    one of them numbers, is a damaged row, not header: ``0.1 1e5e3 0.2``, ``0x10 5.0``,
    ``0.1 abc 0.3``."""
    if start < 2:
        return
    prev_start = data.rfind(b"\n", 0, start - 1) + 1
    line = data[prev_start : start - 1].strip()
    if not line or line.startswith(b"#"):
        return
    tokens = _row_tokens(_strip_comments(line))
    if len(tokens) != ncols:
        return
    good = [t for t in tokens if _floatable([t])]
    # every token holds a digit, or (3 or 4 columns) all but one cell are numbers:
    # ``0.1 abc 0.3`` is a row with a bad cell; ``Temperature 25.0`` (2 columns) stays header
    digits = all(any(48 <= c <= 57 for c in t) for t in tokens)
    if not (digits or (ncols >= 3 and len(good) >= ncols - 1)):
        return
    if good and len(good) < len(tokens):
        bad = next(t for t in tokens if not _floatable([t]))
        raise SaxsFileError(
            f"cannot read {bad.decode('utf-8', 'replace')!r} as a number (the row before the data)",
            path=path,
            line=_line_of(data, prev_start),
        )


def _line_errors(raw: RawFile) -> SaxsFileError:
    """Walk the body line by line and describe the first bad line."""
    body = bytes(raw.body)
    for k, line in enumerate(body.split(b"\n")):
        lineno = raw.first_line + k
        m = _CONTROL.search(line)
        if m is not None:
            return SaxsFileError(
                f"control byte {m.group()!r} in the text: not a plain text file (or damaged)",
                path=raw.path,
                line=lineno,
            )
        line = line.strip()
        if not line:
            continue
        if (not raw.comma and b"," in line) or _is_comma_decimal(line):
            return SaxsFileError(
                "numbers use a comma as decimal separator (or a comma where the first data row "
                "has none); convert them to a decimal point",
                path=raw.path,
                line=lineno,
            )
        tokens = _row_tokens(line)
        for t in tokens:
            if not _floatable([t]):
                shown = t.decode("utf-8", "replace")
                if _KEYVAL_BYTES.match(line) or line.startswith(b"{"):
                    return SaxsFileError(
                        f"cannot read {shown!r} as a number: a metadata line among the rows of data, or "
                        "rows after the trailing metadata (metadata may only follow the last row)",
                        path=raw.path,
                        line=lineno,
                    )
                return SaxsFileError(f"cannot read {shown!r} as a number", path=raw.path, line=lineno)
        if len(tokens) != raw.ncols:
            return SaxsFileError(
                f"{len(tokens)} columns where the first data row has {raw.ncols}", path=raw.path, line=lineno
            )
    return SaxsFileError("cannot read the numbers", path=raw.path)


def _blank_gap(raw: RawFile, rows: np.ndarray) -> SaxsFileError | None:
    """The last row of data alone after a blank line (not a comment line): a trailer
    (a row count, a summary) rather than data. Refused, naming the row."""
    if rows.size < 2 or rows[-1] - rows[-2] <= 1:
        return None
    lines = raw.source.split(b"\n")
    for ln in range(int(rows[-2]) + 1, int(rows[-1])):
        if not lines[ln - 1].strip():
            return SaxsFileError(
                f"the last row stands alone after a blank line (line {ln}): a trailer such as a row "
                "count, not data? Remove the blank line, or make the trailer a '#' comment",
                path=raw.path,
                line=int(rows[-1]),
            )
    return None
