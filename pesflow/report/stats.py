"""Error statistics of levels of theory against a reference (pure functions on arrays and tables).

A *deviation* is always "this level minus the reference" (the reference level of the campaign,
or a value the user supplied), in the unit of the quantity.  NaN deviations (a quantity that
could not be determined, a curve still pending) are left out and the count ``n`` says how
many remain, so that a level compared over fewer molecules is visible as such.

>>> s = error_statistics([0.5, -1.5, 1.0])
>>> s.n, s.mean_signed, round(s.mean_absolute, 6), s.max_absolute
(3, 0.0, 1.0, 1.5)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

#: Columns of :func:`level_statistics`, in order.
STATISTICS_COLUMNS = (
    "quantity",
    "against",
    "level",
    "n",
    "mean_signed",
    "mean_absolute",
    "max_absolute",
    "max_absolute_at",
)


@dataclass(frozen=True)
class ErrorStatistics:
    """Summary of a set of deviations (same unit as the deviations).

    Attributes:
        n: number of finite deviations used.
        mean_signed: mean signed deviation (MSD); NaN when ``n == 0``.
        mean_absolute: mean absolute deviation (MAD); NaN when ``n == 0``.
        max_absolute: largest absolute deviation; NaN when ``n == 0``.
        max_index: position (in the input) of the largest absolute deviation, or None.
    """

    n: int
    mean_signed: float
    mean_absolute: float
    max_absolute: float
    max_index: int | None = None


def error_statistics(deviations) -> ErrorStatistics:
    """Mean signed, mean absolute and maximum absolute deviation of ``deviations``.

    Args:
        deviations: array-like of deviations (level minus reference); NaN entries are ignored.

    Returns:
        :class:`ErrorStatistics`; with no finite entry, ``n == 0`` and the rest NaN.

    >>> error_statistics([np.nan, 2.0, -4.0]).max_index
    2
    """
    d = np.asarray(deviations, dtype=float).ravel()
    finite = np.isfinite(d)
    if not finite.any():
        nan = float("nan")
        return ErrorStatistics(0, nan, nan, nan, None)
    used = d[finite]
    where = np.flatnonzero(finite)
    i = int(np.argmax(np.abs(used)))
    return ErrorStatistics(
        n=int(used.size),
        mean_signed=float(np.mean(used)),
        mean_absolute=float(np.mean(np.abs(used))),
        max_absolute=float(np.abs(used[i])),
        max_index=int(where[i]),
    )


def level_statistics(
    deviations: pd.DataFrame,
    *,
    against: str,
    deviation_column: str = "deviation",
    levels=None,
    exclude_level: str | None = None,
) -> pd.DataFrame:
    """Error statistics per quantity and level over the molecule set.

    Args:
        deviations: long table with columns ``quantity``, ``level``, ``molecule``, ``scan`` and
            ``deviation_column`` (level minus reference; NaN where not available).
        against: what the deviations are taken from (e.g. the reference level's label, or
            ``"reference values"``); copied into the ``against`` column.
        deviation_column: name of the deviation column (default ``"deviation"``).
        levels: level labels in the order wanted; default: order of first appearance.
            A level with no finite deviation still gets a row (``n == 0``).
        exclude_level: a level to leave out (the reference level itself, whose deviations
            from itself are zero by construction).

    Returns:
        One row per (quantity, level) with the columns of :data:`STATISTICS_COLUMNS`;
        ``max_absolute_at`` names the curve (``molecule scan``) of the largest deviation.
    """
    if levels is None:
        levels = list(dict.fromkeys(deviations["level"]))
    rows = []
    for quantity in dict.fromkeys(deviations["quantity"]):
        sub = deviations[deviations["quantity"] == quantity]
        for level in levels:
            if level == exclude_level:
                continue
            part = sub[sub["level"] == level]
            s = error_statistics(part[deviation_column].to_numpy(dtype=float))
            at = ""
            if s.max_index is not None:
                hit = part.iloc[s.max_index]
                at = f"{hit['molecule']} {hit['scan']}"
            rows.append(
                {
                    "quantity": quantity,
                    "against": against,
                    "level": level,
                    "n": s.n,
                    "mean_signed": s.mean_signed,
                    "mean_absolute": s.mean_absolute,
                    "max_absolute": s.max_absolute,
                    "max_absolute_at": at,
                }
            )
    return pd.DataFrame(rows, columns=list(STATISTICS_COLUMNS))


def common_curve_statistics(
    deviations: pd.DataFrame,
    *,
    against: str,
    deviation_column: str = "deviation",
    levels=None,
    exclude_level: str | None = None,
) -> pd.DataFrame:
    """Error statistics per quantity and level over the curves that *every* compared level has.

    A level is compared on a quantity when it has at least one finite deviation of it; the
    statistics of each compared level are taken over the curves (molecule, scan) where all
    compared levels have one, so that the levels are ranked on the same curves.  Arguments as
    for :func:`level_statistics`.  Returns its columns (``n`` is the number of common curves)
    plus ``n_curves``, the curves the level has a deviation for in all.

    >>> d = pd.DataFrame({"quantity": "x", "level": ["a", "a", "b"], "molecule": ["m1", "m2",
    ...     "m1"], "scan": "s", "deviation": [0.1, 5.0, -0.2]})
    >>> common_curve_statistics(d, against="ref")[["level", "n", "mean_absolute", "n_curves"]]
      level  n  mean_absolute  n_curves
    0     a  1            0.1         2
    1     b  1            0.2         1
    """
    if levels is None:
        levels = list(dict.fromkeys(deviations["level"]))
    frames = []
    for quantity in dict.fromkeys(deviations["quantity"]):
        sub = deviations[
            (deviations["quantity"] == quantity) & (deviations["level"] != exclude_level)
        ]
        finite = sub[np.isfinite(pd.to_numeric(sub[deviation_column], errors="coerce"))]
        curves = {
            lvl: set(zip(part["molecule"], part["scan"]))
            for lvl, part in finite.groupby("level", sort=False)
        }
        compared = [lvl for lvl in levels if lvl in curves]
        if not compared:
            continue
        common = set.intersection(*(curves[lvl] for lvl in compared))
        keep = [(m, s) in common for m, s in zip(finite["molecule"], finite["scan"])]
        stats = level_statistics(
            finite[keep] if any(keep) else finite.iloc[:0].assign(quantity=quantity),
            against=against,
            deviation_column=deviation_column,
            levels=compared,
        )
        if stats.empty:
            stats = pd.DataFrame(
                [
                    {"quantity": quantity, "against": against, "level": lvl, "n": 0}
                    for lvl in compared
                ],
                columns=list(STATISTICS_COLUMNS),
            )
        stats["n_curves"] = [len(curves[lvl]) for lvl in stats["level"]]
        frames.append(stats)
    if not frames:
        return pd.DataFrame(columns=[*STATISTICS_COLUMNS, "n_curves"])
    return pd.concat(frames, ignore_index=True)


def closest_levels(statistics: pd.DataFrame) -> pd.DataFrame:
    """Per quantity and reference, the level with the smallest mean absolute deviation.

    ``statistics`` is a table of :func:`level_statistics` rows (possibly several ``against``
    values).  Rows with ``n == 0`` are ignored.  Returns the winning rows plus ``n_levels``
    (how many levels were ranked) and ``same_n`` (whether all ranked levels had the same n,
    i.e. were compared over the same number of curves).
    """
    out = []
    ranked = statistics[statistics["n"] > 0]
    for (_, _), sub in ranked.groupby(["quantity", "against"], sort=False):
        best = sub.loc[sub["mean_absolute"].idxmin()].to_dict()
        best["n_levels"] = len(sub)
        best["same_n"] = bool(sub["n"].nunique() == 1)
        out.append(best)
    columns = list(STATISTICS_COLUMNS) + ["n_levels", "same_n"]
    return pd.DataFrame(out, columns=columns)
