"""Resolution of a validated spec into a :class:`~pesflow.campaign.resolved.Campaign`:
:func:`load_campaign` reads the spec and composes the three steps, molecules
(:mod:`~pesflow.campaign.resolve_molecules`: built, atoms checked), scans
(:mod:`~pesflow.campaign.resolve_scans`: moving sides found, grids made, the point count
bounded) and levels (:mod:`~pesflow.campaign.resolve_levels`: checked against the engines,
reference values checked).  Nothing is computed or written."""

from __future__ import annotations

from pathlib import Path

from pesflow.campaign.resolve_levels import _resolve_levels
from pesflow.campaign.resolve_molecules import _resolve_entry
from pesflow.campaign.resolve_scans import _check_point_count, _resolve_scans
from pesflow.campaign.resolved import Campaign
from pesflow.campaign.yaml_source import _Errors, _read_yaml, parse_spec
from pesflow.errors import EngineSetupError


def load_campaign(path) -> Campaign:
    """Load, validate and resolve the campaign spec at ``path``.

    Raises :class:`~pesflow.errors.SpecError` (one line: file, YAML line, field, reason)
    on the first problem found.  Reads the spec and the XYZ files it names; writes
    nothing.
    """
    path = Path(path).resolve() if Path(path).exists() else Path(path)
    spec = parse_spec(path)
    _, located = _read_yaml(path)
    err = _Errors(path, located)
    notes: list[dict] = []
    molecules, groups = {}, {}
    for name, m in spec.molecules.items():
        resolved = _resolve_entry(name, m, path.parent, err, notes)
        molecules.update(resolved)
        groups[name] = list(resolved)
    scans = _resolve_scans(spec, molecules, groups, err, notes)
    levels = _resolve_levels(spec, molecules, scans, err)
    _check_point_count(spec, scans, err)
    campaign = Campaign(
        spec=spec,
        path=path,
        molecules=molecules,
        scans=scans,
        levels=levels,
        groups=groups,
        notes=notes,
    )
    if any(scan.refine for scan in scans.values()):
        from pesflow.execution.refinement import added_points

        campaign.added_points = added_points(campaign)
    for name in [None, *(n for n, s in spec.scans.items() if s.engine is not None)]:
        try:
            campaign.engine_settings(name)
        except EngineSetupError as exc:
            where = ("engine",) if name is None else ("scans", name, "engine")
            raise err(where, str(exc)) from None
    return campaign
