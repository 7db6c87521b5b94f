"""PySCF backend: HF and DFT (R/U/RO references), MP2, CCSD and CCSD(T).

One module per job:

* :mod:`~pesflow.engine.pyscf.methods` - method names and their
  :class:`~pesflow.engine.MethodInfo`, basis checks;
* :mod:`~pesflow.engine.pyscf.scf` - the SCF of one point: build, guess, convergence
  ladder, stability analysis and broken-symmetry guesses;
* :mod:`~pesflow.engine.pyscf.corrections` - dispersion corrections (pyscf-dispersion)
  and implicit solvent (IEF-PCM, ddCOSMO) of hf and DFT levels, in the method's name;
* :mod:`~pesflow.engine.pyscf.correlated` - MP2, CCSD, CCSD(T) and gradient scanners;
* :mod:`~pesflow.engine.pyscf.engine` - :class:`PySCFEngine` and its walk
  (constrained relaxation through :mod:`pesflow.engine.relax`).

PySCF itself is imported inside the functions, so importing this package (and asking
for the engine's name, version and methods) stays cheap.
"""

from pesflow.engine.pyscf.correlated import (
    CCSD_MAX_CYCLE,
    GRADIENT_WAVEFUNCTION_METHODS,
    gradient_scanner,
    run_ccsd,
    run_mp2,
    run_triples,
)
from pesflow.engine.pyscf.engine import PySCFEngine, PySCFWalk
from pesflow.engine.pyscf.scf import (
    LadderOutcome,
    StabilityCheck,
    analyse_stability,
    build_mole,
    build_scf,
    converge_scf,
    count_electrons,
    follow_instabilities,
    prepare_guess,
    resolve_reference,
    run_scf_ladder,
)
from pesflow.engine.relax import check_constraints, constraints_text

__all__ = [
    "CCSD_MAX_CYCLE",
    "GRADIENT_WAVEFUNCTION_METHODS",
    "LadderOutcome",
    "PySCFEngine",
    "PySCFWalk",
    "StabilityCheck",
    "analyse_stability",
    "build_mole",
    "build_scf",
    "check_constraints",
    "constraints_text",
    "converge_scf",
    "count_electrons",
    "follow_instabilities",
    "gradient_scanner",
    "prepare_guess",
    "resolve_reference",
    "run_ccsd",
    "run_mp2",
    "run_scf_ladder",
    "run_triples",
]
