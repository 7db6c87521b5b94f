"""Analysis of scanned curves and surfaces: pure functions on arrays.

Modules, one job each:

* :mod:`pesflow.analysis.curves` - interpolation, minima and maxima of a 1-D curve, grid checks;
* :mod:`pesflow.analysis.vibration` - force constants, harmonic wavenumber, Morse fit,
  vibrational levels of the 1-D nuclear Schroedinger equation, rotational constant;
* :mod:`pesflow.analysis.barriers` - relative energies of stationary points, torsion and
  inversion barriers, dissociation energies;
* :mod:`pesflow.analysis.surface` - 2-D grids: minima, first-order saddle points, minimum-energy
  paths;
* :mod:`pesflow.analysis.derived` - one flat row of unit-named columns per curve or surface.

No function here reads or writes a file.
"""

import importlib

# Exports are loaded on first use: a batch job imports one small module of this package
# (continuity) and must not pay for scipy's interpolation and statistics modules.
_EXPORTS = {
    "CurveAnalysis": "curves",
    "StationaryPoint": "curves",
    "analyze_curve": "curves",
    "SUMMARY_COLUMNS": "derived",
    "summarize_curve": "derived",
    "summarize_surface": "derived",
}

__all__ = list(_EXPORTS)


def __getattr__(name):
    if name in _EXPORTS:
        return getattr(importlib.import_module(f"pesflow.analysis.{_EXPORTS[name]}"), name)
    raise AttributeError(f"module 'pesflow.analysis' has no attribute {name!r}")
