"""Analysis of scanned curves and surfaces: pure functions on arrays.

Modules, one job each:

* :mod:`pesflow.analysis.curves` - interpolation, minima and maxima of a 1-D curve, grid checks;
* :mod:`pesflow.analysis.vibration` - force constants, harmonic wavenumber, Morse fit,
  vibrational levels of the 1-D nuclear Schroedinger equation, rotational constant;
* :mod:`pesflow.analysis.barriers` - relative energies of stationary points, torsion and
  inversion barriers, dissociation energies;
* :mod:`pesflow.analysis.surface` - 2-D grids: minima, first-order saddle points, minimum-energy
  paths;
* :mod:`pesflow.analysis.summary` - one flat row of unit-named columns per curve or surface.

No function here reads or writes a file.
"""

from pesflow.analysis.curves import CurveAnalysis, StationaryPoint, analyze_curve
from pesflow.analysis.summary import SUMMARY_COLUMNS, summarize_curve, summarize_surface

__all__ = [
    "CurveAnalysis",
    "StationaryPoint",
    "analyze_curve",
    "SUMMARY_COLUMNS",
    "summarize_curve",
    "summarize_surface",
]
