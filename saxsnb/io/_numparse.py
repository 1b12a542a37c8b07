"""Fast, exact parsing of many numbers from text, vectorised with numpy.

numpy's own text parsers (``np.loadtxt``, ``np.fromstring``) spend about 250 ns per
number; a folder of thousands of curves is dominated by that. Here all tokens of a
whole batch of files are located at once and parsed column-wise: tokens with the same
layout (same length, same position of the decimal point and exponent) form a small
character matrix whose digit columns are combined with integer arithmetic.

Exactness: a token whose decimal significand ``m`` has at most 15 digits and whose
decimal exponent ``p`` satisfies ``|p| <= 22`` is converted as ``m * 10**p`` or
``m / 10**-p``; both operands are exact doubles, so the single IEEE operation gives
the correctly rounded result, identical to ``float(token)`` (Clinger, W. D., "How to
read floating point numbers accurately", ACM SIGPLAN Notices 25(6), 92, 1990).
Every other token (more digits, large exponents, ``nan``, ``inf``, odd spellings)
goes through Python's ``float``, which is correctly rounded too.
"""

from __future__ import annotations

import numpy as np

__all__ = ["tokenize", "parse_tokens", "SEPARATORS"]

#: Bytes that separate numbers: whitespace (any byte <= 32), comma and semicolon.
SEPARATORS = b" \t\r\n\f\v,;"

_MAX_LEN = 30
_POW10 = np.array([10.0**k for k in range(23)])
_TWO53 = float(2**53)


def tokenize(a: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Start and end (exclusive) byte offsets of the tokens in the uint8 array ``a``.

    >>> s, e = tokenize(np.frombuffer(b" 1.5, 2\\n-3 ", np.uint8))
    >>> s.tolist(), e.tolist()
    ([1, 6, 8], [4, 7, 10])
    """
    sep = a <= 32
    sep |= a == 44  # ','
    sep |= a == 59  # ';'
    pad = np.ones(a.size + 2, dtype=np.int8)
    pad[1:-1] = sep
    d = np.diff(pad)
    return np.flatnonzero(d == -1), np.flatnonzero(d == 1)


def _swar_digits(src: np.ndarray, offset: int, stride: int, n: int, k: int) -> np.ndarray:
    """Value of the ``k`` (1..8) decimal digits that end 8 bytes after ``offset + i * stride``
    in the contiguous uint8 array ``src``, for i < n, as uint64: the 8 bytes are read as
    one little-endian word, the bytes before the digits masked out, and digit pairs,
    quadruples and octets combined by multiply-and-shift (no lane overflows: 99, 9999,
    99999999)."""
    word = np.ndarray((n,), dtype="<u8", buffer=src, offset=offset, strides=(stride,))
    keep = np.uint64(((1 << (8 * k)) - 1) << (8 * (8 - k)))
    v = word & keep
    v -= np.uint64(0x3030303030303030) & keep
    v = v * np.uint64(10) + (v >> np.uint64(8))
    v &= np.uint64(0x00FF00FF00FF00FF)
    v = v * np.uint64(100) + (v >> np.uint64(16))
    v &= np.uint64(0x0000FFFF0000FFFF)
    v = v * np.uint64(10000) + (v >> np.uint64(32))
    v &= np.uint64(0xFFFFFFFF)
    return v


def _parse_group(
    chars: np.ndarray, checked: bool = False, src: tuple[np.ndarray, int] | None = None
) -> tuple[np.ndarray, np.ndarray] | None:
    """Parse rows of equal layout; return (values, ok) or None if layouts differ.

    ``checked=True``: the caller has already verified that every row has the layout of
    the first (digits where it has digits, the same '.', 'e' and '+'/'-' elsewhere);
    only the first row is checked here. ``src=(array, offset)``: ``chars`` is a view of
    the contiguous uint8 ``array``, row i starting at ``offset + i * chars.strides[0]``
    (lets the fraction digits be read 8 at a time, see :func:`_swar_digits`)."""
    n, width = chars.shape
    tmpl = chars[0]
    lower = tmpl | 0x20
    e_cols = np.flatnonzero(lower == ord("e"))
    dots = np.flatnonzero(tmpl == ord("."))
    if e_cols.size > 1 or dots.size > 1:
        return None
    epos = int(e_cols[0]) if e_cols.size else width
    dpos = int(dots[0]) if dots.size else -1
    if dpos > epos:
        return None
    mant_cols = [j for j in range(epos) if j != dpos]
    if not mant_cols:
        return None
    frac = (epos - dpos - 1) if dpos >= 0 else 0
    exp_sign_col = None
    exp_cols: list[int] = []
    if epos < width:
        rest = list(range(epos + 1, width))
        if rest and tmpl[rest[0]] in (ord("+"), ord("-")):
            exp_sign_col = rest[0]
            rest = rest[1:]
        if not rest or len(rest) > 3:
            return None
        exp_cols = rest
    nm, ne = len(mant_cols), len(exp_cols)
    if nm > 15:
        return None
    # digit columns are gathered into one contiguous array and checked with scalar
    # operands (long inner loops); the few other columns are checked one by one
    if checked and not all(48 <= tmpl[j] <= 57 for j in mant_cols + exp_cols):
        return None  # e.g. "nan": the rows are like the first, which is not a number
    sign = None if exp_sign_col is None else chars[:, exp_sign_col]
    swar = checked and src is not None and dpos >= 0 and 1 <= frac <= 8 and src[1] + epos >= 8 and dpos <= 7
    g = None if swar else chars[:, mant_cols + exp_cols]
    if not checked:
        if not bool((g - np.uint8(48) < 10).all()):
            return None
        if dpos >= 0 and not bool((chars[:, dpos] == 46).all()):
            return None
        if epos < width and not bool((chars[:, epos] | np.uint8(0x20) == 101).all()):
            return None
        if sign is not None and not bool((((sign - np.uint8(43)) | np.uint8(2)) == 2).all()):
            return None  # not '+' (43) or '-' (45)
    # integer-valued float arithmetic on the raw bytes: sum(b_j 10^k) - 48 sum(10^k);
    # every partial sum is an integer < 2**53, hence exact
    if swar:
        # fraction digits 8 at a time; the few integer digits column by column
        m = _swar_digits(src[0], src[1] + epos - 8, chars.strides[0], n, frac).astype(np.float64)
        for j in range(dpos):
            m += (chars[:, j] - np.float64(48)) * 10.0 ** (frac + dpos - 1 - j)
    else:
        wm = 10.0 ** np.arange(nm - 1, -1, -1)
        m = np.einsum("ij,j->i", g[:, :nm], wm) - 48.0 * wm.sum()
    if ne:
        # at most 3 digits and a sign: small integers, exact in int16
        p = np.subtract(chars[:, exp_cols[0]], 48, dtype=np.int16)
        for j in exp_cols[1:]:
            p *= 10
            p += chars[:, j]
            p -= 48
        if sign is not None:
            p *= np.subtract(44, sign, dtype=np.int16)  # '+' is 43, '-' is 45
        p -= frac
    else:
        p = np.full(n, -frac, dtype=np.int16)
    lo, hi = int(p.min()), int(p.max())
    if -22 <= lo and hi <= 0:  # the usual case: one exact division per token
        return m / _POW10[-p], np.ones(n, dtype=bool)
    ok = np.abs(p) <= 22
    scale = _POW10[np.minimum(np.abs(p), 22)]
    vals = np.empty(n)
    up = p >= 0
    np.multiply(m, scale, out=vals, where=up)
    np.divide(m, scale, out=vals, where=~up)
    return vals, ok


def _owner(starts: np.ndarray, pos: np.ndarray) -> np.ndarray:
    """Index of the last of the sorted ``starts`` at or before each of the sorted ``pos``
    (-1 if none): ``np.searchsorted(starts, pos, side="right") - 1``, by merging the two
    sorted runs (a stable sort finds them and merges in one pass) unless ``pos`` is short."""
    if 4 * pos.size < starts.size:
        return np.searchsorted(starts, pos, side="right") - 1
    order = np.argsort(np.concatenate([starts, pos]), kind="stable")
    return np.flatnonzero(order >= starts.size) - np.arange(pos.size) - 1


def parse_tokens(
    buf: bytes, a: np.ndarray, starts: np.ndarray, ends: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Values of the tokens ``buf[starts[i]:ends[i]]`` and a mask of tokens that failed.

    Failed tokens (not a number) get NaN and ``bad[i] = True``.

    >>> b = b"1.5e-01 -2.0E+02 3 nan x 0.1"
    >>> a = np.frombuffer(b, np.uint8)
    >>> v, bad = parse_tokens(b, a, *tokenize(a))
    >>> v.tolist()[:4], bad.tolist()
    ([0.15, -200.0, 3.0, nan], [False, False, False, False, True, False])
    """
    n = starts.size
    vals = np.full(n, np.nan)
    done = np.zeros(n, dtype=bool)
    if n == 0:
        return vals, done
    first = a[starts]
    neg = first == ord("-")
    signed = neg | (first == ord("+"))
    s2 = starts + signed
    length = ends - s2
    # layout key of every token: (length, position of '.', position of 'e'), found from
    # the positions of '.' and 'e' in the whole buffer rather than token by token;
    # 5 bits each, so the key is an int16 and the stable sort below is a radix sort
    none = _MAX_LEN + 1
    dpos = np.full(n, none, dtype=np.int16)
    epos = np.full(n, none, dtype=np.int16)
    multi = (length <= 0) | (length > _MAX_LEN)
    has_e = buf.find(b"e") >= 0 or buf.find(b"E") >= 0  # memchr: cheaper than a numpy pass
    for char, out in ((46, dpos), (101, epos)):  # '.', 'e' or 'E'
        if char == 101 and not has_e:
            continue
        pos = np.flatnonzero(a == 46) if char == 46 else np.flatnonzero((a | 0x20) == 101)
        if pos.size:
            tok = _owner(starts, pos)
            inside = tok >= 0
            tok, pos = tok[inside], pos[inside]
            inside = pos < ends[tok]
            tok, pos = tok[inside], pos[inside]
            # a token with two '.' (or 'e') keeps one position: its group then fails
            # the layout check in _parse_group and goes through float(), which rejects it
            out[tok] = np.clip(pos - s2[tok], 0, none)
    key = (np.clip(length, 0, none).astype(np.int16) << 10) | (dpos << 5) | epos
    key[multi] = -1
    order = np.argsort(key, kind="stable")
    ks = key[order]
    bounds = np.concatenate([[0], np.flatnonzero(ks[1:] != ks[:-1]) + 1, [n]])
    padded = np.zeros(a.size + _MAX_LEN, dtype=np.uint8)
    padded[: a.size] = a
    windows = np.lib.stride_tricks.sliding_window_view(padded, _MAX_LEN)
    for lo, hi in zip(bounds[:-1], bounds[1:]):
        k = int(ks[lo])
        if k < 0:
            continue
        idx = order[lo:hi]
        res = _parse_group(windows[s2[idx], : k >> 10])
        if res is None:
            continue
        v, ok = res
        if bool(ok.all()):
            vals[idx] = v
            done[idx] = True
        else:
            vals[idx[ok]] = v[ok]
            done[idx[ok]] = True
    vals = np.where(neg, -vals, vals)
    bad = np.zeros(n, dtype=bool)
    for i in np.flatnonzero(~done):
        tok = buf[starts[i] : ends[i]]
        try:
            if b"_" in tok:
                raise ValueError(tok)
            vals[i] = float(tok)
        except ValueError:
            bad[i] = True
            vals[i] = np.nan
    return vals, bad
