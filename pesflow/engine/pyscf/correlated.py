"""Correlated steps on a converged SCF: MP2, CCSD, CCSD(T), and their gradients.

PySCF is imported inside the functions.
"""

from __future__ import annotations

from pesflow.engine import EngineSettings

#: Iteration limit of the CCSD amplitude equations (PySCF's default is 50).
CCSD_MAX_CYCLE = 100
#: Methods with analytic nuclear gradients in PySCF used for relaxed scans.
GRADIENT_WAVEFUNCTION_METHODS = ("hf", "mp2", "ccsd")


def run_mp2(mf, frozen):
    """Total MP2 energy (hartree) on a converged SCF; UMP2 on an open-shell reference."""
    from pyscf import mp

    pt = mp.MP2(mf, frozen=frozen)
    pt.kernel()
    return float(pt.e_tot)


def run_ccsd(mf, frozen, settings: EngineSettings):
    """Converged CCSD object on a converged SCF (UCCSD on an open-shell reference).

    The amplitude equations are converged to ``settings.scf_energy_tolerance_hartree``
    in the energy.
    Raises ConvergenceError when they do not converge in :data:`CCSD_MAX_CYCLE` steps.
    """
    from pyscf import cc

    from pesflow.errors import ConvergenceError

    mycc = cc.CCSD(mf, frozen=frozen)
    mycc.conv_tol = settings.scf_energy_tolerance_hartree
    mycc.max_cycle = CCSD_MAX_CYCLE
    mycc.kernel()
    if not mycc.converged:
        raise ConvergenceError(f"CCSD did not converge in {mycc.max_cycle} iterations")
    return mycc


def run_triples(mycc):
    """Total CCSD(T) energy (hartree) from a converged CCSD object."""
    return float(mycc.e_tot + mycc.ccsd_t())


def gradient_scanner(mf, method: str, settings: EngineSettings):
    """PySCF's nuclear-gradient scanner of a method on a converged SCF.

    The scanner is a callable that takes the next geometry, converges the SCF from
    the previous density (so a broken-symmetry solution stays broken) and returns
    ``(energy_hartree, gradient_hartree_bohr)``.  ``method`` is hf, a DFT
    functional, mp2 or ccsd (RMP2/UMP2 and RCCSD/UCCSD analytic gradients).
    """
    from pyscf import cc, mp

    frozen = frozen_core_orbitals(mf.mol) if settings.frozen_core else None
    if method == "mp2":
        solver = mp.MP2(mf, frozen=frozen)
    elif method == "ccsd":
        solver = cc.CCSD(mf, frozen=frozen)
        solver.conv_tol = settings.scf_energy_tolerance_hartree
        solver.max_cycle = CCSD_MAX_CYCLE
    else:
        solver = mf
    return solver.nuc_grad_method().as_scanner()


def scf_of(scanner):
    """The SCF object under a gradient scanner (its base for hf and DFT, or the
    correlated method's reference)."""
    base = scanner.base
    return getattr(base, "_scf", base)


def frozen_core_orbitals(mol):
    """Number of chemical core orbitals to freeze (None when there are none)."""
    from pyscf.data import elements

    n_core = elements.chemcore(mol)
    return n_core or None
