"""Speed of a parameter sweep, locally and on a 2-worker local dask cluster (not collected by
pytest).

    python tests/benchmarks/bench_sweep.py [--samples N] [--workers W]

The scenario is the built-in demo (an invented 830 nm SLD study, six candidates) swept 4 x 4 over
the source width and the clocking tolerance at N samples (default 10,000).  It prints the wall
time of the local sweep and of the cluster sweep, their ratio, and checks that both give the same
yields (the cluster must be bit-identical).
"""

from __future__ import annotations

import argparse
import os
import time
from importlib import resources
from pathlib import Path

import numpy as np


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--samples", type=int, default=10_000)
    ap.add_argument("--workers", type=int, default=2)
    args = ap.parse_args(argv)

    from tolerance.cluster import client
    from tolerance.spec import load_spec
    from tolerance.sweep import parse_set, run_sweep

    path = Path(str(resources.files("tolerance.examples").joinpath("sld_circular.toml")))
    study = load_spec(path)
    axes = [
        parse_set("source.fwhm=10nm,20nm,30nm,40nm"),
        parse_set("tolerances.clocking_deg.uniform=0.25,0.5,1.0,2.0"),
    ]
    load = os.getloadavg()
    print(f"load average {load[0]:.2f} {load[1]:.2f} {load[2]:.2f}; {os.cpu_count()} CPUs")
    run_sweep(study, [parse_set("goal.min=0.9")], samples=512)  # warm: load the cached kernel
    t = time.perf_counter()
    local, _ = run_sweep(study, axes, samples=args.samples)
    t_local = time.perf_counter() - t
    print(f"local sweep, 16 points x {args.samples} samples: {t_local:.1f} s")
    with client(workers=args.workers) as c:
        t = time.perf_counter()
        remote, _ = run_sweep(study, axes, samples=args.samples, client=c)
        t_remote = time.perf_counter() - t
    print(f"{args.workers}-worker local cluster: {t_remote:.1f} s (cluster start-up not counted)")
    print(f"speed-up {t_local / t_remote:.2f}x")
    same = np.array_equal(local["yield"].values, remote["yield"].values)
    print("yields identical:", same)
    return 0 if same else 1


if __name__ == "__main__":
    raise SystemExit(main())
