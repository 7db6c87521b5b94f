"""Content keys of points: a hash of everything that determines the number.

A point's key covers the canonical geometry (element order and coordinates in
angstrom rounded to :data:`GEOMETRY_DECIMALS` decimals), charge, multiplicity,
method, basis set, the engine settings that change the result, and the
engine's name and version.  Two campaigns that produce the same key share the
point.  The rounded geometry is also the one that is computed, so a key
describes its number exactly.

>>> import numpy as np
>>> k = point_key(("H", "H"), np.array([[0, 0, 0], [0, 0, 0.74]]), 0, 1, "hf", "sto-3g",
...               {"conv_tol": 1e-10}, "pyscf", "2.14.0")
>>> len(k)
32
"""

import hashlib
import json

import numpy as np

#: Decimals (in angstrom) to which coordinates are rounded before hashing and computing.
GEOMETRY_DECIMALS = 8
_SCALE = 10**GEOMETRY_DECIMALS


def canonical_positions(positions_angstrom) -> np.ndarray:
    """Coordinates rounded to the key's precision (float64, same shape)."""
    return np.rint(np.asarray(positions_angstrom, dtype=float) * _SCALE) / _SCALE


def geometry_digests(symbols, positions_stack) -> list[bytes]:
    """One digest per geometry of a stack of shape (m, n, 3) (or (n, 3))."""
    stack = np.asarray(positions_stack, dtype=float)
    if stack.ndim == 2:
        stack = stack[None]
    ints = np.rint(stack * _SCALE).astype("<i8").reshape(len(stack), -1)
    head = (" ".join(symbols) + "\n").encode()
    out = []
    for row in ints:
        h = hashlib.blake2b(head, digest_size=16)
        h.update(row.tobytes())
        out.append(h.digest())
    return out


def level_prefix(charge, multiplicity, method, basis, settings_key: dict, engine, version) -> bytes:
    """The part of a key shared by every geometry at one level and electronic state."""
    text = json.dumps(
        {
            "charge": int(charge),
            "multiplicity": int(multiplicity),
            "method": method,
            "basis": basis,
            "settings": settings_key,
            "engine": engine,
            "engine_version": version,
        },
        sort_keys=True,
    )
    return text.encode()


def combine(prefix: bytes, digest: bytes) -> str:
    """Key of one point from its level prefix and geometry digest."""
    return hashlib.blake2b(prefix + digest, digest_size=16).hexdigest()


def point_key(
    symbols, positions_angstrom, charge, multiplicity, method, basis, settings_key, engine, version
) -> str:
    """Key of a single point (see the module docstring)."""
    (digest,) = geometry_digests(symbols, positions_angstrom)
    prefix = level_prefix(charge, multiplicity, method, basis, settings_key, engine, version)
    return combine(prefix, digest)
