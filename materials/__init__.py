"""Dispersion data files shipped with retol, one TOML file per material.

Each file carries its formula, coefficients, validity range, reference temperature, thermal
data and the full citation of its published source.  This folder is installed as the
``tolerance.materials`` package and read with :mod:`importlib.resources`.
"""
