"""Reading a campaign's YAML: duplicate keys refused, every node's line number kept, and
pydantic's errors turned into one-line :class:`~pesflow.errors.SpecError` messages that name
the file, the line and the field path."""

from __future__ import annotations

import re
from pathlib import Path

import yaml
from pydantic import (
    ValidationError,
)

from pesflow.campaign.spec import CampaignSpec, did_you_mean
from pesflow.errors import SpecError

#: libyaml's parser when PyYAML was built with it (about 40 times faster on a campaign
#: of a few hundred lines), else the pure-Python one; both give the same nodes and marks.
_LOADER = getattr(yaml, "CSafeLoader", yaml.SafeLoader)


class _Located:
    """Maps a field path to the YAML line where it is written."""

    def __init__(self, root):
        self.root = root

    def line(self, loc) -> int | None:
        node = self.root
        line = None if node is None else node.start_mark.line + 1
        for part in loc:
            if isinstance(node, yaml.MappingNode):
                found = None
                for key, value in node.value:
                    if str(key.value) == str(part):
                        found = (key, value)
                        break
                if found is None:
                    return line
                line = found[0].start_mark.line + 1
                node = found[1]
            elif isinstance(node, yaml.SequenceNode) and isinstance(part, int):
                if part >= len(node.value):
                    return line
                node = node.value[part]
                line = node.start_mark.line + 1
            else:
                return line
        return line


def _field_path(loc) -> str:
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += ("." if out else "") + str(part)
    return out


def _check_duplicate_keys(node, path, file):
    if isinstance(node, yaml.MappingNode):
        seen = set()
        for key, value in node.value:
            name = str(key.value)
            if name in seen:
                raise SpecError(
                    f"key '{name}' is given twice; give each key once",
                    file=file,
                    line=key.start_mark.line + 1,
                    field=_field_path(path + [name]),
                )
            seen.add(name)
            _check_duplicate_keys(value, path + [name], file)
    elif isinstance(node, yaml.SequenceNode):
        for i, item in enumerate(node.value):
            _check_duplicate_keys(item, path + [i], file)


def _read_yaml(path: Path):
    if not path.exists():
        raise SpecError("file not found", file=path)
    if path.is_dir():
        raise SpecError("is a folder, not a campaign file", file=path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise SpecError(f"cannot read the file ({exc.__class__.__name__})", file=path) from None
    try:
        node = yaml.compose(text, Loader=_LOADER)
        data = yaml.load(text, Loader=_LOADER)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        raise SpecError(
            f"malformed YAML: {problem}",
            file=path,
            line=None if mark is None else mark.line + 1,
        ) from None
    if data is None:
        raise SpecError(
            "the file is empty; a campaign needs campaign, molecules, scans and levels", file=path
        )
    if not isinstance(data, dict):
        raise SpecError(
            "the top level must be a mapping with keys campaign, molecules, scans, levels",
            file=path,
            line=1,
        )
    _check_duplicate_keys(node, [], path)
    return data, _Located(node)


def _message(err: dict) -> tuple[tuple, str]:
    """A short reason for one pydantic error, and the location it refers to."""
    loc = tuple(err["loc"])
    kind = err["type"]
    ctx = err.get("ctx") or {}
    if kind == "unknown_key":
        return loc + (ctx["key"],), err["msg"]
    if kind == "missing":
        return loc, "this key is required"
    if kind == "literal_error":
        allowed = re.findall(r"'([^']*)'", str(ctx.get("expected", "")))
        hint = did_you_mean(err.get("input"), allowed)
        return loc, f"got {err.get('input')!r}{hint}; {err['msg'].lower()}"
    # Union errors repeat the location with the member type; keep the first, plainest.
    loc = tuple(
        p
        for p in loc
        if not (
            isinstance(p, str)
            and ("[" in p or p in ("str", "float", "int", "list[str]", "list[float]"))
        )
    )
    msg = err["msg"]
    if "input" in err and kind not in ("range", "molecule_source", "name"):
        msg = f"{msg} (got {err['input']!r})"
    return loc, msg


def parse_spec(path) -> CampaignSpec:
    """Read and validate the YAML file at ``path`` (structure and types only)."""
    path = Path(path)
    data, located = _read_yaml(path)
    try:
        return CampaignSpec.model_validate(data)
    except ValidationError as exc:
        errors = exc.errors()
        # Report the first error; a user fixes one line at a time.
        loc, msg = _message(errors[0])
        more = f" (and {len(errors) - 1} more)" if len(errors) > 1 else ""
        raise SpecError(
            msg + more, file=path, line=located.line(loc), field=_field_path(loc) or None
        ) from None


# ---------------------------------------------------------------------------
# semantic validation: molecules, atoms, ranges, levels
# ---------------------------------------------------------------------------


class _Errors:
    def __init__(self, path: Path, located: _Located):
        self.path = path
        self.located = located

    def __call__(self, loc, message):
        return SpecError(
            message, file=self.path, line=self.located.line(loc), field=_field_path(loc)
        )
