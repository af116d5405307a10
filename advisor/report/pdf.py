"""The design-review document: an assessment as a PDF a team can read at a review.

Sections, in order (every one of 1-6 present even when its evidence did not run, then
saying so in one line):

1. **Recommendation** -- the surrogate, acquisition setting and variance scaling in one
   sentence, the confidence in plain words, the runner-up and what separates them, the
   data the advice rests on, and the caution box.
2. **Data** -- parameter table, campaigns with failure shares, failed trials by line,
   replicate noise beside each surrogate's fitted noise.
3. **Evidence per surrogate** -- metric tables with bootstrap intervals (best value in
   bold), reliability diagram, coverage bars, predicted against observed, spread over
   folds, recalibration before and after.
4. **Acquisition backtest** -- replay and simulated-campaign curves against random
   search, trials to the best 5%.
5. **Next campaign** -- parameter relevance, freeze candidates, the proposed first batch
   with predicted intervals and the cautions beside it, learning curve, cost projection.
6. **Method and reproducibility** -- metric definitions and sources, validation scheme,
   ranking rule, command, seed, versions, date, input SHA-256.
7. **Where trials fail** -- only when the log has failed trials: the classifiers of
   success/failure and their scores, the parameters that drive failure, the
   failure-probability map (a line saying why when the model was skipped).

Each section's content and rendering live in its own module under
:mod:`advisor.report.sections` (shared with the notebook view); this module joins them
and adds the page furniture.  The document reads only the assessment (mainly its JSON
payload,
:func:`advisor.report.export.assessment_to_dict`) and never refits a model.  Layout,
palette and wording are our own.  The file is written atomically.
"""

from __future__ import annotations

from pathlib import Path

from reportlab.lib import colors
from reportlab.lib.pagesizes import A4
from reportlab.lib.units import mm
from reportlab.pdfgen import canvas as rl_canvas
from reportlab.platypus import BaseDocTemplate, Frame, PageTemplate

from .export import atomic_path
from .sections import CAUTION, ORDER, SECTIONS
from .sections._base import _FONT, _MARGIN, _PAGE_H, _PAGE_W, _RULE, _TEXT_W, _View
from .sections.data import HIGH_FAILURE_SHARE

__all__ = ["write_pdf", "CAUTION", "SECTIONS", "HIGH_FAILURE_SHARE"]


# ======================================================================================
# page furniture and build
# ======================================================================================
class _NumberedCanvas(rl_canvas.Canvas):
    """Holds every page until the end so the footer can say 'page n of N'."""

    def __init__(self, *args, header: str = "", **kwargs):
        super().__init__(*args, **kwargs)
        self._pages = []
        self._header = header

    def showPage(self):
        self._pages.append(dict(self.__dict__))
        self._startPage()

    def save(self):
        total = len(self._pages)
        for state in self._pages:
            self.__dict__.update(state)
            self._furniture(total)
            super().showPage()
        super().save()

    def _furniture(self, total: int) -> None:
        self.saveState()
        self.setStrokeColor(_RULE)
        self.setLineWidth(0.5)
        y_top = _PAGE_H - _MARGIN + 6 * mm
        self.line(_MARGIN, y_top - 1.5 * mm, _PAGE_W - _MARGIN, y_top - 1.5 * mm)
        self.setFont(_FONT, 7)
        self.setFillColor(colors.HexColor("#4a5570"))
        self.drawString(_MARGIN, y_top, self._header[:110])
        self.drawRightString(_PAGE_W - _MARGIN, y_top, "surrogate design review")
        self.drawRightString(_PAGE_W - _MARGIN, _MARGIN - 9 * mm,
                             f"page {self._pageNumber} of {total}")
        self.drawString(_MARGIN, _MARGIN - 9 * mm,
                        "Statistical advice only; see the caution on page 1.")
        self.restoreState()


def write_pdf(a, dest: Path) -> Path:
    """Write the design-review PDF of assessment ``a`` to ``dest`` (atomically).

    Parameters
    ----------
    a : Assessment
        From :func:`advisor.assess` (its ``backtest``, ``planning`` and ``proposals``
        may be None: those sections then say so).
    dest : path

    Returns
    -------
    Path
        ``dest``.
    """
    v = _View(a)
    story = [flowable for section in ORDER for flowable in section.story(v)]
    header = f"{v.log_name}  ·  SHA-256 {v.sha[:12]}  ·  seed {v.d.get('seed')}"
    with atomic_path(dest) as tmp:
        doc = BaseDocTemplate(str(tmp), pagesize=A4, leftMargin=_MARGIN,
                              rightMargin=_MARGIN, topMargin=_MARGIN, bottomMargin=_MARGIN,
                              title=f"Surrogate design review: {v.log_name}",
                              author="advisor", subject=v.sha)
        frame = Frame(_MARGIN, _MARGIN, _TEXT_W, _PAGE_H - 2 * _MARGIN, id="body",
                      leftPadding=0, rightPadding=0, topPadding=0, bottomPadding=0)
        doc.addPageTemplates([PageTemplate(id="page", frames=[frame])])
        doc.build(story, canvasmaker=lambda *args, **kw: _NumberedCanvas(
            *args, header=header, **kw))
    return Path(dest)

