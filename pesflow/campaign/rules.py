"""Scan coordinates chosen by rule: which atoms of a molecule each rule picks.

A rule turns one molecule (an RDKit molecule with every hydrogen explicit, atoms in the
molecule's order) into a list of 0-based atom tuples, one per coordinate, in the order a
chemist writes them, with the side of the *last* atom being the one that moves:

``rotatable-torsions`` (dihedral)
    Every rotatable bond j-k, where *rotatable* means: a single bond, not in a ring,
    neither end triple-bonded (a linear end has no torsion), neither end terminal
    (RDKit's rotatable-bond SMARTS ``[!$(*#*)&!D1]-&!@[!$(*#*)&!D1]`` on the molecule
    with explicit hydrogens).  A bond one of whose ends is a *symmetric top* (its other
    neighbours are three terminal atoms of one element: CH3, CF3, NH3+) is left out unless
    ``methyl_rotors`` is set: turning it gives a threefold curve that repeats every 120
    degree and says little about conformations, and a survey with every methyl rotor is
    mostly methyl rotors.  Hydroxyl, amino, thiol and amide rotors stay in: their
    profiles are the conformational questions chemists ask (gauche/trans of an alcohol,
    cis/trans of an amide).  The torsion is i-j-k-l with j < k (atom numbers), i the
    heaviest other neighbour of j and l the heaviest other neighbour of k, ties going to
    the lowest atom number; the side of l moves.
``bonds-to-hydrogen`` (distance)
    Every bond X-H, written heavy atom first (the hydrogen moves); H-H as lower, higher.
``smarts`` (any kind)
    Every match of a SMARTS pattern with as many atoms as the coordinate needs, in the
    pattern's atom order (RDKit's unique matches: one per set of atoms).
``angles-at`` (angle)
    For every match of the pattern's first atom (the vertex), the angle between its two
    heaviest neighbours (ties to the lowest atom number), heavier arm first.

>>> from pesflow.campaign.molecules import embed_smiles
>>> rdmol, _ = embed_smiles("CCCC")
>>> [coordinate_name(rdmol, t) for t in expand_rule(rdmol, "rotatable-torsions")]
['C1-C2-C3-C4']
"""

from __future__ import annotations

#: Each rule and the coordinate kind(s) it makes.
RULES: dict[str, tuple[str, ...]] = {
    "rotatable-torsions": ("dihedral",),
    "bonds-to-hydrogen": ("distance",),
    "smarts": ("distance", "angle", "dihedral"),
    "angles-at": ("angle",),
}

#: Rules that need a SMARTS pattern.
NEEDS_SMARTS = ("smarts", "angles-at")

#: RDKit's rotatable-bond pattern, applied with explicit hydrogens.
ROTATABLE_BOND_SMARTS = "[!$(*#*)&!D1]-&!@[!$(*#*)&!D1]"


def coordinate_name(rdmol, atoms) -> str:
    """The readable name of a coordinate: element symbols with 1-based atom numbers.

    >>> from rdkit import Chem
    >>> coordinate_name(Chem.AddHs(Chem.MolFromSmiles("CO")), (0, 1, 5))
    'C1-O2-H6'
    """
    return "-".join(f"{rdmol.GetAtomWithIdx(int(a)).GetSymbol()}{int(a) + 1}" for a in atoms)


def _heaviest(atom, exclude) -> int | None:
    """Index of ``atom``'s heaviest neighbour not in ``exclude`` (lowest index on ties)."""
    choices = [n for n in atom.GetNeighbors() if n.GetIdx() not in exclude]
    if not choices:
        return None
    return min(choices, key=lambda n: (-n.GetAtomicNum(), n.GetIdx())).GetIdx()


def _symmetric_top(atom, partner) -> bool:
    """True when ``atom``'s neighbours other than ``partner`` are three terminal atoms of
    one element (CH3, CF3, NH3+)."""
    others = [n for n in atom.GetNeighbors() if n.GetIdx() != partner]
    return (
        len(others) == 3
        and all(n.GetDegree() == 1 for n in others)
        and len({n.GetAtomicNum() for n in others}) == 1
    )


def _pattern(smarts):
    from rdkit import Chem

    pattern = Chem.MolFromSmarts(smarts)
    if pattern is None:
        raise ValueError(f"RDKit cannot read the SMARTS pattern {smarts!r}")
    return pattern


def check_smarts(rule: str, kind: str, smarts: str) -> str | None:
    """Why ``smarts`` cannot serve ``rule`` for a coordinate of ``kind``, or None."""
    from pesflow.coordinates.kinds import KINDS

    try:
        pattern = _pattern(smarts)
    except ValueError as exc:
        return str(exc)
    need = KINDS[kind].n_atoms if rule == "smarts" else 1
    if rule == "smarts" and pattern.GetNumAtoms() != need:
        return f"a {kind} takes {need} atoms but the pattern {smarts!r} has {pattern.GetNumAtoms()}"
    return None


def expand_rule(rdmol, rule: str, *, smarts: str | None = None, methyl_rotors=False):
    """The coordinates ``rule`` picks in ``rdmol``: a list of 0-based atom tuples, in
    atom-number order (see the module docstring for each rule's definition)."""
    found = []
    if rule == "rotatable-torsions":
        for j, k in rdmol.GetSubstructMatches(_pattern(ROTATABLE_BOND_SMARTS)):
            j, k = sorted((j, k))
            aj, ak = rdmol.GetAtomWithIdx(j), rdmol.GetAtomWithIdx(k)
            if not methyl_rotors and (_symmetric_top(aj, k) or _symmetric_top(ak, j)):
                continue
            i, m = _heaviest(aj, {k}), _heaviest(ak, {j})
            found.append((i, j, k, m))
    elif rule == "bonds-to-hydrogen":
        for bond in rdmol.GetBonds():
            a, b = bond.GetBeginAtom(), bond.GetEndAtom()
            if 1 not in (a.GetAtomicNum(), b.GetAtomicNum()):
                continue
            if a.GetAtomicNum() == 1 and b.GetAtomicNum() == 1:
                found.append(tuple(sorted((a.GetIdx(), b.GetIdx()))))
            else:
                heavy, h = (a, b) if b.GetAtomicNum() == 1 else (b, a)
                found.append((heavy.GetIdx(), h.GetIdx()))
    elif rule == "smarts":
        found = [tuple(m) for m in rdmol.GetSubstructMatches(_pattern(smarts), maxMatches=100000)]
    elif rule == "angles-at":
        vertices = sorted({m[0] for m in rdmol.GetSubstructMatches(_pattern(smarts))})
        for v in vertices:
            atom = rdmol.GetAtomWithIdx(v)
            first = _heaviest(atom, set())
            second = _heaviest(atom, {first}) if first is not None else None
            if second is not None:
                found.append((first, v, second))
    else:
        raise ValueError(f"unknown rule {rule!r}; allowed: {', '.join(RULES)}")
    return sorted(set(found), key=lambda t: t[1:3] if len(t) == 4 else t)
