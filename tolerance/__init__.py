"""retol: choose and tolerance optical retarders (waveplates).

The notebook API::

    import tolerance
    spec = tolerance.load_spec("my_plate.toml")
    grid = tolerance.run(spec, samples=20000, seed=7)

Heavy modules (numpy, numba, xarray) load on first use so that the command line starts fast.
"""

from __future__ import annotations

from .version import __version__

__all__ = ["__version__", "load_spec", "run", "design_plate", "get_material"]


def load_spec(path):
    """Read and validate a spec file (TOML); see :func:`tolerance.spec.load_spec`."""
    from .spec import load_spec as _load

    return _load(path)


def run(spec, samples=None, seed=None, chunk_size=None, **kwargs):
    """Run the Monte Carlo of a spec; see :func:`tolerance.montecarlo.run`."""
    from .montecarlo import run as _run

    return _run(spec, samples=samples, seed=seed, chunk_size=chunk_size, **kwargs)


def design_plate(*args, **kwargs):
    """Design a plate; see :func:`tolerance.plates.design_plate`."""
    from .plates import design_plate as _design

    return _design(*args, **kwargs)


def get_material(name):
    """A material by name or path; see :func:`tolerance.dispersion.get_material`."""
    from .dispersion import get_material as _get

    return _get(name)
