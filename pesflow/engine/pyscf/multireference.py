"""Multireference levels: CASSCF and strongly contracted NEVPT2 (PySCF's ``mcscf`` and
``mrpt.NEVPT``), their level options and their walk.

A multireference method is named with its active space and states, so that the name
alone says what was computed and keys it (``casscf(6,6)``, ``nevpt2(avas:n 2p)``,
``casscf(2,2;sa3)``, ``casscf(6,6;sa2:0.75,0.25)``):

* the active space by counts ``(electrons,orbitals)``, or by atomic-orbital labels
  chosen by PySCF's AVAS (``avas:`` then the labels, element and shell, lower case);
* ``;saN`` state averaging over the N lowest roots, equal weights unless listed
  after a colon.

:func:`level_name` makes the name from the spec's level options, :func:`parse` reads
it back.  :class:`MultireferenceWalk` computes a walk: each point's CASSCF starts from
the neighbour's converged orbitals projected onto the new geometry
(``mcscf.project_init_guess``), and each record says how much the active space
overlaps the neighbour's and whether its character changed
(``extra["character_change"]``).

Cheap to import: PySCF is imported inside the functions.
"""

from __future__ import annotations

import dataclasses
import math
import re
import time
from dataclasses import dataclass

import numpy as np

from pesflow.analysis.continuity import MAX_OCCUPATION_STEP
from pesflow.engine import EngineSettings, PointResult
from pesflow.engine.base import EngineWalk, error_line
from pesflow.errors import EngineSetupError

#: Multireference methods and the level options they take.
MULTIREFERENCE_METHODS = ("casscf", "nevpt2")
LEVEL_OPTIONS = ("active", "states", "weights")

#: Iterations of CASSCF's macro loop (PySCF's default is 50).
CASSCF_MAX_MACRO = 100
#: Smallest singular value of the overlap between neighbouring active spaces that still
#: counts as the same space.  Measured here (N2 CAS(6,6)/6-31G): 0.987 or more along
#: the smooth walk from 0.9 to 3 A in 0.1 A steps, 0.84 at 0.3 A steps near 1 A
#: (orbitals carried with their atoms); an orbital rotated out of the space drops it
#: towards 0.
MIN_ACTIVE_OVERLAP = 0.7

_LABEL = re.compile(r"^([a-z]{1,2})\s+(\d?[spdfgh][a-z0-9+-]*)$")
_NAME = re.compile(r"^(casscf|nevpt2)\((.+)\)$")


@dataclass(frozen=True)
class MultireferenceLevel:
    """A multireference method with its active space and states.

    Fields:
        method: ``casscf`` or ``nevpt2`` (strongly contracted, on the CASSCF).
        n_electrons, n_orbitals: the active space by counts (None with AO labels).
        ao_labels: AO labels whose orbitals AVAS puts in the active space, lower case
            (``("n 2p",)``); empty with counts.
        states: roots averaged in the CASSCF (1: the ground state alone).
        weights: their weights (empty: equal).
    """

    method: str
    n_electrons: int | None = None
    n_orbitals: int | None = None
    ao_labels: tuple[str, ...] = ()
    states: int = 1
    weights: tuple[float, ...] = ()

    @property
    def name(self) -> str:
        """The canonical method name, e.g. ``nevpt2(6,6;sa2)``."""
        if self.ao_labels:
            active = "avas:" + ",".join(self.ao_labels)
        else:
            active = f"{self.n_electrons},{self.n_orbitals}"
        if self.states > 1:
            active += f";sa{self.states}"
            if self.weights:
                active += ":" + ",".join(format(w, ".10g") for w in self.weights)
        return f"{self.method}({active})"

    @property
    def casscf_name(self) -> str:
        """The name of the CASSCF this level is built on (its family)."""
        return dataclasses.replace(self, method="casscf").name

    @property
    def state_weights(self) -> list[float]:
        return list(self.weights) if self.weights else [1.0 / self.states] * self.states


def level_name(method: str, options: dict) -> str:
    """The canonical name of ``method`` (casscf or nevpt2) with the spec's level options.

    Inputs:
        options: ``active`` (required): ``[electrons, orbitals]`` or
            ``{"ao_labels": ["N 2p", ...]}``; ``states`` (optional, default 1): roots
            averaged; ``weights`` (optional): their weights, positive, summing to 1.

    Raises EngineSetupError (one line) naming what is wrong.

    >>> level_name("casscf", {"active": [6, 6]})
    'casscf(6,6)'
    >>> level_name("nevpt2", {"active": {"ao_labels": ["N 2p"]}, "states": 2})
    'nevpt2(avas:n 2p;sa2)'
    """
    unknown = [k for k in options if k not in LEVEL_OPTIONS]
    if unknown:
        raise EngineSetupError(
            f"{method} takes the level options {', '.join(LEVEL_OPTIONS)}, not {unknown[0]}"
        )
    active = options.get("active")
    if active is None:
        raise EngineSetupError(
            f"{method} needs an active space: active: [electrons, orbitals] "
            "or active: {ao_labels: ['N 2p']}"
        )
    fields = {"method": method}
    if isinstance(active, dict):
        labels = active.get("ao_labels")
        if set(active) != {"ao_labels"} or not labels or isinstance(labels, str):
            raise EngineSetupError(
                "active by AO labels is {ao_labels: [label, ...]} with labels such as 'N 2p'"
            )
        fields["ao_labels"] = tuple(dict.fromkeys(_canonical_label(lb) for lb in labels))
    else:
        counts = list(active) if isinstance(active, list | tuple) else []
        if len(counts) != 2 or not all(isinstance(c, int) and not isinstance(c, bool)
                                       for c in counts):  # fmt: skip
            raise EngineSetupError(
                f"active must be [electrons, orbitals] (two whole numbers), got {active!r}"
            )
        n_electrons, n_orbitals = counts
        if n_orbitals < 1 or n_electrons < 1 or n_electrons > 2 * n_orbitals:
            raise EngineSetupError(
                f"active [{n_electrons}, {n_orbitals}]: need 1 or more orbitals and "
                "1 to 2 x orbitals electrons"
            )
        fields.update(n_electrons=n_electrons, n_orbitals=n_orbitals)
    states, weights = options.get("states"), options.get("weights")
    if weights is not None:
        if isinstance(weights, str) or not isinstance(weights, list | tuple) or not weights:
            raise EngineSetupError(f"weights must be a list of numbers, got {weights!r}")
        weights = [float(w) for w in weights]
        if states is None:
            states = len(weights)
        if len(weights) != states:
            raise EngineSetupError(f"weights lists {len(weights)} values for {states} states")
        if min(weights) <= 0 or abs(sum(weights) - 1.0) > 1e-6:
            raise EngineSetupError(f"weights must be positive and sum to 1, got {weights}")
        if max(weights) - min(weights) < 1e-12:
            weights = None  # equal weights are the default
    if states is None:
        states = 1
    if not isinstance(states, int) or isinstance(states, bool) or states < 1:
        raise EngineSetupError(f"states must be a whole number, 1 or more; got {states!r}")
    fields["states"] = states
    fields["weights"] = tuple(weights) if weights and states > 1 else ()
    return MultireferenceLevel(**fields).name


def _canonical_label(label) -> str:
    from ase.data import chemical_symbols

    text = " ".join(str(label).split()).lower()
    match = _LABEL.match(text)
    if not match or match.group(1).capitalize() not in chemical_symbols:
        raise EngineSetupError(
            f"AO label {label!r} is not an element and a shell (e.g. 'N 2p', 'Fe 3d', 'C 2pz')"
        )
    return text


def parse(name: str) -> MultireferenceLevel | None:
    """The :class:`MultireferenceLevel` of a canonical name; None when ``name`` is not
    a multireference method with options; EngineSetupError for a malformed one.

    >>> parse("casscf(6,6;sa2:0.75,0.25)").weights
    (0.75, 0.25)
    """
    match = _NAME.match(" ".join(name.split()).lower())
    if not match:
        return None
    method, inside = match.groups()
    parts = inside.split(";")
    options = {}
    try:
        if parts[0].startswith("avas:"):
            options["active"] = {"ao_labels": parts[0][len("avas:") :].split(",")}
        else:
            options["active"] = [int(c) for c in parts[0].split(",")]
        for part in parts[1:]:
            head, _, weights = part.partition(":")
            if not head.startswith("sa"):
                raise ValueError(part)
            options["states"] = int(head[2:])
            if weights:
                options["weights"] = [float(w) for w in weights.split(",")]
    except ValueError:
        raise EngineSetupError(
            f"malformed multireference method {name!r}; e.g. casscf(6,6), "
            "nevpt2(avas:n 2p), casscf(2,2;sa3)"
        ) from None
    level_name(method, options)  # checks every option (EngineSetupError)
    return _from_options(method, options)


def _from_options(method, options):
    active = options["active"]
    states = int(options.get("states", 1))
    weights = tuple(options.get("weights") or ())
    if len(set(weights)) == 1:
        weights = ()
    if isinstance(active, dict):
        labels = tuple(dict.fromkeys(_canonical_label(lb) for lb in active["ao_labels"]))
        return MultireferenceLevel(method, ao_labels=labels, states=states, weights=weights)
    return MultireferenceLevel(method, active[0], active[1], states=states, weights=weights)


def pyscf_ao_labels(level: MultireferenceLevel) -> list[str]:
    """The AO labels as PySCF writes them (element capitalised: ``N 2p``)."""
    return [lb[:2].strip().capitalize() + lb[len(lb.split()[0]) :] for lb in level.ao_labels]


# ---------------------------------------------------------------------------
# one point
# ---------------------------------------------------------------------------


@dataclass
class ActiveState:
    """What a multireference walk carries from one point to the next."""

    mol: object  # the previous point's PySCF Mole
    mo_coeff: np.ndarray  # its converged CASSCF orbitals
    n_core: int
    n_orbitals: int
    n_electrons: int
    occupations: np.ndarray  # natural occupations of its active orbitals
    density: np.ndarray  # its SCF density (the next SCF's guess)


def active_space_overlap(previous: ActiveState, mol, mo_coeff, ncore, ncas) -> float:
    """Smallest singular value of the overlap between the previous point's active
    orbitals and this point's (1: the same space; near 0: an orbital rotated out).

    The previous orbitals are carried over with their atoms (the same AO coefficients
    on the moved atoms, orthonormalised in this geometry's overlap, as
    ``mcscf.project_init_guess`` does between neighbours), so that a smooth walk keeps
    the overlap near 1 and only a change of character lowers it.
    """
    if previous.n_orbitals != ncas or previous.mo_coeff.shape[0] != mo_coeff.shape[0]:
        return 0.0
    s = mol.intor_symmetric("int1e_ovlp")
    a = previous.mo_coeff[:, previous.n_core : previous.n_core + ncas]
    values, vectors = np.linalg.eigh(a.T @ s @ a)
    a = a @ (vectors / np.sqrt(values)) @ vectors.T
    b = mo_coeff[:, ncore : ncore + ncas]
    return float(np.linalg.svd(a.T @ s @ b, compute_uv=False).min())


def natural_occupations(mc) -> np.ndarray:
    """Natural occupation numbers of the active orbitals, largest first (for state
    averaging, of the averaged density)."""
    casdm1 = mc.fcisolver.make_rdm1(mc.ci, mc.ncas, mc.nelecas)
    return np.sort(np.linalg.eigvalsh(casdm1))[::-1]


def _choose_active(mf, level: MultireferenceLevel):
    """(ncas, nelecas, orbitals): AVAS's for AO labels, the SCF's for counts."""
    if not level.ao_labels:
        return level.n_orbitals, level.n_electrons, mf.mo_coeff
    from pyscf.mcscf import avas

    ncas, nelecas, mo = avas.kernel(mf, pyscf_ao_labels(level), verbose=0)
    if ncas == 0:
        raise EngineSetupError(
            f"AVAS found no orbitals of {', '.join(pyscf_ao_labels(level))} here"
        )
    return int(ncas), int(nelecas), mo


def _casscf(mf, ncas, nelecas, level, settings: EngineSettings):
    from pyscf import mcscf

    mol = mf.mol
    if nelecas > mol.nelectron or ncas > mol.nao_nr() - (mol.nelectron - nelecas) // 2:
        raise EngineSetupError(
            f"active space ({nelecas},{ncas}) does not fit {mol.nelectron} electrons "
            f"in {mol.nao_nr()} orbitals"
        )
    if (nelecas - mol.spin) % 2 or nelecas < mol.spin:
        raise EngineSetupError(
            f"{nelecas} active electrons cannot have multiplicity {mol.spin + 1}"
        )
    mc = mcscf.CASSCF(mf, ncas, nelecas)
    mc.verbose = 0
    mc.conv_tol = settings.scf_energy_tolerance_hartree
    mc.max_cycle_macro = CASSCF_MAX_MACRO
    s = mol.spin / 2
    # Keep the roots at the molecule's spin: near dissociation, states of every spin
    # coupling are nearly degenerate and the CI solver would pick any of them.
    mc.fix_spin_(ss=s * (s + 1))
    if level.states > 1:
        mc = mc.state_average_(level.state_weights)
    return mc


def _nevpt2(mc, level, settings):
    """NEVPT2 total energies of the roots (one for a single state)."""
    from pyscf import mcscf, mrpt

    if level.states == 1:
        return [float(mc.e_tot + mrpt.NEVPT(mc).kernel())]
    # State-averaged orbitals: a multi-root CASCI on them, then NEVPT2 per root
    # (PySCF's examples/mrpt/41-for_state_average.py).
    ci = mcscf.CASCI(mc._scf, mc.ncas, mc.nelecas)
    ci.verbose = 0
    ci.fcisolver.nroots = level.states
    s = mc.mol.spin / 2
    ci.fix_spin_(ss=s * (s + 1))
    ci.kernel(mc.mo_coeff)
    return [float(ci.e_tot[i] + mrpt.NEVPT(ci, root=i).kernel()) for i in range(level.states)]


class MultireferenceWalk(EngineWalk):
    """The points of one walk at one multireference family (one CASSCF with its active
    space), each CASSCF started from the neighbour's orbitals.

    ``state`` is an :class:`ActiveState` (None at the start).  Each point converges a
    restricted SCF (RHF, ROHF for open shells) from the neighbour's density, then the
    CASSCF: at a walk's start from the SCF orbitals (counts: the orbitals around the
    Fermi level; AO labels: AVAS), afterwards from the neighbour's CASSCF orbitals
    projected onto this geometry.  ``nevpt2`` adds the strongly contracted NEVPT2
    correction on that CASSCF.

    >>> from pesflow.engine import Geometry
    >>> walk = MultireferenceWalk(EngineSettings(), "sto-3g", ["casscf(2,2)"])
    >>> record = walk.compute(Geometry(("H", "H"), [[0, 0, 0], [0, 0, 0.74]]))["casscf(2,2)"]
    >>> round(record.energy_hartree, 6), record.reference
    (-1.137284, 'CASSCF')
    """

    def __init__(self, settings, basis, methods):
        super().__init__()
        self.settings = dataclasses.replace(settings, stability=False, broken_symmetry=False)
        self.basis = basis
        self.methods, self.level = _split(methods)

    def compute(self, geometry, methods=None):
        """``{method: PointResult}`` at ``geometry`` (see the class); failures recorded."""
        from pyscf import lib

        from pesflow.engine.pyscf.engine import _check_inputs
        from pesflow.engine.pyscf.scf import converge_scf

        wanted = self.methods
        if methods is not None:
            wanted, level = _split(methods)
            if level.casscf_name != self.level.casscf_name or level.name not in self.methods:
                raise EngineSetupError(f"{methods} are not of this walk's {self.level.name}")
        _check_inputs(geometry, self.basis)
        level, settings = self.level, self.settings
        label = "CASSCF" if level.states == 1 else "SA-CASSCF"
        kind = "restricted" if geometry.multiplicity == 1 else "restricted-open"
        previous, self.state = self.state, None
        start = time.perf_counter()
        lib.num_threads(settings.threads)
        try:
            ladder = converge_scf(
                geometry, self.basis, "hf", kind, settings,
                None if previous is None else previous.density,
            )  # fmt: skip
        except Exception as exc:
            wall_s = time.perf_counter() - start
            return {m: PointResult.failed(m, error_line(exc), label, wall_s=wall_s) for m in wanted}
        if not ladder.converged:
            reason = "SCF did not converge after rungs: " + ", ".join(settings.scf_ladder)
            return {
                m: PointResult.failed(m, reason, label, ladder.attempts, ladder.cycles,
                                      ladder.wall_s)
                for m in wanted
            }  # fmt: skip
        mf = ladder.mf
        try:
            mc, extra = self._casscf_point(mf, previous, level, settings)
        except Exception as exc:
            wall_s = time.perf_counter() - start
            return {
                m: PointResult.failed(m, error_line(exc), label, ladder.attempts, ladder.cycles,
                                      wall_s)
                for m in wanted
            }  # fmt: skip
        casscf_wall_s = time.perf_counter() - start
        cas = self.level.casscf_name

        def record(method, energy_hartree, step_wall_s, error=None, more=None):
            return PointResult(
                method=method,
                energy_hartree=math.nan if error else float(energy_hartree),
                converged=error is None,
                scf_cycles=ladder.cycles,
                wall_s=casscf_wall_s + (step_wall_s if method != cas else 0.0),
                step_wall_s=step_wall_s,
                s2=extra["s2"],
                reference=label,
                attempts=[dict(a) for a in ladder.attempts],
                error=error,
                extra={**extra["record"], **(more or {})},
            )

        energies = extra["state_energies_hartree"]
        records = {cas: record(cas, energies[0], casscf_wall_s - ladder.wall_s, extra["error"])}
        nevpt = level.name if level.method == "nevpt2" else None
        if nevpt in wanted:
            step_start = time.perf_counter()
            error, more = extra["error"], None
            energy = math.nan
            if error is None:
                try:
                    per_root = _nevpt2(mc, level, settings)
                    energy = per_root[0]
                    if level.states > 1:
                        more = {"nevpt2_state_energies_hartree": per_root}
                except Exception as exc:
                    error = error_line(exc)
            records[nevpt] = record(nevpt, energy, time.perf_counter() - step_start, error, more)
        return {m: records[m] for m in wanted}

    def _casscf_point(self, mf, previous, level, settings):
        from pyscf import mcscf
        from pyscf.fci import spin_op

        mol = mf.mol
        # The active space's size is chosen at every point (AVAS for AO labels), so a
        # point's number does not depend on where its walk started; the neighbour's
        # orbitals are the start whenever the size agrees with the neighbour's.
        ncas, nelecas, mo = _choose_active(mf, level)
        mc = _casscf(mf, ncas, nelecas, level, settings)
        if previous is not None and (previous.n_orbitals, previous.n_electrons) == (
            ncas,
            nelecas,
        ):
            mo = mcscf.project_init_guess(mc, previous.mo_coeff, previous.mol)
        mc.kernel(mo)
        occupations = natural_occupations(mc)
        ci = mc.ci if level.states == 1 else mc.ci[0]
        s2 = float(spin_op.spin_square0(ci, ncas, mc.nelecas)[0])
        overlap = None
        if previous is not None:
            overlap = 0.0  # another size: another active space
            if previous.n_electrons == nelecas:
                overlap = active_space_overlap(previous, mol, mc.mo_coeff, mc.ncore, ncas)
        step = None
        if previous is not None and len(previous.occupations) == len(occupations):
            step = float(np.max(np.abs(occupations - previous.occupations)))
        changed = bool(
            (overlap is not None and overlap < MIN_ACTIVE_OVERLAP)
            or (step is not None and step > MAX_OCCUPATION_STEP)
        )
        if level.states == 1:
            energies = [float(mc.e_tot)]
        else:
            energies = [float(e) for e in mc.e_states]
        active = {
            "n_electrons": int(nelecas),
            "n_orbitals": int(ncas),
            "natural_occupations": [round(float(n), 8) for n in occupations],
            "overlap_with_previous": overlap,
            "occupation_step": step,
        }
        record = {"active_space": active, "character_change": changed}
        if level.states > 1:
            record["state_energies_hartree"] = energies
            record["state_average_energy_hartree"] = float(mc.e_tot)
        error = None
        if not mc.converged:
            error = f"CASSCF did not converge in {CASSCF_MAX_MACRO} macro iterations"
        if error is None:
            self.state = ActiveState(
                mol=mol,
                mo_coeff=np.array(mc.mo_coeff),
                n_core=int(mc.ncore),
                n_orbitals=int(ncas),
                n_electrons=int(nelecas),
                occupations=occupations,
                density=np.array(mf.make_rdm1(), dtype=float),
            )
        return mc, {
            "record": record,
            "s2": s2,
            "state_energies_hartree": energies,
            "error": error,
        }

    def relax_from(self, start, constraints):
        raise EngineSetupError(
            f"{self.level.name} has no analytic gradients here; relaxed scans need hf, DFT, "
            "mp2 or ccsd"
        )


def _split(names):
    """Canonical method names (nevpt2 brings its casscf) and their common level."""
    from pesflow.engine import method_info

    if isinstance(names, str) or not names:
        raise EngineSetupError(f"methods must be a non-empty list of names, got {names!r}")
    levels = []
    for name in names:
        level = parse(method_info(name).name)
        if level is None:
            raise EngineSetupError(f"{name} is not a multireference method with an active space")
        levels.append(level)
    families = {lv.casscf_name for lv in levels}
    if len(families) > 1:
        raise EngineSetupError(f"methods of one walk must share one CASSCF: {sorted(families)}")
    level = next((lv for lv in levels if lv.method == "nevpt2"), levels[0])
    wanted = [lv.name for lv in levels]
    if level.method == "nevpt2" and level.casscf_name not in wanted:
        wanted.insert(wanted.index(level.name), level.casscf_name)
    return list(dict.fromkeys(wanted)), level
