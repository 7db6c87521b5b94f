"""Complete-basis-set (CBS) extrapolation of energies from correlation-consistent basis sets.

Pure functions on numbers; the points table applies them point by point to stored member
energies (:mod:`pesflow.tables.derived`).  The schemes, under their usual names:

* correlation energy, two-point inverse-cube formula (Helgaker, Klopper, Koch & Noga,
  J. Chem. Phys. 106, 9639 (1997)): ``E_corr(X) = E_corr(CBS) + A X**-3``, solved from the
  two largest cardinal numbers X > Y::

      E_corr(CBS) = (X**3 E_corr(X) - Y**3 E_corr(Y)) / (X**3 - Y**3)

* Hartree-Fock energy from two basis sets, the two-point formula of Karton & Martin
  (Theor. Chem. Acc. 115, 330 (2006)): ``E_HF(X) = E_HF(CBS) + A (X + 1) exp(-9 sqrt(X))``.
  It needs only the two basis sets the correlation part uses already (no third, larger
  calculation), and its exponential-of-square-root form follows the HF convergence of
  correlation-consistent sets better than an inverse power.
* Hartree-Fock energy from three basis sets of consecutive cardinal numbers, the
  exponential three-point formula of Feller (J. Chem. Phys. 96, 6104 (1992)):
  ``E_HF(X) = E_HF(CBS) + B exp(-C X)``, solved exactly::

      E_HF(CBS) = (E1 E3 - E2**2) / (E1 + E3 - 2 E2)

  It is defined only when the three energies decrease geometrically (0 < ratio < 1);
  otherwise the point is NaN and the derived point failed.

The formulas assume the systematic cardinal-number convergence of the correlation-consistent
families (cc-pVXZ, aug-cc-pVXZ, cc-pCVXZ, cc-pwCVXZ and their aug- forms); from small sets
(DZ, TZ) they are crude.

>>> round(correlation_cbs([3, 4], [-0.30, -0.32]), 6)
-0.334595
"""

from __future__ import annotations

import math
import re

#: Cardinal number of each letter of a correlation-consistent basis name.
CARDINALS = {"d": 2, "t": 3, "q": 4, "5": 5, "6": 6}

#: A correlation-consistent basis (PySCF spelling, lower case): the family prefix, the
#: cardinal letter, the suffix; e.g. ``aug-cc-pvtz`` -> (``aug-cc-pv``, ``t``, ``z``).
_CC = re.compile(r"^((?:aug-|d-aug-|jun-|may-|apr-)?cc-p(?:w?c)?v)([dtq56])(z(?:-dk)?)$")

#: The extrapolation schemes, by name, with their references (README and report read these).
SCHEMES = {
    "helgaker-x3": "correlation energy: two-point X^-3, Helgaker, Klopper, Koch & Noga, "
    "J. Chem. Phys. 106, 9639 (1997)",
    "karton-martin": "Hartree-Fock energy, two points: (X+1) exp(-9 sqrt(X)), Karton & "
    "Martin, Theor. Chem. Acc. 115, 330 (2006)",
    "feller-exp": "Hartree-Fock energy, three points: exp(-C X), Feller, J. Chem. Phys. 96, "
    "6104 (1992)",
}


def parse_cc_basis(basis: str) -> tuple[str, int] | None:
    """(family, cardinal number) of a correlation-consistent basis, or None.

    The family is the name with the cardinal letter replaced by ``x``.

    >>> parse_cc_basis("aug-cc-pVTZ")
    ('aug-cc-pvxz', 3)
    >>> parse_cc_basis("def2-tzvp") is None
    True
    """
    m = _CC.match(basis.strip().lower())
    if m is None:
        return None
    return f"{m.group(1)}x{m.group(3)}", CARDINALS[m.group(2)]


def cbs_basis_label(bases) -> str:
    """The basis part of a CBS level's label: the members in increasing cardinal number.

    Written out in full (no bracket shorthand such as ``cc-pV[TQ]Z``, which terminals and
    Markdown would read as markup).

    >>> cbs_basis_label(["cc-pVQZ", "cc-pvtz"])
    'cbs(cc-pvtz,cc-pvqz)'
    """
    names = sorted((b.strip().lower() for b in bases), key=lambda b: parse_cc_basis(b)[1])
    return f"cbs({','.join(names)})"


def correlation_cbs(cardinals, energies) -> float:
    """Helgaker two-point X^-3 correlation energy from the two largest cardinal numbers.

    ``cardinals`` and ``energies`` (hartree) are paired; with three members the smallest
    is not used.
    """
    (y, e_y), (x, e_x) = sorted(zip(cardinals, energies))[-2:]
    return (x**3 * e_x - y**3 * e_y) / (x**3 - y**3)


def _karton_martin_f(x: int) -> float:
    return (x + 1) * math.exp(-9.0 * math.sqrt(x))


def hf_cbs_two_point(cardinals, energies) -> float:
    """Karton-Martin two-point HF energy (hartree) from two (cardinal, energy) pairs."""
    (y, e_y), (x, e_x) = sorted(zip(cardinals, energies))
    a = (e_x - e_y) / (_karton_martin_f(x) - _karton_martin_f(y))
    return e_x - a * _karton_martin_f(x)


def hf_cbs_three_point(cardinals, energies) -> float:
    """Feller exponential three-point HF energy (hartree); NaN when not geometric."""
    (_, e1), (_, e2), (_, e3) = sorted(zip(cardinals, energies))
    d1, d2 = e1 - e2, e2 - e3
    if d1 == 0 or not 0 < d2 / d1 < 1:
        return math.nan
    return (e1 * e3 - e2**2) / (e1 + e3 - 2 * e2)


def hf_cbs(cardinals, energies) -> float:
    """The HF CBS energy: Karton-Martin for two members, Feller for three."""
    if len(cardinals) == 2:
        return hf_cbs_two_point(cardinals, energies)
    return hf_cbs_three_point(cardinals, energies)


def schemes_used(method: str, n_members: int) -> tuple[str, ...]:
    """Names (keys of :data:`SCHEMES`) of the schemes a CBS level of ``method`` uses."""
    hf = "karton-martin" if n_members == 2 else "feller-exp"
    return (hf,) if method == "hf" else (hf, "helgaker-x3")


def cbs_energy(method: str, cardinals, hf_energies, total_energies=None) -> dict:
    """The CBS total energy of one point and its parts (hartree).

    Inputs: ``cardinals`` of the members; ``hf_energies`` their HF energies;
    ``total_energies`` their energies at ``method`` (None for ``method == "hf"``).
    Returns ``{"energy_hartree", "hf_cbs_hartree", "correlation_cbs_hartree"}``.
    """
    e_hf = hf_cbs(cardinals, hf_energies)
    if method == "hf":
        return {"energy_hartree": e_hf, "hf_cbs_hartree": e_hf, "correlation_cbs_hartree": 0.0}
    corr = [t - h for t, h in zip(total_energies, hf_energies)]
    e_corr = correlation_cbs(cardinals, corr)
    return {
        "energy_hartree": e_hf + e_corr,
        "hf_cbs_hartree": e_hf,
        "correlation_cbs_hartree": e_corr,
    }
