"""The self-contained HTML page of a report: tables, embedded PNG figures, our own CSS.

The page loads nothing: figures are ``data:`` URIs, the style sheet is inline, and there is no
script at all.  A Content-Security-Policy meta tag forbids scripts and any network access, as
a second line of defence.  Every text that comes from the spec or the store (names, sources,
flags, error messages) passes through :func:`esc` (:func:`html.escape`); only our own fixed
markup is marked trusted with :class:`Markup`.

This module is the page's frame: :data:`SECTIONS` (the one list of sections, in page order),
the header, the ``<head>`` and :func:`render`.  Each section's builder lives in a module of
:mod:`pesflow.report.sections`, by topic.
"""

from __future__ import annotations

from datetime import UTC, datetime
from importlib import resources

from pesflow.report.markup import Markup, join, tag
from pesflow.report.sections.common import Omitted
from pesflow.report.sections.curves import (
    _convergence_section,
    _counterpoise_section,
    _curve_sections,
    _stationary_section,
)
from pesflow.report.sections.quantities import (
    _notes_section,
    _overview_section,
    _quantities_section,
)
from pesflow.report.sections.runinfo import (
    _cost_section,
    _files_section,
    _missing_points,
    _refinement_section,
)
from pesflow.report.sections.sets import _sets_section
from pesflow.report.tables import ReportData

#: The page's style sheet (pesflow/report/style.css), inlined into the page.
CSS = resources.files("pesflow.report").joinpath("style.css").read_text(encoding="utf-8")


#: The page's sections in order: (anchor, heading, contents-line text, builder).  A builder
#: takes ``(data, figures, files)`` and returns the section's markup, or an :class:`Omitted`
#: reason when it has nothing to show: the section is then left out of the page and its
#: contents line says why.
SECTIONS = (
    (
        "overview",
        "Which level is closest to the reference, by how much, at what cost",
        "Which level is closest",
        _overview_section,
    ),
    ("quantities", "Derived quantities", "Derived quantities", _quantities_section),
    ("sets", "Molecule sets and rules", "Sets and rules", _sets_section),
    (
        "convergence",
        "Basis-set convergence",
        "Basis-set convergence",
        lambda d, figures, files: _convergence_section(d, figures),
    ),
    (
        "curves",
        "Curves and surfaces",
        "Curves and surfaces",
        lambda d, figures, files: _curve_sections(d, figures),
    ),
    (
        "counterpoise",
        "Counterpoise-corrected interaction curves",
        "Interaction curves",
        lambda d, figures, files: _counterpoise_section(d, figures, files),
    ),
    ("stationary", "Every stationary point", "Stationary points", _stationary_section),
    (
        "refinement",
        "Adaptive refinement",
        "Adaptive refinement",
        lambda d, figures, files: _refinement_section(d),
    ),
    ("notes", "Notes: warnings of the analysis", "Notes", _notes_section),
    ("cost", "Compute cost per level", "Compute cost", lambda d, f, x: _cost_section(d)),
    ("missing", "Missing points", "Missing points", _missing_points),
    ("files", "Files", "Files", _files_section),
)


def _header(d: ReportData, title: str) -> Markup:
    ref = d.reference_level
    generated = datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")
    return tag(
        "header",
        tag(
            "div",
            join(
                [
                    tag("h1", title),
                    tag("p", join(["Spec: ", tag("code", str(d.spec_path))])),
                    tag("p", f"Reference level: {ref}" if ref else "No reference level set."),
                    tag("p", f"Generated {generated} from the point store; nothing was computed."),
                ]
            ),
            class_="wrap",
        ),
    )


def _page(title: str, body: Markup) -> str:
    head = join(
        [
            Markup('<meta charset="utf-8">'),
            Markup('<meta name="viewport" content="width=device-width, initial-scale=1">'),
            Markup(
                '<meta http-equiv="Content-Security-Policy" content="default-src \'none\'; '
                "img-src data:; style-src 'unsafe-inline'\">"
            ),
            tag("title", title),
            tag("style", Markup(CSS)),
        ]
    )
    return (
        "<!DOCTYPE html>\n"
        + tag("html", join([tag("head", head), tag("body", body)]), lang="en")
        + "\n"
    )


def render(d: ReportData, figures: dict, files: dict) -> str:
    """The HTML page (a str).  ``figures``: ``{key: object with .png and .alt}``;
    ``files``: ``{label: file name}`` of the report's other outputs."""
    title = f"pesflow report: {d.campaign}"
    lines, sections = [], []
    for anchor, heading, line, build in SECTIONS:
        content = build(d, figures, files)
        if isinstance(content, Omitted):
            lines.append(tag("li", f"{line}: left out, {content}", class_="omitted"))
            continue
        lines.append(tag("li", tag("a", line, href=f"#{anchor}")))
        sections.append(tag("section", join([tag("h2", heading, id=anchor), content])))
    contents = tag("nav", join([tag("strong", "Contents"), tag("ol", join(lines))]))
    body = join(
        [
            _header(d, title),
            tag("main", join([contents, *sections]), class_="wrap"),
            tag(
                "footer",
                tag("div", "pesflow report; tables as CSV next to this page.", class_="wrap"),
            ),
        ]
    )
    return _page(title, body)
