"""The point record: its Parquet schema and the one function that builds a valid record.

A point is one geometry at one level of theory; its record is one row of
:data:`POINT_SCHEMA`.  :func:`make_record` checks every field and names the one that is wrong.
"""

from __future__ import annotations

import json
import math
import numbers
import re
import time

import numpy as np
import pyarrow as pa

#: Version of :data:`POINT_SCHEMA`; a store written with another version is refused.
SCHEMA_VERSION = 1
#: The ``format`` value in ``STORE.json``.
STORE_FORMAT = "pesflow-store"

_VERSION_META = b"pesflow.schema_version"

#: One row per computed point.  Every column is required except the three marked nullable.
POINT_SCHEMA = pa.schema(
    [
        pa.field("key", pa.string(), nullable=False),
        pa.field("method", pa.string(), nullable=False),
        pa.field("basis", pa.string(), nullable=False),
        pa.field("charge", pa.int32(), nullable=False),
        pa.field("multiplicity", pa.int32(), nullable=False),
        pa.field("symbols", pa.string(), nullable=False),
        pa.field("positions_angstrom", pa.list_(pa.float64()), nullable=False),
        pa.field("energy_hartree", pa.float64(), nullable=False),
        pa.field("converged", pa.bool_(), nullable=False),
        pa.field("scf_cycles", pa.int32(), nullable=False),
        pa.field("wall_s", pa.float64(), nullable=False),
        pa.field("step_wall_s", pa.float64(), nullable=False),
        pa.field("s2", pa.float64(), nullable=False),
        pa.field("reference", pa.string(), nullable=False),
        pa.field("engine", pa.string(), nullable=False),
        pa.field("engine_version", pa.string(), nullable=False),
        pa.field("settings_json", pa.string(), nullable=False),
        pa.field("attempts_json", pa.string(), nullable=True),
        pa.field("extra_json", pa.string(), nullable=True),
        pa.field("error", pa.string(), nullable=True),
        pa.field("created_unix", pa.float64(), nullable=False),
    ],
    metadata={_VERSION_META: str(SCHEMA_VERSION).encode()},
)

COLUMNS = tuple(POINT_SCHEMA.names)

_KEY_RE = re.compile(r"[0-9a-f]{32}")
_PARQUET_MAGIC = b"PAR1"
_MIN_PARQUET_BYTES = 12  # head magic + 4-byte footer length + tail magic
_FRAGMENT_SUFFIX = ".parquet"
_PART_PREFIX = "part-"
_INT32_MIN, _INT32_MAX = -(2**31), 2**31 - 1
_STR_FIELDS = ("method", "basis", "symbols", "reference", "engine", "engine_version")
_INT_FIELDS = ("charge", "multiplicity", "scf_cycles")
_FLOAT_FIELDS = ("energy_hartree", "wall_s", "step_wall_s", "s2", "created_unix")
_JSON_FIELDS = ("settings_json", "attempts_json", "extra_json")
_NULLABLE = ("attempts_json", "extra_json", "error")
# Vanished-file retries in a read; each retry only happens when a concurrent compaction
# deleted a file between our listing and our read, so a handful is plenty.
_MAX_READ_PASSES = 20


def is_point_key(key) -> bool:
    """True when ``key`` is a point key: a string of exactly 32 lowercase hex digits."""
    return isinstance(key, str) and _KEY_RE.fullmatch(key) is not None


#: A fragment file holds the records of one point (one geometry: a record per method or
#: state computed there), named by their keys joined with this, in row order.
FRAGMENT_KEY_SEP = "+"
#: Keys in one fragment's name at most: 6 x 33 characters, the suffix and the temporary
#: name's prefix and random tail (atomic writes) stay under the 255-byte name limit of
#: common filesystems.  A point with more records takes more files.
MAX_FRAGMENT_KEYS = 6


def fragment_name(keys) -> str:
    """The file name of a fragment holding the records of ``keys``, in that order."""
    keys = list(keys)
    if not 1 <= len(keys) <= MAX_FRAGMENT_KEYS or len(set(keys)) != len(keys):
        raise ValueError(f"a fragment holds 1-{MAX_FRAGMENT_KEYS} distinct keys, got {keys}")
    return FRAGMENT_KEY_SEP.join(_check_key(k) for k in keys) + _FRAGMENT_SUFFIX


def fragment_keys(name: str) -> list[str] | None:
    """The keys a fragment file name holds, in row order; None when ``name`` is not a
    fragment's name.  A one-key name is the key itself (as every fragment was named
    before fragments held a whole point)."""
    if not name.endswith(_FRAGMENT_SUFFIX):
        return None
    keys = name[: -len(_FRAGMENT_SUFFIX)].split(FRAGMENT_KEY_SEP)
    if len(keys) > MAX_FRAGMENT_KEYS or len(set(keys)) != len(keys):
        return None
    if not all(_KEY_RE.fullmatch(k) for k in keys):
        return None
    return keys


def _check_key(key) -> str:
    if not is_point_key(key):
        raise ValueError(f"point key must be 32 lowercase hex digits [0-9a-f]{{32}}, got {key!r}")
    return key


def _json_field(name, value, nullable):
    if value is None:
        if nullable:
            return None
        raise ValueError(f"record field {name!r} must not be None")
    if isinstance(value, dict | list):
        # Sorted keys: the same settings always serialise to the same text.
        return json.dumps(value, sort_keys=True, separators=(",", ":"))
    if not isinstance(value, str):
        raise TypeError(f"record field {name!r} must be JSON text, a dict or a list, got {value!r}")
    try:
        json.loads(value)
    except json.JSONDecodeError as exc:
        raise ValueError(f"record field {name!r} is not valid JSON: {exc}") from None
    return value


def make_record(**fields) -> dict:
    """Validate the fields of one point record and return it as a dict in schema order.

    Inputs (all keyword; see :data:`POINT_SCHEMA`):
        key: 32 lowercase hex digits (the point's content hash, computed elsewhere).
        method, basis, reference, engine, engine_version: non-empty text (basis ``""``
            for a level with a built-in basis set).
        charge, multiplicity, scf_cycles: integers (multiplicity >= 1, scf_cycles >= 0).
        symbols: element symbols separated by single spaces, e.g. ``"O H H"``.
        positions_angstrom: n_atoms*3 (or n_atoms x 3) Cartesian coordinates in Å, finite.
        energy_hartree: total energy in hartree; NaN for a failed point.
        converged: bool.
        wall_s, step_wall_s: wall time in seconds (>= 0 or NaN).
        s2: <S^2> of the reference (NaN when not defined).
        settings_json: engine settings as JSON text (a dict is serialised with sorted keys).
        attempts_json, extra_json: JSON text or None (default None).
        error: error text for a failed point, or None (default None).
        created_unix: seconds since the epoch (default: now).

    Returns a new dict with every column of :data:`POINT_SCHEMA`, values as plain Python
    types.  Raises ``TypeError``/``ValueError`` naming the offending field.
    """
    unknown = set(fields) - set(COLUMNS)
    if unknown:
        raise ValueError(f"unknown record field(s): {', '.join(sorted(unknown))}")
    fields = dict(fields)
    for name in _NULLABLE:
        fields.setdefault(name, None)
    fields.setdefault("created_unix", time.time())
    missing = [name for name in COLUMNS if name not in fields]
    if missing:
        raise ValueError(f"record is missing field(s): {', '.join(missing)}")

    out = {"key": _check_key(fields["key"])}
    for name in _STR_FIELDS:
        value = fields[name]
        # (basis is "" for a level with a built-in basis, e.g. tight binding)
        if not isinstance(value, str) or not (value.strip() or (name == "basis" and not value)):
            raise TypeError(f"record field {name!r} must be non-empty text, got {value!r}")
        out[name] = value
    for name in _INT_FIELDS:
        value = fields[name]
        if isinstance(value, bool | np.bool_) or not isinstance(value, numbers.Integral):
            raise TypeError(f"record field {name!r} must be an integer, got {value!r}")
        value = int(value)
        if not _INT32_MIN <= value <= _INT32_MAX:
            raise ValueError(f"record field {name!r} does not fit in int32: {value}")
        out[name] = value
    if out["multiplicity"] < 1:
        raise ValueError(f"multiplicity must be >= 1, got {out['multiplicity']}")
    if out["scf_cycles"] < 0:
        raise ValueError(f"scf_cycles must be >= 0, got {out['scf_cycles']}")
    for name in _FLOAT_FIELDS:
        value = fields[name]
        if isinstance(value, bool | np.bool_) or not isinstance(value, numbers.Real):
            raise TypeError(f"record field {name!r} must be a real number, got {value!r}")
        out[name] = float(value)
    for name in ("wall_s", "step_wall_s"):
        if out[name] < 0:
            raise ValueError(f"record field {name!r} must be >= 0 seconds, got {out[name]}")
    if not math.isfinite(out["created_unix"]):
        raise ValueError("record field 'created_unix' must be finite")
    converged = fields["converged"]
    if not isinstance(converged, bool | np.bool_):
        raise TypeError(f"record field 'converged' must be a bool, got {converged!r}")
    out["converged"] = bool(converged)

    symbols = out["symbols"].split(" ")
    if symbols != out["symbols"].split():
        raise ValueError(f"symbols must be separated by single spaces, got {out['symbols']!r}")
    try:
        positions = np.asarray(fields["positions_angstrom"], dtype=np.float64).ravel()
    except (TypeError, ValueError) as exc:
        raise TypeError(f"record field 'positions_angstrom' must be numbers: {exc}") from None
    if positions.size != 3 * len(symbols):
        raise ValueError(
            f"positions_angstrom has {positions.size} values; "
            f"{len(symbols)} atoms need {3 * len(symbols)}"
        )
    if not np.all(np.isfinite(positions)):
        raise ValueError("positions_angstrom must be finite")
    out["positions_angstrom"] = positions.tolist()

    for name in _JSON_FIELDS:
        out[name] = _json_field(name, fields[name], nullable=name in _NULLABLE)
    error = fields["error"]
    if error is not None and not isinstance(error, str):
        raise TypeError(f"record field 'error' must be text or None, got {error!r}")
    out["error"] = error
    return {name: out[name] for name in COLUMNS}
