"""Input checks shared by the analysis functions."""

from __future__ import annotations

import numpy as np

from ..errors import SaxsInputError


def as_frames(q, intensity, sigma=None):
    """Return ``(q, I, S, single)`` as float arrays with I and S of shape (n_frames, n_q).

    A 1-D ``intensity`` is one frame (``single`` is then True); ``S`` is None when
    ``sigma`` is None. Shapes that do not match q raise SaxsInputError naming the
    parameter.
    """
    q = np.asarray(q, dtype=float)
    I = np.asarray(intensity, dtype=float)
    single = I.ndim == 1
    if single:
        I = I[None, :]
    if q.ndim != 1 or I.ndim != 2 or I.shape[1] != q.size:
        raise SaxsInputError(
            f"intensity has shape {np.shape(intensity)}; expected (n_frames, {q.size}) to match q",
            parameter="intensity",
        )
    S = None
    if sigma is not None:
        S = np.asarray(sigma, dtype=float)
        if S.ndim == 1:
            S = S[None, :]
        if S.shape != I.shape:
            raise SaxsInputError(f"sigma has shape {S.shape}; expected {I.shape}", parameter="sigma")
    return q, I, S, single
