"""The registry of flags: every warning and note the analysis can raise, defined once.

A flag is data, not a sentence to be parsed: a :class:`Flag` has a ``code`` from
:data:`FLAG_KINDS`, the positions on the scan coordinate it concerns, and a message for a
person.  Its registry entry (:class:`FlagKind`) gives the severity, a short title, the summary
columns whose numbers it puts in doubt (None: the whole curve), and the advice that fits its
cause.  The report groups flags by code and attaches each to the numbers it concerns; the
wording of a message can change without breaking anything.

A :class:`Flag` is a ``str`` (its message), so it prints, joins and compares like the text it
carries.

>>> f = Flag("one-dimensional-wavenumber", "1-D wavenumber along the scan coordinate")
>>> f.code, f.severity, sorted(f.concerns)
('one-dimensional-wavenumber', 'note', ['omega_1d_cm-1'])
>>> flags_from_records(flag_records([f])) == [f]
True
"""

from __future__ import annotations

import json
from dataclasses import dataclass

#: Severities, from least to most serious.
SEVERITIES = ("note", "warning")

_D = ("d_e_ev", "d_0_ev")
_STATE = ("t_v_ev", "t_e_ev", "t_e_cm-1")
_BARRIER = ("barrier_kcal_mol", "barrier_kj_mol", "barrier_cm-1", "barrier_ev")


@dataclass(frozen=True)
class FlagKind:
    """One kind of flag.

    Attributes:
        code: short identifier (``"noisy-points"``), stable across releases.
        severity: ``"note"`` (context a reader should know) or ``"warning"`` (a number may be
            wrong or missing).
        title: a few words for the report's list of notes.
        concerns: the summary columns whose values it puts in doubt; None for the whole curve.
    """

    code: str
    severity: str
    title: str
    concerns: tuple[str, ...] | None = None


#: Every flag kind, by code.
FLAG_KINDS: dict[str, FlagKind] = {
    k.code: k
    for k in (
        FlagKind("analysis-failed", "warning", "curve could not be analysed"),
        FlagKind("failed-points", "warning", "failed points excluded"),
        FlagKind("repeated-points", "note", "repeated coordinates"),
        FlagKind("minimum-not-bracketed", "warning", "minimum not bracketed"),
        FlagKind("no-minimum", "warning", "no minimum found"),
        FlagKind("grid-coarse", "note", "grid too coarse"),
        FlagKind("noisy-points", "warning", "noisy energies"),
        FlagKind("spin-contamination-onset", "note", "spin-contamination onset",
                 ("omega_e_x_e_cm-1", "morse_d_e_ev", "nu_01_cm-1", "zpe_cm-1", *_D)),
        FlagKind("scf-solution-change", "warning", "change of SCF solution"),
        FlagKind("active-space-change", "warning", "change of active space"),
        FlagKind("dissociation-reference", "note", "what D_e is measured against", _D),
        FlagKind("inconsistent-active-space", "warning", "fragments' active spaces differ",
                 _D),
        FlagKind("dft-grid-noise", "warning", "DFT integration-grid noise"),
        FlagKind("morse-fit-failed", "note", "Morse fit did not converge",
                 ("omega_e_x_e_cm-1", "morse_d_e_ev")),
        FlagKind("few-vibrational-levels", "note", "scan range too short for levels",
                 ("nu_01_cm-1", "zpe_cm-1", "d_0_ev")),
        FlagKind("anharmonicity-from-morse", "note", "ω_e x_e from the Morse fit",
                 ("omega_e_x_e_cm-1", "morse_d_e_ev")),
        FlagKind("one-dimensional-wavenumber", "note", "1-D wavenumber",
                 ("omega_1d_cm-1",)),
        FlagKind("asymptote-not-reached", "warning", "curve not flat at its end", _D),
        FlagKind("fragments-not-reached", "warning", "asymptote misses the fragments", _D),
        FlagKind("restricted-dissociation", "warning", "restricted reference at dissociation",
                 _D),
        FlagKind("path-not-saddle", "note", "path maximum is not a saddle", _BARRIER),
        FlagKind("path-not-converged", "warning", "minimum-energy path did not converge",
                 _BARRIER),
        FlagKind("incomplete-curve", "note", "value from an incomplete curve"),
        FlagKind("state-crossing", "note", "electronic states cross"),
        FlagKind("avoided-crossing", "note", "avoided crossing of electronic states"),
        FlagKind("state-following-gap", "warning", "states not followed across a step",
                 _STATE),
        # Names the quantities in its message; attached to no single value.
        FlagKind("deviation-within-uncertainty", "note",
                 "deviation from the reference level within the uncertainty", ()),
    )
}  # fmt: skip


class Flag(str):
    """A flag: its message as a string, with ``code`` and the ``positions`` it concerns.

    Inputs:
        code: a key of :data:`FLAG_KINDS` (ValueError otherwise).
        message: the sentence a person reads, with the advice that fits.
        positions: scan-coordinate values (unit of the curve) the flag concerns; may be empty.
    """

    code: str
    positions: tuple[float, ...]

    def __new__(cls, code: str, message: str, positions=()):
        if code not in FLAG_KINDS:
            raise ValueError(f"unknown flag code {code!r}; allowed: {', '.join(FLAG_KINDS)}")
        obj = super().__new__(cls, message)
        obj.code = code
        obj.positions = tuple(float(p) for p in positions)
        return obj

    def __getnewargs__(self):
        return (self.code, str(self), self.positions)

    @property
    def kind(self) -> FlagKind:
        return FLAG_KINDS[self.code]

    @property
    def severity(self) -> str:
        return self.kind.severity

    @property
    def concerns(self) -> frozenset[str] | None:
        """The summary columns it puts in doubt, or None for the whole curve."""
        c = self.kind.concerns
        return None if c is None else frozenset(c)

    def to_dict(self) -> dict:
        return {
            "code": self.code,
            "severity": self.severity,
            "message": str(self),
            "positions": list(self.positions),
        }


def flag_records(flags) -> str:
    """The flags of a summary row as JSON text (the ``flag_records`` column): a list of
    ``{"code", "severity", "message", "positions"}``, duplicates removed, order kept."""
    unique = list(dict.fromkeys(flags))
    return json.dumps([f.to_dict() for f in unique], ensure_ascii=False)


def flags_from_records(text) -> list[Flag]:
    """The :class:`Flag` objects of a ``flag_records`` cell (empty for NaN or empty text)."""
    if not isinstance(text, str) or not text.strip():
        return []
    return [Flag(d["code"], d["message"], d.get("positions", ())) for d in json.loads(text)]


#: Joins the messages of one row in the human-readable ``flags`` column.
FLAG_SEPARATOR = " | "


def flag_text(flags) -> str:
    """The human-readable ``flags`` cell: the messages joined with :data:`FLAG_SEPARATOR`."""
    return FLAG_SEPARATOR.join(dict.fromkeys(str(f) for f in flags))
