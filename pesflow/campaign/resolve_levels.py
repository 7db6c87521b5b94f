"""Level resolution, the third step of :func:`~pesflow.campaign.resolve.load_campaign`:
the campaign's and each scan's levels of theory checked against the engines (methods,
level options, basis sets per element, with did-you-mean hints), CBS levels expanded into
their members, the reference level and the reference values checked."""

from __future__ import annotations

import functools

from pesflow.campaign.resolved import Level
from pesflow.campaign.spec import CampaignSpec, did_you_mean
from pesflow.errors import EngineSetupError


def _resolve_level_list(lspecs, loc, elements, err, checked) -> list[Level]:
    levels = []
    auto = set()  # members added for a CBS level: listing them again is no repeat
    for i, lspec in enumerate(lspecs):
        if lspec.extrapolate is not None:
            for member in _cbs_members(lspec, loc + (i,), err):
                level = _resolve_pair(*member, loc + (i,), elements, err, checked)
                if level not in levels:
                    levels.append(level)
                    auto.add(level)
            for derived in _cbs_levels(lspec, levels):
                if derived in levels:
                    raise err(loc + (i,), f"level {derived.label} is listed twice")
                levels.append(derived)
            continue
        for method, basis in lspec.pairs():
            level = _resolve_pair(
                method, basis, loc + (i,), elements, err, checked, lspec.options()
            )
            if level in auto:
                auto.discard(level)
                continue
            if level in levels:
                raise err(loc + (i,), f"level {level.label} is listed twice")
            levels.append(level)
    return levels


def _resolve_pair(method, basis, loc, elements, err, checked, options=None) -> Level:
    """One computed level, its method (with its level options folded into its name)
    and basis checked against the engines."""
    from pesflow import engine

    options = options or {}
    try:
        info = engine.method_info(method)
    except EngineSetupError as exc:
        hint = did_you_mean(str(method).strip().lower(), _method_names())
        raise err(loc + ("method",), _with_hint(str(exc), hint)) from None
    if options or info.options:
        try:
            info = engine.method_info(engine.level_method(info.name, options))
        except EngineSetupError as exc:
            given = [k for k in options if k not in info.options]
            named = [k for k in options if k in str(exc)]
            where = (given or named or [*options, "method"])[0]
            raise err(loc + (where,), str(exc)) from None
    where = loc + ("basis",) if basis is not None else loc
    basis_c = ""
    for element in elements:
        if (info.name, basis, element) not in checked:
            try:
                _, basis_c = engine.check_level(info.name, basis, [element])
                checked[(info.name, basis, element)] = (basis_c, None)
            except EngineSetupError as exc:
                hint = _basis_hint(basis.strip().lower()) if basis else ""
                checked[(info.name, basis, element)] = (None, str(exc) + hint)
        basis_c, problem = checked[(info.name, basis, element)]
        if problem is not None:
            raise err(where, problem)
    if not elements:
        basis_c = "" if basis is None else basis.strip().lower()
    return Level(info.name, basis_c)


#: Methods a CBS level can extrapolate: HF alone, or a correlated method on an HF reference.
CBS_METHODS = ("hf", "mp2", "ccsd", "ccsd(t)")


def _cbs_members(lspec, loc, err) -> list[tuple[str, str]]:
    """The (method, basis) pairs a CBS level spec needs computed; checks the spec."""
    from pesflow.analysis.cbs import parse_cc_basis

    methods = [lspec.method] if isinstance(lspec.method, str) else list(lspec.method)
    bases = (
        []
        if lspec.basis is None
        else [lspec.basis]
        if isinstance(lspec.basis, str)
        else list(lspec.basis)
    )
    for j, method in enumerate(methods):
        name = "".join(str(method).strip().lower().split())
        if name not in CBS_METHODS:
            where = loc + ("method",) if isinstance(lspec.method, str) else loc + ("method", j)
            raise err(
                where,
                f"extrapolate: cbs needs hf or a correlated wavefunction method; got "
                f"'{method}'; allowed: {', '.join(CBS_METHODS)}",
            )
    if not 2 <= len(bases) <= 3:
        raise err(
            loc + ("basis",),
            f"extrapolate: cbs needs a list of 2 or 3 basis sets of one correlation-consistent "
            f"family (got {len(bases)}), e.g. [cc-pvtz, cc-pvqz]",
        )
    parsed = []
    for j, basis in enumerate(bases):
        p = parse_cc_basis(basis)
        if p is None:
            raise err(
                loc + ("basis", j),
                f"extrapolate: cbs needs correlation-consistent basis sets; '{basis}' is not one; "
                "allowed: cc-pvXz, aug-cc-pvXz, cc-pcvXz, cc-pwcvXz and their aug- forms, "
                "X = d, t, q, 5, 6",
            )
        parsed.append(p)
    families = list(dict.fromkeys(f for f, _ in parsed))
    if len(families) > 1:
        raise err(
            loc + ("basis",),
            f"extrapolate: cbs needs basis sets of one family; got {' and '.join(families)} "
            "(the formulas assume one family's convergence)",
        )
    cardinals = sorted(x for _, x in parsed)
    if len(set(cardinals)) != len(cardinals):
        raise err(
            loc + ("basis",), "extrapolate: cbs needs basis sets of different cardinal numbers"
        )
    if len(cardinals) == 3 and cardinals[2] - cardinals[0] != 2:
        raise err(
            loc + ("basis",),
            "extrapolate: cbs with 3 basis sets needs consecutive cardinal numbers (e.g. "
            "dz, tz, qz; Feller's three-point formula)",
        )
    pairs = []
    for method in methods:
        pairs += [(method, b) for b in bases]
        if "".join(str(method).strip().lower().split()) != "hf":
            pairs += [("hf", b) for b in bases]
    return pairs


def _cbs_levels(lspec, levels) -> list[Level]:
    """The derived CBS levels of a spec whose members are resolved in ``levels``."""
    from pesflow.analysis.cbs import cbs_basis_label

    methods = [lspec.method] if isinstance(lspec.method, str) else list(lspec.method)
    bases = [b.strip().lower() for b in lspec.basis]
    out = []
    for method in methods:
        name = "".join(str(method).strip().lower().split())
        want = {(name, b) for b in bases} | ({("hf", b) for b in bases} if name != "hf" else set())
        members = tuple(lvl for lvl in levels if (lvl.method, lvl.basis) in want)
        out.append(Level(name, cbs_basis_label(bases), members=members))
    return out


def _with_hint(message: str, hint: str) -> str:
    """``message`` with a did-you-mean ``hint`` placed before its list of what is allowed."""
    if not hint:
        return message
    for sep in ("; allowed", ": use one of"):
        if sep in message:
            head, tail = message.split(sep, 1)
            return f"{head}{hint}{sep}{tail}"
    return message + hint


@functools.lru_cache(maxsize=1)
def _method_names() -> tuple[str, ...]:
    """Method names to suggest from: the wavefunction methods and libxc's functionals."""
    from pyscf.dft import libxc

    from pesflow.engine import (
        MULTIREFERENCE_METHODS,
        TIGHT_BINDING_METHODS,
        WAVEFUNCTION_METHODS,
    )

    names = {*WAVEFUNCTION_METHODS, *TIGHT_BINDING_METHODS, *MULTIREFERENCE_METHODS}
    names |= {k.lower() for k in libxc.XC_ALIAS}
    names |= {k.lower() for k in libxc.XC_CODES}
    return tuple(sorted(names))


def _basis_hint(basis: str) -> str:
    """Did-you-mean for a basis name, among PySCF's library names (written as PySCF
    normalises them: lower case without '-', '_' or spaces, which it accepts as given)."""
    from pyscf.gto import basis as pyscf_basis

    normalised = basis.lower().replace("-", "").replace("_", "").replace(" ", "")
    if normalised in pyscf_basis.ALIAS:  # a known basis that lacks an element: no guess
        return ""
    return did_you_mean(normalised, pyscf_basis.ALIAS)


#: What a counterpoise or a relaxed scan needs of each computed level: the scan's field, the
#: :class:`~pesflow.engine.base.MethodInfo` field, and the reason when the method lacks it.
_SCAN_NEEDS = (
    (
        "counterpoise",
        "needs_basis",
        "counterpoise needs levels with basis sets; {method} has a built-in basis (no ghost atoms)",
    ),
    (
        "relax",
        "has_gradients",
        "a relaxed scan needs analytic gradients; {method} has none here (allowed: hf, DFT "
        "functionals, mp2, ccsd, gfn2-xtb, gfn1-xtb)",
    ),
)


def _resolve_levels(spec: CampaignSpec, molecules, scans, err) -> list[Level]:
    """Resolve the campaign's and each scan's levels; return their union in order."""
    checked_basis = {}

    def elements_of(names):
        return sorted({s for m in names for s in molecules[m].symbols})

    default_users = [
        m for sc in scans.values() if spec.scans[sc.source].levels is None for m in sc.molecules
    ]
    campaign_levels = _resolve_level_list(
        spec.levels, ("levels",), elements_of(default_users), err, checked_basis
    )
    union = list(campaign_levels)
    for scan in scans.values():
        own = spec.scans[scan.source].levels
        if own is None:
            if not campaign_levels:
                raise err(
                    ("scans", scan.source),
                    "no levels of theory: give levels at the top of the campaign or in this scan",
                )
            scan.levels = list(campaign_levels)
        else:
            scan.levels = _resolve_level_list(
                own,
                ("scans", scan.source, "levels"),
                elements_of(scan.molecules),
                err,
                checked_basis,
            )
        for needed_by, capability, reason in _SCAN_NEEDS:
            if not getattr(scan, needed_by):
                continue
            from pesflow.engine import method_info

            for lvl in scan.levels:
                if not lvl.members and not getattr(method_info(lvl.method), capability):
                    where = ("scans", scan.source, "levels") if own is not None else ("levels",)
                    raise err(where, reason.format(method=lvl.method))
        union += [lvl for lvl in scan.levels if lvl not in union]
    _check_reference_values(spec, err)
    ref = spec.compare.reference_level
    if ref is not None:
        labels = [lvl.label for lvl in union]
        if ref.strip().lower() not in labels:
            raise err(
                ("compare", "reference_level"),
                f"'{ref}' is not one of the levels{did_you_mean(ref.strip().lower(), labels)}; "
                f"allowed: {', '.join(labels)}",
            )
    return union


def _check_reference_values(spec: CampaignSpec, err) -> None:
    if not spec.compare.reference_values:
        return  # (the summary module is heavy to import; only load it when needed)
    from pesflow.analysis.quantities import COMPARED

    for i, ref in enumerate(spec.compare.reference_values):
        loc = ("compare", "reference_values", i)
        if ref.molecule not in spec.molecules:
            raise err(
                loc + ("molecule",),
                f"molecule '{ref.molecule}' is not defined"
                f"{did_you_mean(ref.molecule, spec.molecules)}; "
                f"defined: {', '.join(sorted(spec.molecules))}",
            )
        scan = spec.scans.get(ref.scan)
        if scan is None:
            raise err(
                loc + ("scan",),
                f"scan '{ref.scan}' is not defined{did_you_mean(ref.scan, spec.scans)}; "
                f"defined: {', '.join(sorted(spec.scans))}",
            )
        if ref.molecule not in scan.molecules:
            raise err(
                loc + ("scan",), f"scan '{ref.scan}' does not include molecule '{ref.molecule}'"
            )
        if ref.quantity not in COMPARED:
            raise err(
                loc + ("quantity",),
                f"unknown quantity '{ref.quantity}'"
                f"{did_you_mean(ref.quantity, COMPARED)}; "
                f"allowed: {', '.join(COMPARED)}",
            )
