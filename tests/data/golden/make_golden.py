"""Write the golden results grids of the built-in examples (run once, before a refactor).

    python tests/data/golden/make_golden.py

Each grid is a small fixed run (seed 11, 1024 samples) of one example in ``tolerance/examples``;
``tests/test_golden.py`` checks that today's engine reproduces every data variable bit for bit.
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path

import tolerance
from tolerance.grid import save_grid

SEED = 11
SAMPLES = 1024
HERE = Path(__file__).resolve().parent


def example_paths():
    root = resources.files("tolerance.examples")
    return sorted(
        Path(str(root.joinpath(e.name))) for e in root.iterdir() if e.name.endswith(".toml")
    )


if __name__ == "__main__":
    for path in example_paths():
        grid = tolerance.run(tolerance.load_spec(path), samples=SAMPLES, seed=SEED)
        out = save_grid(grid, HERE / f"{path.stem}.nc")
        print(out, out.stat().st_size)
