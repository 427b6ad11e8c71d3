"""Run many mutmut mutants against a focused test list in one warm Python process.

mutmut runs, for each mutant, every test that reaches the mutated function.  For the engine's
statistics (``montecarlo.wilson``, ``hist_quantiles``, ``yield_interval``, ...) that is the whole
selection (every engine run calls them): one to three minutes per mutant on the shared machine.
The tests that check these functions directly are few, so this runner takes a focused list of
test files and runs ``pytest.main`` once per mutant in one process, switching mutmut's trampoline
by ``MUTANT_UNDER_TEST`` (read at every call), so the imports and the compiled kernel are loaded
once.  A mutant that fails a test is killed; one that passes them all survived *these* tests
(check it against more before calling it a gap).

Run from the repository root after ``mutmut run`` has generated ``mutants/``::

    python tests/mutation/inprocess.py NAMES.txt OUT.jsonl tests/test_a.py tests/test_b.py

Only for pure functions: a mutant whose effect is cached inside the process (the material
records, the stream keys) would leak into the next one.
"""

from __future__ import annotations

import json
import os
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    names = Path(argv[0]).read_text().split()
    out = Path(argv[1])
    tests = [str(ROOT / t) for t in argv[2:]]
    os.chdir(ROOT / "mutants")
    sys.path.insert(0, str(ROOT / "mutants"))
    os.environ.setdefault("NUMBA_THREADING_LAYER", "workqueue")
    import pytest

    args = ["-x", "-q", "-p", "no:cacheprovider", "-p", "no:randomly", "--no-header", *tests]
    os.environ["MUTANT_UNDER_TEST"] = ""
    t0 = time.monotonic()
    rc = pytest.main(args)
    print(f"control: exit {rc} in {time.monotonic() - t0:.0f} s", flush=True)
    if rc != 0:
        return 1
    with out.open("a") as log:
        for name in names:
            os.environ["MUTANT_UNDER_TEST"] = name
            t0 = time.monotonic()
            rc = pytest.main(args)
            status = {0: "survived", 1: "killed"}.get(int(rc), f"exit {int(rc)}")
            rec = dict(name=name, status=status, seconds=round(time.monotonic() - t0, 1))
            log.write(json.dumps(rec) + "\n")
            log.flush()
            print(json.dumps(rec), flush=True)
    os.environ["MUTANT_UNDER_TEST"] = ""
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
