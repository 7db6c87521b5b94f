"""A few functions that build HTML safely: text is escaped unless it is our own
:class:`Markup`; the report's tables and figures are made of these."""

from __future__ import annotations

import base64
import html

import numpy as np


class Markup(str):
    """Text that is already HTML (our own markup only; never built from unescaped user text)."""


def esc(value) -> Markup:
    """``value`` as HTML text: escaped unless it is already :class:`Markup`."""
    if isinstance(value, Markup):
        return value
    return Markup(html.escape(str(value), quote=True))


def join(parts, sep="") -> Markup:
    return Markup(esc(sep).join(esc(p) for p in parts))


def tag(name: str, content="", **attrs) -> Markup:
    """``<name attrs>content</name>``; attribute names use ``_`` for ``-``, values escaped."""
    rendered = "".join(
        f' {k.rstrip("_").replace("_", "-")}="{esc(v)}"' for k, v in attrs.items() if v is not None
    )
    return Markup(f"<{name}{rendered}>{esc(content)}</{name}>")


def img(png: bytes, alt: str) -> Markup:
    data = base64.b64encode(png).decode("ascii")
    return Markup(f'<img alt="{esc(alt)}" src="data:image/png;base64,{data}">')


def figure(fig, caption) -> Markup:
    if fig is None:
        return Markup("")
    return tag("figure", join([img(fig.png, fig.alt), tag("figcaption", caption)]))


def table(head, rows, cls=None) -> Markup:
    """``head``: list of header rows (each a list of Markup ``<th>``); ``rows``: list of
    lists of Markup ``<td>``."""
    thead = tag("thead", join(tag("tr", join(r)) for r in head))
    tbody = tag("tbody", join(tag("tr", join(r)) for r in rows))
    return tag("div", tag("table", join([thead, tbody]), class_=cls), class_="scroll")


def th(text, cls=None, **attrs) -> Markup:
    return tag("th", text, class_=cls, **attrs)


def td(text, cls=None, **attrs) -> Markup:
    return tag("td", text, class_=cls, **attrs)


def data_number(x) -> str:
    """A float for a data attribute: full precision, empty for NaN."""
    try:
        v = float(x)
    except (TypeError, ValueError):
        return ""
    return repr(v) if np.isfinite(v) else ""
