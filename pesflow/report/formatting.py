"""The report's number formatting, one set for every output (the HTML page, the Markdown
summary, the terminal): values, values with their uncertainty, signed deviations,
core-seconds, cost ratios, and the labels of scans and stationary-point positions."""

from __future__ import annotations

import numpy as np
import pandas as pd

from pesflow.coordinates.kinds import KINDS, UNIT_TEXT


def _position_head(column: str) -> str:
    name, unit = column.rsplit("_", 1)
    return f"{name} ({UNIT_TEXT.get(unit, unit)})"


def _decimals(column: str) -> int:
    return max((k.decimals for k in KINDS.values() if column.endswith(k.unit)), default=4)


def _formatted(value, spec: str) -> str:
    """``value`` as a float formatted with ``spec``; ``""`` when it is no finite number."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        return ""
    return format(v, spec) if np.isfinite(v) else ""


def fmt_value(value, decimals: int) -> str:
    """A value as shown in the report's tables (``""`` for NaN).

    >>> fmt_value(0.901489, 4), fmt_value(float("nan"), 2)
    ('0.9015', '')
    """
    return _formatted(value, f".{decimals}f")


def fmt_value_u(value, uncertainty, decimals: int) -> str:
    """A value with its standard uncertainty, compact: ``"4138.3 ± 0.4"``.

    The uncertainty gets one significant figure (two when it starts with 1 or 2) and the
    value as many decimals, at most ``decimals``; an uncertainty below the last shown decimal
    is written with one significant figure.  Without a (finite) uncertainty: the value alone.

    >>> fmt_value_u(4138.3421, 0.43, 1), fmt_value_u(4138.3421, 12.4, 1)
    ('4138.3 ± 0.4', '4138 ± 12')
    >>> fmt_value_u(0.916812, 3e-9, 4), fmt_value_u(1.5, float("nan"), 2)
    ('0.9168 ± 3e-09', '1.50')
    """
    text = fmt_value(value, decimals)
    try:
        u = float(uncertainty)
    except (TypeError, ValueError):
        return text
    if not text or not np.isfinite(u) or u < 0:
        return text
    if u < 0.5 * 10.0 ** (-decimals):
        return f"{text} ± {u:.1g}"
    exponent = int(np.floor(np.log10(u)))
    digits = 2 if f"{u:.1e}"[0] in "12" else 1
    places = min(decimals, max(0, digits - 1 - exponent))
    return f"{float(value):.{places}f} ± {u:.{places}f}"


def fmt_dev(value, decimals: int) -> str:
    """A deviation with its sign, as shown in the report's tables (``""`` for NaN).

    >>> fmt_dev(-0.0178583, 4), fmt_dev(0.0, 1)
    ('-0.0179', '+0.0')
    """
    return _formatted(value, f"+.{decimals}f")


def fmt_seconds(value) -> str:
    """Core-seconds with three significant figures (``""`` for NaN).

    >>> fmt_seconds(0.84913), fmt_seconds(59.83)
    ('0.849', '59.8')
    """
    return _formatted(value, ".3g")


def fmt_ratio(value) -> str:
    """A cost ratio as shown in the report (``"17x"``; ``""`` for NaN)."""
    text = _formatted(value, ".2g")
    return f"{text}x" if text else ""


def scan_label(curves: pd.DataFrame, molecule: str, scan: str, column: str) -> str:
    """The scan's name; for ``q1_*`` / ``q2_*`` of a 2-D scan, with the coordinate it is.

    ``curves`` is the summary table (its ``coordinates`` column, e.g. ``"r(1-2), angle(2-1-3)"``).
    """
    if not column.startswith(("q1_", "q2_")) or "coordinates" not in curves:
        return scan
    rows = curves[(curves["molecule"] == molecule) & (curves["scan"] == scan)]
    labels = str(rows["coordinates"].iloc[0]).split(", ") if len(rows) else []
    k = int(column[1]) - 1
    return f"{scan} (q{k + 1} = {labels[k]})" if k < len(labels) else scan
