"""Large fuzz run over the readers (text, canSAS XML, NXcanSAS/NetCDF): not run by make test.

Usage::

    python benchmarks/fuzz_io.py [CASES_PER_READER [SEED]]

(default 10000 cases per reader, seed 0; SAXSNB_FUZZ_CASES also sets the count). The
generators and the judge are those of the unit tests (tests/_fuzz_io.py): every file
must be read exactly (the values written) or refused by an error of the saxsnb family
naming the file (and, for text rows, the line). Printed per reader: cases, outcomes
(exact, refused, refused-benign = a readable file refused, silent = read with other
values or read where a refusal was due, badline = refused naming the wrong line or no
file, crash = an exception outside the family, slow-refused = a damaged HDF5 file that
made the library loop, refused by the bounded child read after SAXSNB_FUZZ_TIMEOUT
seconds (default 3), hang = any other read over 1 s) and the slowest read; the first
few cases of each bad outcome are listed.
"""

from __future__ import annotations

import collections
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from _fuzz_io import OUTCOMES, judge, store_case, text_case, xml_case  # noqa: E402

import saxsnb.io._h5guard as _h5guard  # noqa: E402

# a damaged file that makes the HDF5 library loop is refused after this many seconds
_h5guard.READ_TIMEOUT = float(os.environ.get("SAXSNB_FUZZ_TIMEOUT", 3.0))

BAD = ("silent", "badline", "crash", "hang")
NOTE = ("slow-refused",)


def run(name, make, n, seed, limit=1.0):
    rng = np.random.default_rng(seed)
    counts = collections.Counter()
    by_kind = collections.defaultdict(collections.Counter)
    examples = collections.defaultdict(list)
    slowest = 0.0
    folder = Path(tempfile.mkdtemp(prefix=f"fuzz-{name}-"))
    try:
        for i in range(n):
            case = make(rng, folder, i % 50)
            t = time.perf_counter()
            outcome, detail = judge(case, limit=limit)
            slowest = max(slowest, time.perf_counter() - t)
            counts[outcome] += 1
            by_kind[case.what][outcome] += 1
            if outcome in BAD + NOTE and len(examples[outcome]) < 5:
                examples[outcome].append(f"case {i} ({case.what}): {detail[:200]}")
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    line = "  ".join(f"{k}={counts[k]}" for k in OUTCOMES)
    print(f"{name:6s} cases={n}  {line}  slowest={slowest:.3f} s", flush=True)
    for outcome in BAD + NOTE:
        for e in examples[outcome]:
            print(f"    {outcome}: {e}")
    return counts, by_kind


def main() -> None:
    n = int(os.environ.get("SAXSNB_FUZZ_CASES", 10000))
    seed = 0
    if len(sys.argv) > 1:
        n = int(sys.argv[1])
    if len(sys.argv) > 2:
        seed = int(sys.argv[2])
    t0 = time.perf_counter()
    total = collections.Counter()
    for name, make in (("text", text_case), ("xml", xml_case), ("store", store_case)):
        counts, by_kind = run(name, make, n, seed)
        total.update(counts)
        if os.environ.get("SAXSNB_FUZZ_DETAIL"):
            for kind, c in sorted(by_kind.items()):
                print(f"      {kind:28s} " + " ".join(f"{k}={v}" for k, v in c.items()))
    print(f"total: {sum(total.values())} cases, silent={total['silent']} crash={total['crash']} "
          f"hang={total['hang']} badline={total['badline']} slow-refused={total['slow-refused']} "
          f"({time.perf_counter() - t0:.0f} s)")
    if any(total[k] for k in BAD):
        sys.exit(1)


if __name__ == "__main__":
    main()
