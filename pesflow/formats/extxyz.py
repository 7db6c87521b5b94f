"""Extended XYZ export of a points table (one frame per stored point)."""

from __future__ import annotations

import numpy as np
import pandas as pd


def write_extxyz(table: pd.DataFrame, path) -> int:
    """Write every stored point's geometry as one frame of an extended XYZ file.

    Each frame's comment line carries the campaign, molecule, scan, level, status,
    energy (hartree), the scan coordinates (unit in the name) and the point key, so
    that any molecular viewer can step through a scan.  For a relaxed scan the
    geometry is the relaxed one.  Returns the number of frames.
    """
    import ase
    import ase.io

    coords = [
        c
        for c in table.columns
        if c.endswith(("_angstrom", "_degree")) and c != "positions_angstrom"
    ]
    frames = []
    for row in table.itertuples(index=False):
        row = row._asdict()
        positions = row.get("positions_angstrom")
        if positions is None or not isinstance(row.get("symbols"), str) or not len(positions):
            continue
        symbols = row["symbols"].split()
        atoms = ase.Atoms(symbols=symbols, positions=np.asarray(positions).reshape(-1, 3))
        info = {k: row[k] for k in ("campaign", "molecule", "scan", "level", "status", "key")}
        info["energy_hartree"] = float(row["energy_hartree"])
        info.update({c: float(row[c]) for c in coords if pd.notna(row[c])})
        atoms.info.update(info)
        frames.append(atoms)
    ase.io.write(str(path), frames, format="extxyz")
    return len(frames)
