"""The report section of molecule sets: statistics per set, rule and level over the members,
then each member's numbers folded away."""

from __future__ import annotations

from pesflow.report.formatting import fmt_value
from pesflow.report.markup import Markup, join, table, tag, td, th
from pesflow.report.tables import QUANTITY, ReportData


def _sets_section(d: ReportData, figures, files) -> Markup:
    """Per set, rule and level: statistics over the members first, then each member's
    numbers folded away (``<details>``), so that a campaign of hundreds stays readable."""
    if d.sets.empty:
        return tag("p", "This campaign has no molecule sets.")
    parts = [
        tag(
            "p",
            "Statistics over each set's molecules, per rule and level (a member with several "
            "conformers counts once, through its lower envelope); each member's numbers "
            "are folded below.",
        )
    ]
    head = [
        [th(h) for h in ("set", "rule", "level", "quantity", "molecules", "complete curves")]
        + [th(h, cls="num") for h in ("median", "minimum", "maximum")]
    ]
    rows = []
    for r in d.sets.itertuples(index=False):
        q = QUANTITY[r.quantity]
        rows.append(
            [
                td(r.set), td(r.rule), td(r.level), td(q.title), td(str(r.n_molecules)),
                td(f"{r.n_complete} of {r.n_curves}"),
                *(td(fmt_value(v, q.decimals), cls="num")
                  for v in (r.median, r.minimum, r.maximum)),
            ]
        )  # fmt: skip
    parts.append(table(head, rows))
    for (set_name, rule), sub in d.set_members.groupby(["set", "rule"], sort=False):
        mine = (d.sets["set"] == set_name) & (d.sets["rule"] == rule)
        columns = list(dict.fromkeys(d.sets.loc[mine, "quantity"]))
        head = [[th(h) for h in ("molecule", "scan", "level", "conformer")]]
        head[0] += [th(QUANTITY[c].title, cls="num") for c in columns]
        body = [
            [td(r["molecule"]), td(r["scan"]), td(r["level"]), td(r.get("conformer") or "")]
            + [td(fmt_value(r.get(c), QUANTITY[c].decimals), cls="num") for c in columns]
            for _, r in sub.iterrows()
        ]
        summary = f"{set_name}, {rule}: {sub['molecule'].nunique()} molecules, {len(sub)} curves"
        parts.append(tag("details", join([tag("summary", summary), table(head, body)])))
    return join(parts)
