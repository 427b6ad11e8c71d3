"""Random vs Sobol' sampling at equal cost on the built-in demo: error of the yield and of the
mean worst goal metric against a large plain Monte Carlo reference.

    python tests/benchmarks/bench_statistics.py [--ref-samples 10000000] [--samples 4096]
                                                [--seeds 20] [--example sld_circular]

For every candidate of the example: the reference yield and mean worst metric from
``--ref-samples`` independent (random) samples; then ``--seeds`` runs of ``--samples`` samples
each with ``sampling = "random"`` and with ``sampling = "sobol"`` (8 scramblings of
samples/8 points; the same number of model evaluations), and the root-mean-square error of
each against the reference.  Prints a table and the error ratio random / Sobol'.  The
reference's own standard error is printed too: ratios are only meaningful where the errors are
well above it.
"""

from __future__ import annotations

import argparse
import dataclasses
import math
import time
from importlib import resources

import numpy as np

import tolerance
from tolerance.montecarlo import Engine


def outcomes(eng: Engine, case):
    worst, sst = eng.pass_values(case)
    pm = eng.pass_metric(worst, sst, case.goal)
    return float(np.mean(pm >= eng.study.goal.min)), float(np.mean(worst))


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--ref-samples", type=int, default=10_000_000)
    ap.add_argument("--samples", type=int, default=4096)
    ap.add_argument("--seeds", type=int, default=20)
    ap.add_argument("--example", default="sld_circular")
    a = ap.parse_args(argv)
    path = resources.files("tolerance.examples") / f"{a.example}.toml"
    study = tolerance.load_spec(str(path))
    rnd = dataclasses.replace(study, run=dataclasses.replace(study.run, sampling="random"))
    sob = dataclasses.replace(study, run=dataclasses.replace(study.run, sampling="sobol"))
    t0 = time.perf_counter()
    ref_eng = Engine(rnd, samples=a.ref_samples, seed=123456789, chunk_size=65536)
    ref = [outcomes(ref_eng, c) for c in ref_eng.cases]
    print(f"reference: {a.ref_samples:,} random samples in {time.perf_counter() - t0:.0f} s")
    del ref_eng
    header = (
        f"{'candidate':24s} {'yield':>8s} {'ref se':>8s} {'rmse rnd':>9s} {'rmse sob':>9s} "
        f"{'ratio':>6s} | {'mean':>8s} {'rmse rnd':>9s} {'rmse sob':>9s} {'ratio':>6s}"
    )
    print(f"{a.seeds} seeds x {a.samples} samples each; sobol = 8 scramblings x {a.samples // 8}")
    print(header)
    for i, cand in enumerate(study.candidates):
        errs = {"random": [], "sobol": []}
        for s in range(a.seeds):
            for label, st in (("random", rnd), ("sobol", sob)):
                eng = Engine(st, samples=a.samples, seed=1000 + s)
                y, m = outcomes(eng, eng.cases[i])
                errs[label].append((y - ref[i][0], m - ref[i][1]))
        r = np.sqrt(np.mean(np.square(errs["random"]), axis=0))
        q = np.sqrt(np.mean(np.square(errs["sobol"]), axis=0))
        y_ref = ref[i][0]
        se = math.sqrt(max(y_ref * (1 - y_ref), 0) / a.ref_samples)
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = r / q
        print(
            f"{cand.name:24s} {y_ref:8.4f} {se:8.1e} {r[0]:9.2e} {q[0]:9.2e} {ratio[0]:6.1f} | "
            f"{ref[i][1]:8.4f} {r[1]:9.2e} {q[1]:9.2e} {ratio[1]:6.1f}"
        )


if __name__ == "__main__":
    main()
