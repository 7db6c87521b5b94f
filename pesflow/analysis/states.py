"""Electronic states along a walk: following by character, crossings, excitation energies.

Pure functions on arrays.  A multi-state level gives, at every point of a walk, its
states in order of energy (adiabatic: index 0 the ground state, 1..n the excited states)
and, for the excited states, the overlaps |O_kl| of each state's excitation with each
excited state of the walk's previous point (:mod:`pesflow.engine.pyscf.excited`).

* :func:`follow_states` numbers the states by character instead: curve c is the state
  that was c-th by energy at the walk's first point, carried from point to point by the
  largest overlaps (an assignment, so that no two curves take one state).  A curve
  followed this way keeps its character through an avoided crossing, where the
  energy-ordered curves swap characters.
* :func:`find_crossings` locates where two states exchange their order in energy
  between neighbours (a swap of the assignment), interpolates the position and says
  whether they cross (their characters pass through each other unmixed: the
  overlaps across the step stay near 1) or avoid each other (the characters mix).
* :func:`excitation_energies` gives the vertical excitation energy at the ground-state
  minimum and the adiabatic T_e from the minima.

>>> import numpy as np
>>> overlaps = [None, np.array([[0.1, 0.95], [0.97, 0.1]])]
>>> follow_states(overlaps, 2).assignment.tolist()
[[1, 2], [2, 1]]
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import linear_sum_assignment

from pesflow.units import HARTREE_TO_EV

#: Below this overlap a link between neighbours does not say which state is which
#: (common practice: a state followed over a small step keeps |O| above 0.5).
MIN_FOLLOW_OVERLAP = 0.5
#: Two states swapping order count as crossing (no mixing) when every overlap they are
#: matched by across the step is above this, and as an avoided crossing otherwise.
UNMIXED_OVERLAP = 0.9
#: States closer than this (hartree) count as one degenerate set (e.g. the two
#: components of a Pi state): their members are told apart by no overlap, so a link is
#: judged by the overlap with the whole set and they never "cross" each other.
DEGENERATE_HARTREE = 1e-5


def _group_overlap(o, row, col, energies):
    """|O| of previous state ``row`` with the degenerate set of current state ``col``."""
    if energies is None:
        return o[row, col]
    members = np.abs(energies - energies[col]) < DEGENERATE_HARTREE
    return float(np.sqrt(np.sum(o[row, members] ** 2)))


@dataclass
class Following:
    """States followed by character along a walk.

    Fields:
        assignment: (m, n) integers: at point i, the adiabatic index (1..n) of curve c
            (curve c + 1 is the state c + 1 by energy at the first point).
        matched: (m, n) the overlap curve c was carried by into point i (nan at point 0
            and where no overlap was stored).
        gaps: indices i of the points whose link to point i - 1 is missing (no overlap
            stored, or for another neighbour) or weak (a matched overlap below
            :data:`MIN_FOLLOW_OVERLAP`); there the states keep their energy order.
    """

    assignment: np.ndarray
    matched: np.ndarray
    gaps: list[int]


def follow_states(overlaps, n_states: int, energies_hartree=None) -> Following:
    """Follow ``n_states`` excited states by the overlaps between neighbours.

    Inputs:
        overlaps: per point of the walk in walk order, None or an (n, n) array |O_kl|
            between excited state k of the previous point (rows) and state l of this
            one (columns), both in order of energy (0-based over the excited states).
        n_states: n, the number of excited states.
        energies_hartree: optional (m, n + 1) energies by energy order (column 0 the
            ground state): members of a degenerate set are then judged together.

    Returns a :class:`Following`; where a link is missing or weak the states are taken
    in energy order at that point (a gap).
    """
    m = len(overlaps)
    assignment = np.zeros((m, n_states), dtype=int)
    matched = np.full((m, n_states), np.nan)
    gaps = []
    if m:
        assignment[0] = np.arange(1, n_states + 1)
    for i in range(1, m):
        o = overlaps[i]
        if o is None or np.shape(o) != (n_states, n_states) or not np.all(np.isfinite(o)):
            assignment[i] = np.arange(1, n_states + 1)
            gaps.append(i)
            continue
        o = np.abs(np.asarray(o, dtype=float))
        rows, cols = linear_sum_assignment(-(o**2))
        step = dict(zip(rows, cols))  # previous adiabatic (0-based) -> this one
        prev = assignment[i - 1] - 1
        assignment[i] = [step[p] + 1 for p in prev]
        current = None if energies_hartree is None else np.asarray(energies_hartree)[i, 1:]
        matched[i] = [_group_overlap(o, p, step[p], current) for p in prev]
        if np.min(matched[i]) < MIN_FOLLOW_OVERLAP:
            gaps.append(i)
    return Following(assignment, matched, gaps)


@dataclass(frozen=True)
class Crossing:
    """Two states exchanging their order in energy between two neighbouring points.

    Fields:
        kind: ``"crossing"`` (the characters pass through unmixed) or ``"avoided"``.
        states: the two curves (followed numbering, 1-based).
        position: the interpolated coordinate where the followed curves meet.
        between: the two scanned coordinates bracketing it.
        gap_ev: the smaller adiabatic gap of the two bracketing points (an upper bound
            of the gap at the crossing), eV.
    """

    kind: str
    states: tuple[int, int]
    position: float
    between: tuple[float, float]
    gap_ev: float


def find_crossings(values, energies_hartree, following: Following, overlaps) -> list[Crossing]:
    """Crossings and avoided crossings between the followed excited states.

    Inputs:
        values: (m,) scan coordinates in walk order.
        energies_hartree: (m, n + 1) energies in order of energy (column 0 the ground
            state); NaN for a failed state.
        following: :func:`follow_states` of the same walk.
        overlaps: the same per-point overlaps.

    A crossing is counted between points i - 1 and i where two curves' energy order
    swaps.  Its position is where the straight lines through the two curves' energies
    meet; its kind: ``crossing`` when each of the two curves was carried across the
    step by an overlap above :data:`UNMIXED_OVERLAP` and the two are not mixed (their
    cross overlaps below 1 - that), else ``avoided``.  A step of the grid wider than
    an avoided crossing's mixing region can make it look like a crossing; the gap
    given is then an upper bound.
    """
    q = np.asarray(values, dtype=float)
    e = np.asarray(energies_hartree, dtype=float)
    assign = following.assignment
    out = []
    n = assign.shape[1]
    for i in range(1, len(q)):
        if i in following.gaps:
            continue
        seen = set()  # a crossing with a degenerate set is one crossing, not one per member
        for a in range(n):
            for b in range(a + 1, n):
                ia0, ib0 = assign[i - 1, a], assign[i - 1, b]
                sets = tuple(_degenerate_set(e[i - 1, 1:], k - 1) for k in (ia0, ib0))
                if sets in seen:
                    continue
                ia1, ib1 = assign[i, a], assign[i, b]
                if (ia0 - ib0) * (ia1 - ib1) > 0:
                    continue
                d0 = e[i - 1, ia0] - e[i - 1, ib0]
                d1 = e[i, ia1] - e[i, ib1]
                if not (np.isfinite(d0) and np.isfinite(d1)) or d0 == d1:
                    continue
                if max(abs(d0), abs(d1)) < DEGENERATE_HARTREE:
                    continue  # one degenerate set throughout
                t = min(max(d0 / (d0 - d1), 0.0), 1.0)
                position = float(q[i - 1] + t * (q[i] - q[i - 1]))
                o = np.abs(np.asarray(overlaps[i], dtype=float))
                carried = min(following.matched[i, a], following.matched[i, b])
                mixed = max(o[ia0 - 1, ib1 - 1], o[ib0 - 1, ia1 - 1])
                unmixed = carried > UNMIXED_OVERLAP and mixed < 1 - UNMIXED_OVERLAP
                seen.add(sets)
                gap = min(abs(d0), abs(d1)) * HARTREE_TO_EV
                out.append(
                    Crossing(
                        "crossing" if unmixed else "avoided",
                        (a + 1, b + 1),
                        position,
                        (float(q[i - 1]), float(q[i])),
                        float(gap),
                    )
                )
    return out


def _degenerate_set(energies, k) -> int:
    # The lowest index of the degenerate set of state k (0-based) at one point.
    if not np.isfinite(energies[k]):
        return k
    return int(np.flatnonzero(np.abs(energies - energies[k]) < DEGENERATE_HARTREE)[0])


def followed_energies(energies_hartree, following: Following) -> np.ndarray:
    """(m, n + 1) energies by followed curve (column 0 the ground state).

    >>> e = np.array([[0.0, 1.0, 2.0], [0.0, 1.5, 1.6]])
    >>> f = Following(np.array([[1, 2], [2, 1]]), np.full((2, 2), np.nan), [])
    >>> followed_energies(e, f)[1].tolist()
    [0.0, 1.6, 1.5]
    """
    e = np.asarray(energies_hartree, dtype=float)
    rows = np.arange(len(e))[:, None]
    return np.concatenate([e[:, :1], e[rows, following.assignment]], axis=1)


def excitation_energies(
    values, ground_hartree, state_hartree, ground_minimum, state_minimum
) -> dict:
    """Vertical and adiabatic excitation energies of one state.

    Inputs:
        values: (m,) scan coordinates; ``ground_hartree``, ``state_hartree``: (m,)
            energies of the ground state and the state (NaN where failed).
        ground_minimum: (position, energy hartree) of the ground state's bracketed
            minimum, or None; ``state_minimum`` likewise for the state.

    Returns ``t_v_ev``, the vertical excitation at the ground-state minimum (the
    state's energy there by cubic interpolation of its points, minus the ground
    state's minimum energy), and ``t_e_ev``/``t_e_cm-1``, the adiabatic excitation
    energy T_e between the two minima (NaN without both).

    >>> q = np.linspace(1.0, 2.0, 11)
    >>> g, s = (q - 1.5) ** 2, 0.2 + (q - 1.6) ** 2
    >>> out = excitation_energies(q, g, s, (1.5, 0.0), (1.6, 0.2))
    >>> round(out["t_v_ev"] / 27.211386, 6), round(out["t_e_ev"] / 27.211386, 6)
    (0.21, 0.2)
    """
    from scipy.interpolate import CubicSpline

    from pesflow.units import HARTREE_TO_CM1

    out = {"t_v_ev": np.nan, "t_e_ev": np.nan, "t_e_cm-1": np.nan}
    if ground_minimum is None:
        return out
    q = np.asarray(values, dtype=float)
    s = np.asarray(state_hartree, dtype=float)
    ok = np.isfinite(s)
    order = np.argsort(q[ok])
    qs, es = q[ok][order], s[ok][order]
    r0, e0 = ground_minimum
    if len(qs) >= 4 and qs[0] <= r0 <= qs[-1]:
        out["t_v_ev"] = float((CubicSpline(qs, es)(r0) - e0) * HARTREE_TO_EV)
    if state_minimum is not None:
        t_e = state_minimum[1] - e0
        out["t_e_ev"] = float(t_e * HARTREE_TO_EV)
        out["t_e_cm-1"] = float(t_e * HARTREE_TO_CM1)
    return out
