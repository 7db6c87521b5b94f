"""Excited-state levels: TDA and TDDFT on DFT, CIS and TDHF on HF, EOM-EE-CCSD on CCSD.

An excited-state method is named with its states, so that the name alone says what was
computed and keys it: ``tda-b3lyp(singlets=4)``, ``tddft-pbe0(triplets=2)``,
``cis(singlets=3,follow)``, ``eom-ccsd(singlets=2)``.  The level options behind the
name (:data:`LEVEL_OPTIONS`): ``states`` (excited states above the ground state,
default 3), ``spin`` (``singlet`` or ``triplet``, default singlet; for a closed-shell
reference) and ``follow`` (``energy``, the default: states numbered by energy at every
point; ``character``: each state's curve followed by the overlap of its excitation
with the neighbour's, see :mod:`pesflow.analysis.states`).

One point gives one record per state (:func:`pesflow.engine.state_record`): state 0
is the ground state (the SCF, or the CCSD under EOM-CCSD), states 1..n the excited
states in order of energy.  Each record's ``extra["state"]`` holds its index, label,
spin, point-group symmetry (:func:`state_symmetries`; ``""`` where not reliable),
excitation energy, oscillator strength (length gauge; 0 for triplets, NaN for
EOM-CCSD, which PySCF gives no transition moments for) and, for the excited states,
the overlaps of its excitation with each excited state of the previous point of the
walk and that point's positions (so that the analysis can check it is the neighbour
of its own walk).

Overlaps between neighbours: each state is reduced to its single-excitation
amplitudes X_ia (TDA/CIS: X; TDDFT/TDHF: the X of X, Y; EOM: r1), normalised, and
the amplitudes of neighbouring geometries A and B are compared through the mixed
overlap of their molecular orbitals, S_AB = C_A^T s(A, B) C_B with s the atomic-orbital
overlap between the two geometries (PySCF's ``intor_cross``): O_kl = sum X^A_ia
X^B_jb S_ij S_ab.  This is the overlap of the two excited determinants in the
approximation of one orbital pair (common practice for following states; it is
near 1 in magnitude for the same state a small step apart, near 0 for states of
different character).

PySCF is imported inside the functions.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field

import numpy as np

from pesflow.errors import EngineSetupError

#: The level options an excited-state method takes, and their defaults.
LEVEL_OPTIONS = ("states", "spin", "follow")
DEFAULT_STATES = 3
SPINS = ("singlet", "triplet")
FOLLOW = ("energy", "character")
#: Most excited states one level may ask for (a guard against typing 40 for 4).
MAX_STATES = 20
#: Iteration limit of the Davidson solver of the excited states (PySCF's default 100).
DAVIDSON_MAX_CYCLE = 200
#: Convergence of the excitation energies in the Davidson solver, hartree (PySCF's
#: default 1e-5; tighter than 1e-7 the solver stalls on near-linear dependence, as
#: measured here on LiH/6-31G at 1.6 A with 1e-8).
DAVIDSON_TOLERANCE_HARTREE = 1e-7
#: Share of a state's amplitude weight (and of an orbital's norm) that one irrep must
#: hold for the state (orbital) to be labelled by it (:func:`state_symmetries`).
SYMMETRY_WEIGHT = 0.99
#: Largest relative residual of a converged TDA/TDDFT root (its energy is then right to
#: about the residual squared, far below 1e-8 hartree).
MAX_RESIDUAL = 1e-4

_KINDS = {"tda": "tda", "tddft": "tddft", "cis": "tda", "tdhf": "tddft", "eom-ccsd": "eom"}
_OPTIONS = re.compile(r"^(singlets|triplets)=(\d+)(,follow)?$")
_NAME = re.compile(r"^(tda|tddft)-(.+?)(?:\((singlets|triplets)=\d+(?:,follow)?\))?$")
_PLAIN = re.compile(r"^(cis|tdhf|eom-ccsd)(?:\((singlets|triplets)=\d+(?:,follow)?\))?$")


@dataclass(frozen=True)
class ExcitedLevel:
    """An excited-state method with its states.

    Fields:
        prefix: ``tda``, ``tddft``, ``cis``, ``tdhf`` or ``eom-ccsd``.
        ground: the ground-state method it is built on (a functional, ``hf``, ``ccsd``).
        states: excited states above the ground state.
        spin: ``singlet`` or ``triplet``.
        follow: True when the states are followed by character along a walk.
    """

    prefix: str
    ground: str
    states: int = DEFAULT_STATES
    spin: str = "singlet"
    follow: bool = False

    @property
    def kind(self) -> str:
        """``tda`` (TDA, CIS), ``tddft`` (TDDFT, TDHF) or ``eom``."""
        return _KINDS[self.prefix]

    @property
    def name(self) -> str:
        """The canonical method name, e.g. ``tda-b3lyp(singlets=4)``."""
        head = f"{self.prefix}-{self.ground}" if self.prefix in ("tda", "tddft") else self.prefix
        follow = ",follow" if self.follow else ""
        return f"{head}({self.spin}s={self.states}{follow})"

    @property
    def family_method(self) -> str:
        """The method whose SCF it shares (the functional, or ``hf``)."""
        return "hf" if self.prefix in ("cis", "tdhf", "eom-ccsd") else self.ground

    def label(self, index: int, closed_shell: bool) -> str:
        """``S0``, ``S1``, ``T1`` ... for a closed-shell reference, else ``state k``."""
        if not closed_shell:
            return f"state {index}"
        return "S0" if index == 0 else f"{self.spin[0].upper()}{index}"


def parse(name: str) -> ExcitedLevel | None:
    """The :class:`ExcitedLevel` of a name (any case, options in parentheses or the
    defaults), None when ``name`` is not an excited-state method.  The ground-state
    part of ``tda-``/``tddft-`` names is returned as given (the caller checks it).

    >>> parse("TDA-B3LYP(triplets=2)").name, parse("cis").name, parse("b3lyp")
    ('tda-b3lyp(triplets=2)', 'cis(singlets=3)', None)
    """
    text = "".join(name.split()).lower()
    plain = _PLAIN.match(text)
    match = plain or _NAME.match(text)
    if not match:
        return None
    if plain:
        prefix = plain.group(1)
        ground = "ccsd" if prefix == "eom-ccsd" else "hf"
    else:
        prefix, ground = match.group(1), match.group(2)
    options = {}
    if text.endswith(")") and "(" in text:
        inside = _OPTIONS.match(text[text.rindex("(") + 1 : -1])
        if inside:
            options = {
                "spin": inside.group(1)[:-1],
                "states": int(inside.group(2)),
                "follow": "character" if inside.group(3) else "energy",
            }
    return level_with_options(prefix, ground, options)


def level_with_options(prefix: str, ground: str, options: dict) -> ExcitedLevel:
    """The level of ``prefix`` on ``ground`` with the spec's level options; raises
    EngineSetupError (one line) naming what is wrong.

    >>> level_with_options("tda", "b3lyp", {"states": 4, "spin": "triplet"}).name
    'tda-b3lyp(triplets=4)'
    """
    unknown = [k for k in options if k not in LEVEL_OPTIONS]
    if unknown:
        raise EngineSetupError(
            f"excited-state methods take the level options {', '.join(LEVEL_OPTIONS)}, "
            f"not {unknown[0]}"
        )
    states = options.get("states", DEFAULT_STATES)
    if not isinstance(states, int) or isinstance(states, bool) or not 1 <= states <= MAX_STATES:
        raise EngineSetupError(
            f"states must be a whole number of excited states, 1 to {MAX_STATES}; got {states!r}"
        )
    spin = options.get("spin", "singlet")
    if spin not in SPINS:
        raise EngineSetupError(f"spin must be one of {', '.join(SPINS)}; got {spin!r}")
    follow = options.get("follow", "energy")
    if follow not in FOLLOW:
        raise EngineSetupError(f"follow must be one of {', '.join(FOLLOW)}; got {follow!r}")
    return ExcitedLevel(prefix, ground, states, spin, follow == "character")


@dataclass
class StateSet:
    """The states of one point: energies, properties, and what overlaps need.

    Fields:
        energies_hartree: total energies, ground state first (n + 1).
        converged: per state.
        oscillator_strengths: per excited state (n).
        amplitudes: per excited state, a list over spins of normalised X (nocc, nvir).
        orbitals: per spin, (C_occ, C_vir) of the orbitals the amplitudes refer to.
        mol: the PySCF molecule (for the overlap with the next geometry).
    """

    energies_hartree: np.ndarray
    converged: np.ndarray
    oscillator_strengths: np.ndarray
    amplitudes: list = field(default_factory=list)
    orbitals: list = field(default_factory=list)
    mol: object = None


def _normalised(blocks):
    blocks = [np.asarray(b, dtype=float) for b in blocks]
    norm = math.sqrt(sum(float(np.sum(b * b)) for b in blocks))
    return [b / norm for b in blocks] if norm > 0 else blocks


def _spin_blocks(mf, nocc=None, mask=None):
    """Per spin, (C_occ, C_vir) of an SCF (restricted: one spin)."""
    coeff, occ = mf.mo_coeff, mf.mo_occ
    if np.asarray(occ).ndim == 1:
        coeff, occ = [coeff], [occ]
    out = []
    for c, o in zip(coeff, occ):
        c = np.asarray(c)
        if mask is not None:
            c, o = c[:, mask], np.asarray(o)[mask]
        occupied = np.asarray(o) > 0
        out.append((c[:, occupied], c[:, ~occupied]))
    return out


def run_td(mf, level: ExcitedLevel) -> StateSet:
    """TDA (CIS) or TDDFT (TDHF) states on a converged SCF object ``mf``.

    Raises EngineSetupError for triplets on an open-shell reference.
    """
    restricted = np.asarray(mf.mo_occ).ndim == 1
    if not restricted and level.spin == "triplet":
        raise EngineSetupError(
            "spin: triplet needs a closed-shell restricted reference; an unrestricted "
            "reference gives spin-conserving excitations (leave spin out)"
        )
    if level.kind == "tda":
        td = mf.TDA()
    else:
        td = mf.TDHF() if level.prefix == "tdhf" else mf.TDDFT()
    td.nstates = level.states
    td.max_cycle = DAVIDSON_MAX_CYCLE
    td.conv_tol = DAVIDSON_TOLERANCE_HARTREE
    if restricted:
        td.singlet = level.spin == "singlet"
    td.kernel()
    excitation = np.asarray(td.e, dtype=float)
    converged = td_residuals(td, level.kind == "tda") < MAX_RESIDUAL
    if level.spin == "singlet" or not restricted:
        strengths = np.asarray(td.oscillator_strength(gauge="length"), dtype=float)
    else:
        strengths = np.zeros(excitation.size)  # spin-forbidden
    amplitudes = [_normalised(x if not restricted else [x]) for x, _ in td.xy]
    return StateSet(
        energies_hartree=np.concatenate([[mf.e_tot], mf.e_tot + excitation]),
        converged=np.concatenate([[True], converged]),
        oscillator_strengths=strengths,
        amplitudes=amplitudes,
        orbitals=_spin_blocks(mf),
        mol=mf.mol,
    )


def td_residuals(td, tda: bool) -> np.ndarray:
    """Relative residual norms |M z - w z| / |z| of a TDA/TDDFT solution, per state.

    PySCF's Davidson solver can report a root as not converged in a small excitation
    space (near-linear dependence of its subspace) although its residual is 1e-6 (LiH
    in 6-31G, 8 roots, measured here); the residual is what says whether a root is
    right.
    """
    vind, _ = td.gen_vind()
    vectors = []
    for x, y in td.xy:
        parts = list(x) if isinstance(x, tuple) else [x]
        if not tda:
            parts += list(y) if isinstance(y, tuple) else [y]
        vectors.append(np.concatenate([np.ravel(p) for p in parts]))
    z = np.asarray(vectors)
    r = vind(z) - np.asarray(td.e)[:, None] * z
    return np.linalg.norm(r, axis=1) / np.linalg.norm(z, axis=1)


def run_eom(mycc, level: ExcitedLevel) -> StateSet:
    """EOM-EE-CCSD states (singlets or triplets) on a converged closed-shell RCCSD."""
    from pyscf.cc import eom_rccsd

    if np.asarray(mycc._scf.mo_occ).ndim != 1 or mycc._scf.mol.spin != 0:
        raise EngineSetupError("eom-ccsd here needs a closed-shell restricted reference")
    solver = eom_rccsd.EOMEESinglet if level.spin == "singlet" else eom_rccsd.EOMEETriplet
    eom = solver(mycc)
    eom.max_cycle = DAVIDSON_MAX_CYCLE
    eom.conv_tol = DAVIDSON_TOLERANCE_HARTREE
    excitation, vectors = eom.kernel(nroots=level.states)
    excitation = np.atleast_1d(np.asarray(excitation, dtype=float))
    vectors = vectors if level.states > 1 else [vectors]
    converged = np.atleast_1d(np.asarray(eom.converged, dtype=bool))
    if converged.size == 1 and excitation.size > 1:
        converged = np.repeat(converged, excitation.size)
    amplitudes = [_normalised([eom.vector_to_amplitudes(v)[0]]) for v in vectors]
    mask = mycc.get_frozen_mask()
    return StateSet(
        energies_hartree=np.concatenate([[mycc.e_tot], mycc.e_tot + excitation]),
        converged=np.concatenate([[True], converged]),
        oscillator_strengths=np.full(excitation.size, np.nan),
        amplitudes=amplitudes,
        orbitals=_spin_blocks(mycc._scf, mask=mask),
        mol=mycc._scf.mol,
    )


def state_symmetries(states: StateSet) -> list[str]:
    """The point-group label of each state (ground state first) of a closed-shell
    reference, in the largest Abelian subgroup PySCF labels orbitals in (D2h and its
    subgroups; C2v for a linear molecule without inversion, D2h with it); ``""`` where
    no label is reliable.

    The molecule's point group at this geometry is PySCF's (``Mole.build`` with
    symmetry, which keeps the orientation).  A state's symmetry does not depend on the
    orbitals chosen within the occupied and the virtual space, so both spaces are
    re-expressed in symmetry-adapted orbitals (:func:`_adapted_space`; this also sorts
    out degenerate orbitals that the calculation without symmetry mixed), the
    amplitudes rotated into them, and an excitation i->a given the irrep of the
    product (XOR of PySCF's Abelian irrep ids).  A state is labelled when
    :data:`SYMMETRY_WEIGHT` of its amplitude weight lies in one irrep; otherwise (a
    degenerate pair of states mixed by the calculation, whose irrep is not Abelian; a
    space that is not symmetric; an open shell) ``""``.  The ground state of a closed
    shell is totally symmetric.
    """
    n = len(states.amplitudes) + 1
    if len(states.orbitals) != 1 or states.mol is None or states.mol.spin != 0:
        return [""] * n
    try:
        return _labels(states)
    except Exception:  # a label is a description; it never fails a point
        return [""] * n


def _labels(states: StateSet) -> list[str]:
    from pyscf import symm

    mol = _symmetric_copy(states.mol)
    ovlp = mol.intor_symmetric("int1e_ovlp")
    (occ, vir), rotated = states.orbitals[0], []
    for space in (occ, vir):
        adapted, ids = _adapted_space(mol, ovlp, space)
        rotated.append((space.T @ ovlp @ adapted, ids))
    (u_occ, occ_ids), (u_vir, vir_ids) = rotated
    pair = np.bitwise_xor.outer(occ_ids, vir_ids)
    labels = [symm.irrep_id2name(mol.groupname, 0)]
    for (x,) in states.amplitudes:
        weight = (u_occ.T @ np.asarray(x, dtype=float) @ u_vir) ** 2
        shares = {int(k): float(weight[pair == k].sum()) for k in np.unique(pair)}
        best = max(shares, key=shares.get)
        good = shares[best] >= SYMMETRY_WEIGHT * float(weight.sum())
        labels.append(symm.irrep_id2name(mol.groupname, best) if good else "")
    return labels


def _symmetric_copy(mol):
    # The same molecule with PySCF's point group (orientation and AO basis unchanged).
    sym = mol.copy()
    sym.symmetry = True
    sym.build()
    subgroup = {"Dooh": "D2h", "Coov": "C2v"}.get(sym.groupname)
    if subgroup is not None:
        sym.symmetry = subgroup
        sym.build()
    return sym


def _adapted_space(mol, ovlp, orbitals, tolerance=1e-4):
    """Symmetry-adapted orthonormal orbitals spanning the same space as ``orbitals``
    (columns), and the Abelian irrep id of each; ValueError when the space is not a sum
    of irreps (a mixed eigenvalue, or a count that does not add up).

    For each irrep, with B its symmetry-adapted AO combinations (``mol.symm_orb``), the
    orbitals of the space in that irrep are the solutions of
    B^T S P S B v = lambda B^T S B v with lambda = 1, P = C C^T the space's projector.
    """
    import scipy.linalg

    projected = ovlp @ orbitals
    columns, ids = [], []
    for irrep, basis in zip(mol.irrep_id, mol.symm_orb):
        if basis.shape[1] == 0:
            continue
        inside = basis.T @ projected
        values, vectors = scipy.linalg.eigh(inside @ inside.T, basis.T @ ovlp @ basis)
        if np.any((values > tolerance) & (values < 1 - tolerance)):
            raise ValueError("the orbital space is not symmetric")
        keep = values >= 1 - tolerance
        columns.append(basis @ vectors[:, keep])
        ids += [int(irrep) % 10] * int(keep.sum())  # % 10: PySCF's D2h-subgroup id
    if len(ids) != orbitals.shape[1]:
        raise ValueError("the orbital space is not symmetric")
    return np.hstack(columns), np.asarray(ids, dtype=int)


def state_overlaps(previous: StateSet, current: StateSet) -> np.ndarray:
    """|O_kl| between excited state k of ``previous`` and l of ``current`` (n_prev, n_cur),
    see the module docstring; the two must have the same number of electrons.

    >>> # state_overlaps(states_at_r1, states_at_r2)[0, 0] is near 1 for a small step
    """
    from pyscf import gto

    s_ab = gto.intor_cross("int1e_ovlp", previous.mol, current.mol)
    out = np.zeros((len(previous.amplitudes), len(current.amplitudes)))
    for spin, ((occ_a, vir_a), (occ_b, vir_b)) in enumerate(
        zip(previous.orbitals, current.orbitals)
    ):
        s_oo = occ_a.T @ s_ab @ occ_b
        s_vv = vir_a.T @ s_ab @ vir_b
        projected = [s_oo.T @ x[spin] @ s_vv for x in previous.amplitudes]
        for j, y in enumerate(current.amplitudes):
            for k, p in enumerate(projected):
                out[k, j] += float(np.sum(p * y[spin]))
    return np.abs(out)
