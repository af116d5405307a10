"""The notebook view of an assessment: a compact HTML summary and the report's figures
as matplotlib Figures.

Both read the same section content as the PDF (:mod:`advisor.report.sections`): the
recommendation's sentences (:mod:`~advisor.report.sections.recommendation`), the ranking
table (:func:`~advisor.report.sections.evidence.metrics_table`, rendered with
``TableData.to_html``) and the named figures (:data:`~advisor.report.sections.FIGURES`).
So what a notebook shows and what the PDF prints cannot drift apart.
"""

from __future__ import annotations

import base64

from ..errors import UsageError
from .figures import figure_png
from .sections import CAUTION, FIGURES, View
from .sections import evidence, recommendation
from .sections._base import _html_markup

__all__ = ["figure", "figure_names", "to_html"]

#: The figure shown inline in the HTML summary.
SUMMARY_FIGURE = "calibration"

_CSS = ("<style>.advisor-summary table.advisor-table{border-collapse:collapse;"
        "font-size:85%}.advisor-summary table.advisor-table td,.advisor-summary "
        "table.advisor-table th{border-bottom:1px solid #ccd;padding:2px 6px}"
        ".advisor-caution{border:1px solid #8a5a00;background:#fbf3df;padding:4px 8px;"
        "font-size:85%}</style>")


def figure_names() -> list[str]:
    """The names :func:`figure` accepts, in document order."""
    return list(FIGURES)


def figure(assessment, name: str, view: View | None = None):
    """The report's figure ``name`` for ``assessment`` as a :class:`matplotlib.figure.Figure`
    (the one the PDF embeds, drawn anew, so it can be restyled or saved)."""
    spec = FIGURES.get(name)
    if spec is None:
        raise UsageError(f"no figure named {name!r}; named figures: "
                         + ", ".join(FIGURES), fix="pick one of the named figures")
    return spec.build(view if view is not None else View(assessment))


def to_html(assessment) -> str:
    """A compact HTML summary: the recommendation (surrogate, acquisition setting,
    confidence, runner-up), the ranking table, the calibration figure as an inline PNG
    with its caption, and the caution."""
    v = View(assessment)
    png = figure_png(figure(assessment, SUMMARY_FIGURE, v), dpi=110)
    img = base64.b64encode(png).decode("ascii")
    statement = recommendation.statement_text(v)
    parts = [
        _CSS, "<div class='advisor-summary'>",
        f"<h3>{recommendation.TITLE}</h3>",
        f"<p style='color:#4a5570'>{_html_markup(recommendation.subtitle(v))}</p>",
        f"<p>{_html_markup(recommendation.headline(v))}</p>",
        f"<p>{_html_markup(recommendation.confidence_text(v))}</p>",
        f"<p>{_html_markup(statement)}</p>" if statement else "",
        f"<p>{_html_markup(recommendation.runner_up_text(v))}</p>",
        "<h4>Ranking (held-out scores, 95% bootstrap intervals below each value)</h4>",
        evidence.metrics_table(v).to_html(),
        f"<h4>Calibration</h4><img alt='{SUMMARY_FIGURE} figure' style='max-width:640px' "
        f"src='data:image/png;base64,{img}'/>",
        f"<p style='font-size:85%'>{_html_markup(FIGURES[SUMMARY_FIGURE].caption_for(v))}"
        "</p>",
        f"<div class='advisor-caution'><b>Caution.</b> {CAUTION}</div>",
        "<p style='font-size:85%'>Other figures: assessment.figure(name) for name in "
        + ", ".join(FIGURES) + ".</p>",
        "</div>",
    ]
    return "\n".join(p for p in parts if p)
