"""Wall time of a warm ``retol demo`` and its split, and the kernel's first-run compile time.

Run from the repository root (not collected by pytest)::

    python tests/benchmarks/bench_demo.py [--name sld-circular] [--repeat 2] [--skip-compile]

It measures

(a) the warm demo: ``retol demo NAME --out TMP`` in a subprocess, with the kernel already in
    numba's on-disk cache (a warm-up run fills it first); best of ``--repeat`` wall times;
(b) the split of the same work done in this process, step by step as ``retol demo`` does it:
    Monte Carlo (``Engine`` and ``evaluate`` per candidate), grid (``grid.to_dataset`` and
    writing grid.nc), figures (``report._render_all``: drawing and PNG encoding) and HTML
    (summary.csv and report.html);
(c) the kernel's first-run compile time: in a subprocess with an empty ``NUMBA_CACHE_DIR``, the
    wall time of a first small ``tolerance.run`` minus that of an identical second one.

Timings on a shared machine vary with what else runs: the script prints the load average first.
"""

from __future__ import annotations

import argparse
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
RETOL = [str(Path(sys.executable).with_name("retol"))]

COMPILE_SNIPPET = """
import time
from importlib import resources
from pathlib import Path
from tolerance.spec import loads
from tolerance.montecarlo import run
base = Path(str(resources.files("tolerance.examples")))
text = (base / "sld_circular.toml").read_text()
study = loads(text, "sld_circular.toml", base_dir=base)
c0, t0 = time.process_time(), time.perf_counter(); run(study, samples=1024)
c1, t1 = time.process_time(), time.perf_counter(); run(study, samples=1024)
c2, t2 = time.process_time(), time.perf_counter()
print(t1 - t0, t2 - t1, c1 - c0, c2 - c1)
"""


def _children_cpu() -> float:
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


def _demo_once(name: str, folder: Path) -> tuple[float, float]:
    """(wall, CPU) seconds of one ``retol demo NAME --out folder`` subprocess."""
    c0, t0 = _children_cpu(), time.perf_counter()
    subprocess.run(
        RETOL + ["demo", name, "--out", str(folder)],
        check=True,
        cwd=ROOT,
        stdout=subprocess.DEVNULL,
    )
    return time.perf_counter() - t0, _children_cpu() - c0


def warm_demo(name: str, repeat: int) -> list[tuple[float, float]]:
    """(wall, CPU) seconds of warm ``retol demo NAME`` runs (after one warm-up run)."""
    with tempfile.TemporaryDirectory() as tmp:
        _demo_once(name, Path(tmp) / "warmup")
        return [_demo_once(name, Path(tmp) / f"run{k}") for k in range(repeat)]


def split(name: str) -> dict[str, tuple[float, float]]:
    """(wall, CPU) seconds of each step of a demo run, in this process (kernel warm).

    CPU time (``time.process_time``, all threads) is steadier than wall time on a machine
    shared with other jobs.
    """
    from importlib import resources

    from tolerance.cli.demo import examples
    from tolerance.grid import save_grid, to_dataset
    from tolerance.montecarlo import Engine, tolerance_names
    from tolerance.report import (
        FIGURE_DIR,
        REPORT_FILE,
        SUMMARY_FILE,
        _render_all,
        build_html,
        write_summary_csv,
    )
    from tolerance.spec import loads

    base = Path(str(resources.files("tolerance.examples")))
    fname = examples()[name][0]
    study = loads((base / fname).read_text(), fname, base_dir=base)
    marks = []

    def mark():
        marks.append((time.perf_counter(), time.process_time()))

    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        mark()
        eng = Engine(study)
        results = [eng.evaluate(case, study.run.keep_samples) for case in eng.cases]
        mark()
        ds = to_dataset(eng, results, tolerance_names(eng.cases))
        save_grid(ds, folder / "grid.nc")
        mark()
        figures = _render_all(ds, folder / FIGURE_DIR, ("png",))
        mark()
        write_summary_csv(ds, folder / SUMMARY_FILE)
        (folder / REPORT_FILE).write_text(build_html(ds, figures), encoding="utf-8")
        mark()
    steps = ("Monte Carlo", "grid", "figures", "HTML")
    return {
        k: (b[0] - a[0], b[1] - a[1]) for k, a, b in zip(steps, marks[:-1], marks[1:], strict=True)
    }


def compile_time() -> tuple[float, float, float, float]:
    """Wall and CPU seconds of a first and a second 1024-sample run, numba cache empty:
    (first wall, second wall, first CPU, second CPU)."""
    with tempfile.TemporaryDirectory() as cache:
        env = dict(os.environ, NUMBA_CACHE_DIR=cache)
        r = subprocess.run(
            [sys.executable, "-c", COMPILE_SNIPPET],
            check=True,
            cwd=ROOT,
            env=env,
            capture_output=True,
            text=True,
        )
    w1, w2, c1, c2 = (float(x) for x in r.stdout.split())
    return w1, w2, c1, c2


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--name", default="sld-circular", help="built-in example")
    ap.add_argument("--repeat", type=int, default=2, help="warm demo runs (best counts)")
    ap.add_argument("--skip-compile", action="store_true", help="skip the cold-compile run")
    args = ap.parse_args(argv)
    print(f"load average: {' '.join(f'{x:.2f}' for x in os.getloadavg())}, cpus: {os.cpu_count()}")

    times = warm_demo(args.name, args.repeat)
    print(
        f"(a) warm retol demo {args.name}: best wall {min(t[0] for t in times):.2f} s, "
        f"best CPU {min(t[1] for t in times):.2f} s "
        f"(runs: {', '.join(f'{w:.2f}/{c:.2f}' for w, c in times)})"
    )
    parts = split(args.name)
    wall = sum(v[0] for v in parts.values())
    cpu = sum(v[1] for v in parts.values())
    print(f"(b) split, in process: wall {wall:.2f} s, CPU {cpu:.2f} s")
    for k, (w, c) in parts.items():
        print(
            f"    {k:<12s} wall {w:6.2f} s {100 * w / wall:5.1f} %   "
            f"CPU {c:6.2f} s {100 * c / cpu:5.1f} %"
        )
    if not args.skip_compile:
        w1, w2, c1, c2 = compile_time()
        print(
            f"(c) kernel compile (empty cache): first run wall {w1:.1f} s / CPU {c1:.1f} s, "
            f"second {w2:.2f} s / {c2:.2f} s: compile ~ {w1 - w2:.1f} s wall, "
            f"{c1 - c2:.1f} s CPU"
        )
    return 0


if __name__ == "__main__":
    sys.exit(main())
