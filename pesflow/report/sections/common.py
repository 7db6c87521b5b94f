"""What several sections of the report page share: :class:`Omitted` (a section with nothing
to show), :func:`note_marks` (links to the notes), folding (``<details>``), anchors, a
level's column head, and the banner that says whether the campaign is complete."""

from __future__ import annotations

from pesflow.report.markup import Markup, esc, join, tag
from pesflow.report.tables import ReportData


def _level_head(level, reference_level) -> Markup:
    if level == reference_level:
        return tag("span", join([level, tag("span", "reference", class_="tag")]), class_="nowrap")
    return esc(level)


class Omitted(str):
    """What a section builder returns instead of markup when the section has nothing to show:
    the reason, said in one line of the contents (``"each method has one basis set"``)."""


def note_marks(d: ReportData, flags) -> Markup:
    """Links ``[n]`` to the notes section for ``flags`` (the warnings that concern one number
    or one curve), numbered once per distinct warning of the page (``ReportData.notes``)."""
    out = []
    for message in dict.fromkeys(str(f) for f in flags):
        note = d.notes.get(message)
        if note is None:
            continue
        n = note["n"]
        out.append(tag("a", f"[{n}]", class_="flag", href=f"#note-{n}", title=note["title"]))
    return join(out)


def _anchor(*parts) -> str:
    return "-".join(str(p) for p in parts).replace("/", "_").replace("(", "").replace(")", "")


def _banner(d: ReportData) -> Markup:
    t = d.totals
    total = t.get("done", 0) + t.get("failed", 0) + t.get("pending", 0)
    if d.complete:
        return tag("div", f"Complete: all {total} points computed.", class_="banner ok")
    return tag(
        "div",
        join(
            [
                tag("strong", "Incomplete campaign. "),
                f"{t.get('done', 0)} of {total} points done, {t.get('failed', 0)} failed, "
                f"{t.get('pending', 0)} pending. Numbers below use only the points that are done; "
                "what is missing is listed under ",
                tag("a", "Missing points", href="#missing"),
                ".",
            ]
        ),
        class_="banner partial",
    )


def _fold(heading: Markup, body, *, anchor: str, open_: bool) -> Markup:
    """A section part that folds (``<details>``, no script): ``heading`` is always shown."""
    return tag(
        "details",
        join([tag("summary", tag("h3", heading)), body]),
        id=anchor,
        class_="fold",
        open="open" if open_ else None,
    )
