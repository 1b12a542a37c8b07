"""The ``preparation`` demo folder: what an instrument writes before any analysis.

Everything is synthetic, computed from closed forms, for a fictional protein "GP-31"
(a homogeneous sphere of radius 2.5 nm) measured on a fictional instrument whose
relative intensity unit is ``INSTRUMENT_GAIN`` times 1/cm:

``sample/``
    10 repeat exposures of GP-31 in buffer (cell + buffer + protein), scan
    ``exposure_start`` (s). The last ``N_DAMAGED`` frames carry a growing, smooth
    low-q excess (a Guinier term of aggregates with Rg = 6 nm: radiation damage).
``buffer/``
    10 exposures of the buffer in the same cell.
``empty/``
    3 exposures of the empty cell.
``water/``
    3 exposures of water in the cell at 20 degC (flat ``water_cross_section(20)``).
``standard/``
    One pattern of a lamellar powder standard, silver behenate (d = 5.8380 nm,
    Huang et al. 1993, J. Appl. Cryst. 26, 180): orders 1..5 as Gaussian peaks on a
    smooth background, written with a q scale 2 % too large (true q = ``Q_SCALE``
    x written q).

All files share one q grid, 0.08 .. 6 1/nm (written q), and the header format of
:func:`saxsnb.demo.files.write_frames`. After the rows, sample files carry a JSON object
and buffer, empty and water files ``key: value`` lines: ``timestamp`` (ISO 8601),
``exposure.time`` and, for sample and buffer, ``beam.transmission`` and
``beam.wavelength``. Sample and buffer intensities are as measured (times their
transmission, :data:`TRANSMISSION`); divide by it on subtraction
(``subtract(..., transmission="beam.transmission")``). The truth is in :data:`TRUTH`.
"""

from __future__ import annotations

import json
from datetime import datetime, timedelta
from pathlib import Path

import numpy as np

from ..analysis import water_cross_section
from ..series import from_arrays
from ._common import counting_noise, sphere_form_factor

__all__ = ["write_preparation", "preparation_series", "TRUTH", "Q_SCALE", "INSTRUMENT_GAIN", "N_DAMAGED",
           "TRANSMISSION"]

#: True q = Q_SCALE x written q (the written q scale is 2 % off).
Q_SCALE = 0.98
#: Written intensity = INSTRUMENT_GAIN x intensity in 1/cm.
INSTRUMENT_GAIN = 2000.0
#: How many of the last sample frames carry the low-q excess.
N_DAMAGED = 3
N_REPEATS = 10
#: Radius of gyration of the aggregates behind the low-q excess, nm.
AGGREGATE_RG = 6.0
#: Counts per written intensity unit (noise level).
COUNTS = 400.0
#: X-ray transmission of the sample and of the buffer, in their files' trailing metadata
#: (``beam.transmission``); their intensities are as measured, not yet divided by it.
#: Water, empty cell and standard are written already divided by their transmission.
TRANSMISSION = {"sample": 0.84, "buffer": 0.85}
#: Wall-clock start of the first exposure (ISO 8601); each file's ``timestamp``.
START = "2026-03-14T09:30:00"

TRUTH = {
    "q_scale": Q_SCALE,
    "instrument_gain": INSTRUMENT_GAIN,
    "absolute_scale_factor": 1.0 / INSTRUMENT_GAIN,
    "radius_nm": 2.5,
    "rg_nm": float(np.sqrt(3 / 5) * 2.5),
    "i0_per_cm": 0.05,
    "buffer_scale": 0.995,  # the protein displaces 0.5 % of the buffer
    "damaged_frames": list(range(N_REPEATS - N_DAMAGED, N_REPEATS)),
    "water_temperature_c": 20.0,
    "d_spacing_nm": 5.8380,
}


def _true_q(n: int = 600) -> tuple[np.ndarray, np.ndarray]:
    written = np.linspace(0.08, 6.0, n)
    return written, Q_SCALE * written


def _cell(q: np.ndarray) -> np.ndarray:
    """Empty-cell scattering (1/cm equivalent): a flat level and low-q parasitic slope."""
    return 0.004 + 2e-5 * q ** -3.0


def preparation_series(seed: int = 0) -> dict:
    """The five series of the preparation folder (before writing), by sub-folder name.

    Examples
    --------
    >>> s = preparation_series()
    >>> sorted(s), s["sample"].sizes["frame"]
    (['buffer', 'empty', 'sample', 'standard', 'water'], 10)
    """
    rng = np.random.default_rng(seed)
    qw, q = _true_q()
    k = INSTRUMENT_GAIN
    buffer_level = 0.0170  # buffer slightly above water (solutes)
    protein = TRUTH["i0_per_cm"] * sphere_form_factor(q * TRUTH["radius_nm"])
    # radiation damage: a growing Guinier term of aggregates in the last frames
    damage = np.zeros(N_REPEATS)
    damage[-N_DAMAGED:] = [0.05, 0.08, 0.12]
    excess = np.outer(damage * TRUTH["i0_per_cm"], np.exp(-(q * AGGREGATE_RG) ** 2 / 3))
    cell = _cell(q)
    buf = cell + buffer_level
    sample_model = (TRANSMISSION["sample"] * k
                    * (cell + TRUTH["buffer_scale"] * buffer_level + protein + excess))
    buffer_model = TRANSMISSION["buffer"] * k * np.tile(buf, (N_REPEATS, 1))
    empty_model = k * np.tile(cell, (3, 1))
    water_model = k * np.tile(cell + water_cross_section(TRUTH["water_temperature_c"]), (3, 1))
    q1 = 2 * np.pi / TRUTH["d_spacing_nm"]
    peaks = sum(40.0 / n * np.exp(-0.5 * ((q - n * q1) / 0.03) ** 2) for n in range(1, 6))
    standard_model = k * (cell + 0.05 / q + 0.05 * peaks)[None, :]
    out = {}
    t = np.arange(N_REPEATS) * 2.0
    for name, model, scan in (
        ("sample", sample_model, {"exposure_start": (t, "s")}),
        ("buffer", buffer_model, {"exposure_start": (t + 30.0, "s")}),
        ("empty", empty_model, {"exposure_start": (np.arange(3) * 2.0 + 60.0, "s")}),
        ("water", water_model, {"exposure_start": (np.arange(3) * 2.0 + 70.0, "s")}),
        ("standard", standard_model, {"exposure_start": (np.array([80.0]), "s")}),
    ):
        I, S = counting_noise(rng, model, COUNTS)
        ds = from_arrays(qw, I, S, scan=scan, sample=f"GP-31 preparation: {name}")
        ds.attrs["truth"] = json.dumps(TRUTH)
        out[name] = ds
    return out


_README = """\
# saxsnb demo data: preparation

**Synthetic data.** Every sample, instrument and number here is invented and computed
from closed forms by `saxsnb.demo.preparation.preparation_series(seed={seed})`.

- `sample/`: 10 repeat exposures of protein GP-31 (sphere, R = 2.5 nm) in buffer; the
  last {n_damaged} show a growing low-q excess (radiation damage);
- `buffer/`: 10 exposures of the buffer in the same cell;
- `empty/`: the empty cell; `water/`: water at 20 degC in the cell;
- `standard/`: silver behenate (d = 5.8380 nm), written with the q scale 2 % off.

After the rows of numbers, sample files carry a JSON object and the others `key: value`
lines: `timestamp`, `exposure.time`, and for sample and buffer `beam.transmission` (their
intensities are not yet divided by it) and `beam.wavelength`.

Intensities are in the instrument's relative unit ({gain:g} x 1/cm). Read a folder with
`saxsnb.read_series("preparation/sample/*.dat", scan="exposure_start")`.
The truth: {truth}
"""


def write_preparation(folder, seed: int = 0) -> Path:
    """Write the preparation folder (sub-folders of text files and a README.md).

    Returns the folder.
    """
    from .files import _atomic_write_text, write_frames

    folder = Path(folder)
    start = datetime.fromisoformat(START)
    for name, ds in preparation_series(seed).items():
        trailers, style = None, "json"
        if name != "standard":
            # trailing metadata as instrument software appends it: sample files a JSON
            # object, the others key: value lines (nested keys flattened with dots on read)
            trailers = []
            for t in ds["exposure_start"].values:
                meta = {"timestamp": (start + timedelta(seconds=float(t))).isoformat(),
                        "exposure": {"time": {"value": 1.0, "units": "s"}}}
                if name in TRANSMISSION:
                    meta["beam"] = {"transmission": TRANSMISSION[name],
                                    "wavelength": {"value": 0.1, "units": "nm"}}
                trailers.append(meta)
            style = "json" if name == "sample" else "colon"
        write_frames(ds, folder / name, prefix=f"gp31_{name}", scan="exposure_start", tag="t{:05.1f}s",
                     trailers=trailers, trailer_style=style)
    _atomic_write_text(folder / "README.md", _README.format(seed=seed, n_damaged=N_DAMAGED,
                                                           gain=INSTRUMENT_GAIN, truth=json.dumps(TRUTH)))
    return folder
