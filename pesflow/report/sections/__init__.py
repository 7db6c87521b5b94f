"""The sections of the report's HTML page, by topic.

Each section has one builder, ``(data, figures, files) -> Markup`` (:class:`~pesflow.report.
markup.Markup`), or an :class:`~pesflow.report.sections.common.Omitted` reason when the
section has nothing to show; :data:`pesflow.report.html.SECTIONS` lists them in page order.

* :mod:`~pesflow.report.sections.common` - what several sections share (``Omitted``,
  ``note_marks``, folding, anchors, the completeness banner);
* :mod:`~pesflow.report.sections.quantities` - the verdicts and overview, the derived
  quantities with their reference values and error statistics, the notes;
* :mod:`~pesflow.report.sections.curves` - curves and surfaces, basis-set convergence,
  counterpoise interaction curves, stationary points;
* :mod:`~pesflow.report.sections.sets` - molecule sets and rules;
* :mod:`~pesflow.report.sections.runinfo` - adaptive refinement, compute cost, missing
  points, the report's files.
"""
