"""The report's sections, one private module each, shared by the PDF and the notebook.

Each module gives its section's content -- texts in paragraph markup (the subset of
HTML that reportlab reads), tables as :class:`TableData`, figures as named
:class:`FigureSpec` -- and ``story(view)``, the reportlab flowables of the PDF.  The PDF
(:mod:`advisor.report.pdf`) joins the stories in :data:`ORDER`; the notebook view
(:mod:`advisor.report.notebook`) renders the same content as HTML.  Adding a section:
write a module with ``story(view) -> list`` (and ``FIGURES`` if it draws any), add its
heading to :data:`SECTIONS` and the module to :data:`ORDER`.  Adding a table: return a
:class:`TableData` from a function of the view and call ``.to_pdf(widths)`` in the story
(and ``.to_html()`` where the notebook shows it).
"""

from __future__ import annotations

from . import backtest, data, evidence, feasibility, method, next_campaign, recommendation
from ._base import CAUTION, SECTIONS, FigureSpec, TableData, _View

#: Section modules in document order (their headings are :data:`SECTIONS`).
ORDER = (recommendation, data, evidence, backtest, next_campaign, method, feasibility)

#: Every named report figure, in document order: name -> :class:`FigureSpec`.
FIGURES = {name: spec for mod in ORDER for name, spec in getattr(mod, "FIGURES", {}).items()}

View = _View

__all__ = ["CAUTION", "SECTIONS", "ORDER", "FIGURES", "FigureSpec", "TableData", "View"]
