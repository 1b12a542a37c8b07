"""Write the demo scenarios as a beamline-style folder of text files."""

from __future__ import annotations

import json
from collections.abc import Iterable
from pathlib import Path

import numpy as np

from ..errors import SaxsFileError, SaxsInputError
from ..io._atomic import atomic_write_bytes

__all__ = ["write_demo", "write_frames", "FILE_NAMES"]

#: Per scenario: file prefix, scan coordinate, filename tag format, example pattern.
FILE_NAMES = {
    "phase-ramp": ("ramp", "temperature", "T{:05.1f}C", r"T(?P<temperature>[-\d.]+)C"),
    "flow-growth": ("flow", "position", "X{:05.1f}mm", r"X(?P<position>[-\d.]+)mm"),
    "unfolding": ("titration", "denaturant", "D{:.3f}M", r"D(?P<denaturant>[-\d.]+)M"),
}

_README = """\
# saxsnb demo data: {name}

**Synthetic data.** Every sample, instrument and number here is invented and computed
from closed-form models by `saxsnb.demo.make_series({name!r}, seed={seed})`; nothing
was measured. The folder is laid out like a user's beamline folder:

- `*.dat`: one reduced curve per frame, sample + background, as measured;
- `background/`: the matching background (buffer, capillary) measured separately.

Sample: {sample}.
Frames: {frames}, scan coordinate `{scan}` ({units}); q {qmin:.3g} .. {qmax:.3g} 1/nm.
Intensity unit: {iunit}.

Each file has `# key = value` header lines (sample, q_unit, intensity_unit, the scan
value and its units) and three columns: q, I, sigma. The scan value is also in the
file name, e.g. `{example}`. Read the folder (from its parent) with

```python
ds = saxsnb.read_series("{name}/*.dat", scan="{scan}", pattern=r"{pattern}")
background = saxsnb.read_series("{name}/background/*.dat", scan="{scan}", pattern=r"{pattern}")
signal = ds.saxs.subtract(background)
```

Subtracting the background gives the model signal; the truth used to make it is in
`saxsnb.demo.truth(saxsnb.demo.make_series({name!r}, seed={seed})[0])`.
"""


def _atomic_write_text(path: Path, text: str) -> None:
    atomic_write_bytes(path, text.encode("utf-8"))


def _trailer_text(meta: dict, style: str) -> str:
    """Trailing metadata after the rows: a JSON object or ``key: value`` lines (nested
    keys joined with dots; a ``{"value", "units"}`` pair as ``value units``)."""
    if style == "json":
        return json.dumps(meta, indent=2) + "\n"

    def flat(d, prefix=""):
        for k, v in d.items():
            if isinstance(v, dict) and set(v) != {"value", "units"}:
                yield from flat(v, f"{prefix}{k}.")
            elif isinstance(v, dict):
                yield f"{prefix}{k}", f"{v['value']} {v['units']}"
            else:
                yield f"{prefix}{k}", v

    return "".join(f"{k}: {v}\n" for k, v in flat(meta))


def write_frames(ds, folder, *, prefix: str, scan: str, tag: str, trailers=None,
                 trailer_style: str = "json") -> list[Path]:
    """Write every frame of ``ds`` to ``folder/<prefix>_<tag>_<index>.dat``, atomically.

    The header records the frame index, sample, units, the scan value and its units;
    the columns are q (1/nm), I and sigma. ``trailers`` (one dict per frame) are written
    after the rows as trailing metadata, a JSON object (``trailer_style="json"``) or
    ``key: value`` lines (``"colon"``), as instrument software often does (common practice).
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    q = np.asarray(ds["q"].values, dtype=float)
    I = np.asarray(ds["intensity"].values, dtype=float)
    S = np.asarray(ds["sigma"].values, dtype=float)
    values = np.asarray(ds[scan].values, dtype=float)
    units = ds[scan].attrs.get("units", "")
    sample = str(ds.attrs.get("sample", "")).replace("\n", " ")
    iunit = ds["intensity"].attrs.get("units", "arb")
    row_block = "%.8e %.8e %.8e\n" * q.size  # one format string for a whole curve
    paths = []
    for i in range(I.shape[0]):  # one file per frame: the loop is over files, not maths
        v = float(values[i])
        head = (
            f"# saxsnb series frame {i}\n# sample = {sample}\n# q_unit = 1/nm\n"
            f"# intensity_unit = {iunit}\n# {scan} = {v:.6g}\n# {scan}_units = {units}\n"
            "# q I sigma\n"
        )
        body = row_block % tuple(np.column_stack([q, I[i], S[i]]).ravel().tolist())
        if trailers is not None:
            body += _trailer_text(trailers[i], trailer_style)
        path = folder / f"{prefix}_{tag.format(v)}_{i:04d}.dat"
        _atomic_write_text(path, head + body)
        paths.append(path)
    return paths


def write_demo(out_dir, names: Iterable[str] | None = None, seed: int = 0) -> dict[str, Path]:
    """Write demo scenarios as folders of text files, one file per frame.

    Parameters
    ----------
    out_dir : path
        Created if missing. Each scenario goes to ``out_dir/<name>/`` with its
        background in ``out_dir/<name>/background/`` and a README.md.
    names : iterable of str, optional
        Scenarios to write (default: all of :data:`saxsnb.demo.SCENARIOS`, the
        ``"preparation"`` folder: repeat exposures, buffer, empty cell, water and a
        silver behenate standard, see :mod:`saxsnb.demo.preparation`, and the
        ``"images"`` folder: a calibrant image and a fibre series as TIFF, see
        :func:`saxsnb.demo_images.write_image_demo`).
    seed : int
        Seed passed to :func:`saxsnb.demo.make_series`.

    Returns
    -------
    dict name -> folder path.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     folders = write_demo(d, names=["unfolding"])
    ...     n = len(list(folders["unfolding"].glob("*.dat")))
    >>> n
    41
    """
    from . import SCENARIOS, make_series
    from .preparation import write_preparation

    known = [*SCENARIOS, "preparation", "images"]
    names = known if names is None else list(names)
    for name in names:
        if name not in known:
            raise SaxsInputError(f"unknown demo scenario {name!r}; choose from {known}",
                                 parameter="names")
    out = Path(out_dir)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise SaxsFileError(f"cannot create the output folder: {exc.strerror}", path=out) from exc
    result: dict[str, Path] = {}
    for name in names:
        if name == "images":   # detector images: calibrant and fibre series (saxsnb.demo_images)
            from ..demo_images import write_image_demo

            try:
                write_image_demo(out / name, seed=seed)
            except OSError as exc:
                raise SaxsFileError(f"cannot write demo files: {exc}", path=out / name) from exc
            result[name] = out / name
            continue
        if name == "preparation":
            try:
                result[name] = write_preparation(out / name, seed=seed)
            except OSError as exc:
                raise SaxsFileError(f"cannot write demo files: {exc}", path=out / name) from exc
            continue
        series, background = make_series(name, seed=seed)
        prefix, scan, tag, pattern = FILE_NAMES[name]
        folder = out / name
        try:
            paths = write_frames(series, folder, prefix=prefix, scan=scan, tag=tag)
            write_frames(background, folder / "background", prefix=prefix + "_bg", scan=scan, tag=tag)
            q = series["q"].values
            _atomic_write_text(
                folder / "README.md",
                _README.format(
                    name=name, seed=seed, sample=series.attrs["sample"],
                    frames=series.sizes["frame"], scan=scan, units=series[scan].attrs["units"],
                    qmin=q[0], qmax=q[-1], iunit=series["intensity"].attrs["units"],
                    example=paths[min(12, len(paths) - 1)].name, pattern=pattern,
                ),
            )
        except OSError as exc:
            raise SaxsFileError(f"cannot write demo files: {exc}", path=folder) from exc
        result[name] = folder
    return result
