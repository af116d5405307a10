"""What every report section shares: the caution, headings, palette, paragraph styles,
small builders of reportlab flowables, the report's view of an assessment
(:class:`_View`) and the content a section hands to both renderers
(:class:`TableData`, :class:`FigureSpec`)."""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from typing import Callable
from pathlib import Path
from xml.sax.saxutils import escape

from reportlab.lib import colors
from reportlab.lib.enums import TA_LEFT
from reportlab.lib.pagesizes import A4
from reportlab.lib.styles import ParagraphStyle, getSampleStyleSheet
from reportlab.lib.units import mm
from reportlab.platypus import (CondPageBreak, Image, KeepTogether, LongTable,
                                Paragraph, Table, TableStyle)

CAUTION = ("This report is statistical advice drawn from past trial logs. It does not "
           "know the limits, hazards or constraints of your system beyond what the log "
           "contains. Try any suggested setting only within validated safe operating "
           "limits, following your site's procedures; local codes and licensed "
           "engineering practice govern. Nothing here guarantees safety.")

#: Section headings, in document order.
SECTIONS = ("1  Recommendation", "2  Data", "3  Evidence per surrogate",
            "4  Acquisition backtest", "5  Next campaign", "6  Method and reproducibility",
            "7  Where trials fail")

#: A campaign whose failure share reaches this is flagged (our choice: one trial in five

_PAGE_W, _PAGE_H = A4
_MARGIN = 18 * mm
_TEXT_W = _PAGE_W - 2 * _MARGIN
_INK = colors.HexColor("#1a1a1a")
_RULE = colors.HexColor("#9aa3b5")
_HEAD_BG = colors.HexColor("#dfe4ee")
_ZEBRA = colors.HexColor("#f5f6f9")
_CAUTION_BG = colors.HexColor("#fbf3df")
_CAUTION_EDGE = colors.HexColor("#8a5a00")


# ======================================================================================
# styles and small builders
# ======================================================================================
def _register_fonts() -> tuple[str, str, str, str]:
    """DejaVu Sans (shipped with matplotlib): full Unicode (σ, ≤, subscripts) and the
    same face as the figures; the standard Helvetica when it cannot be found."""
    import os

    import matplotlib
    from reportlab.lib.fonts import addMapping
    from reportlab.pdfbase import pdfmetrics
    from reportlab.pdfbase.ttfonts import TTFont

    folder = os.path.join(os.path.dirname(matplotlib.__file__), "mpl-data", "fonts", "ttf")
    faces = {"DV": "DejaVuSans.ttf", "DV-B": "DejaVuSans-Bold.ttf",
             "DV-I": "DejaVuSans-Oblique.ttf", "DV-BI": "DejaVuSans-BoldOblique.ttf",
             "DV-M": "DejaVuSansMono.ttf"}
    try:
        for name, file in faces.items():
            if name not in pdfmetrics.getRegisteredFontNames():
                pdfmetrics.registerFont(TTFont(name, os.path.join(folder, file)))
    except Exception:  # any font trouble: the built-in faces still make a readable PDF
        return "Helvetica", "Helvetica-Bold", "Helvetica-Oblique", "Courier"
    addMapping("DV", 0, 0, "DV")
    addMapping("DV", 1, 0, "DV-B")
    addMapping("DV", 0, 1, "DV-I")
    addMapping("DV", 1, 1, "DV-BI")
    return "DV", "DV-B", "DV-I", "DV-M"


_FONT, _BOLD, _ITALIC, _MONO = _register_fonts()


def _styles() -> dict:
    base = getSampleStyleSheet()
    body = ParagraphStyle("body", parent=base["BodyText"], fontName=_FONT,
                          fontSize=8.6, leading=11.2, textColor=_INK, spaceAfter=4)
    return {
        "title": ParagraphStyle("title", parent=body, fontName=_BOLD,
                                fontSize=17, leading=21, spaceAfter=2),
        "subtitle": ParagraphStyle("subtitle", parent=body, fontSize=9.5,
                                   textColor=colors.HexColor("#4a5570"), spaceAfter=8),
        "h1": ParagraphStyle("h1", parent=body, fontName=_BOLD, fontSize=13,
                             leading=16, spaceBefore=6, spaceAfter=5,
                             textColor=colors.HexColor("#1d2f6f")),
        "h2": ParagraphStyle("h2", parent=body, fontName=_BOLD, fontSize=10,
                             leading=13, spaceBefore=6, spaceAfter=3),
        "body": body,
        "lead": ParagraphStyle("lead", parent=body, fontSize=11, leading=14.5,
                               spaceAfter=6),
        "small": ParagraphStyle("small", parent=body, fontSize=7.5, leading=9.2),
        "cell": ParagraphStyle("cell", parent=body, fontSize=7, leading=8.4, spaceAfter=0,
                               alignment=TA_LEFT),
        "cellhead": ParagraphStyle("cellhead", parent=body, fontName=_BOLD,
                                   fontSize=7, leading=8.4, spaceAfter=0),
        "caption": ParagraphStyle("caption", parent=body, fontSize=7.5, leading=9.2,
                                  textColor=colors.HexColor("#3b3b3b"), spaceAfter=8),
        "caution": ParagraphStyle("caution", parent=body, fontSize=8.5, leading=11,
                                  spaceAfter=0),
    }


_S = _styles()


def _p(text: str, style: str = "body") -> Paragraph:
    return Paragraph(text, _S[style])


def _e(value) -> str:
    """Text for a paragraph: escaped, never the literal 'None'."""
    return escape("" if value is None else str(value))


def _finite(v) -> bool:
    try:
        return v is not None and math.isfinite(float(v))
    except (TypeError, ValueError):
        return False


def _num(v, digits: int = 3) -> str:
    if not _finite(v):
        return "n/a"
    v = float(v)
    if v != 0 and (abs(v) >= 1e5 or abs(v) < 1e-3):
        return f"{v:.{digits - 1}e}"
    return f"{v:.{digits}g}"


def _pct(v) -> str:
    return f"{100 * float(v):.0f}%" if _finite(v) else "n/a"


def _table(rows, widths, *, header_rows: int = 1, zebra: bool = True, spans=(),
           extra=(), long: bool = True):
    """A table that splits across pages with its header repeated."""
    cls = LongTable if long else Table
    t = cls(rows, colWidths=widths, repeatRows=header_rows if long else 0, hAlign="LEFT")
    style = [("VALIGN", (0, 0), (-1, -1), "TOP"),
             ("FONT", (0, 0), (-1, -1), _FONT, 7),
             ("LEADING", (0, 0), (-1, -1), 8.4),
             ("TOPPADDING", (0, 0), (-1, -1), 1.6), ("BOTTOMPADDING", (0, 0), (-1, -1), 1.6),
             ("LEFTPADDING", (0, 0), (-1, -1), 2.5), ("RIGHTPADDING", (0, 0), (-1, -1), 2.5),
             ("BACKGROUND", (0, 0), (-1, header_rows - 1), _HEAD_BG),
             ("LINEBELOW", (0, header_rows - 1), (-1, header_rows - 1), 0.6, _RULE),
             ("LINEBELOW", (0, -1), (-1, -1), 0.6, _RULE)]
    if zebra:
        for r in range(header_rows, len(rows)):
            if (r - header_rows) % 2 == 1:
                style.append(("BACKGROUND", (0, r), (-1, r), _ZEBRA))
    style += [("SPAN",) + s for s in spans]
    style += list(extra)
    t.setStyle(TableStyle(style))
    return t


def _cells(row, style: str = "cell") -> list:
    return [c if not isinstance(c, str) else Paragraph(c, _S[style]) for c in row]


def _box(text: str, title: str = "Caution", width: float = _TEXT_W) -> Table:
    t = Table([[Paragraph(f"<b>{_e(title)}.</b> {_e(text)}", _S["caution"])]],
              colWidths=[width])
    t.setStyle(TableStyle([("BOX", (0, 0), (-1, -1), 0.9, _CAUTION_EDGE),
                           ("BACKGROUND", (0, 0), (-1, -1), _CAUTION_BG),
                           ("LEFTPADDING", (0, 0), (-1, -1), 6),
                           ("RIGHTPADDING", (0, 0), (-1, -1), 6),
                           ("TOPPADDING", (0, 0), (-1, -1), 5),
                           ("BOTTOMPADDING", (0, 0), (-1, -1), 5)]))
    return t


def _image(fig, width: float = _TEXT_W) -> Image:
    """Embed a matplotlib figure as a PNG (200 dpi) scaled to ``width`` points."""
    import io

    from ..figures import figure_png

    w_in, h_in = fig.get_size_inches()
    data = figure_png(fig)
    return Image(io.BytesIO(data), width=width, height=width * h_in / w_in)


def _figure_block(fig, caption: str, width: float = _TEXT_W) -> KeepTogether:
    return KeepTogether([_image(fig, width), _p(caption, "caption")])


def _side_by_side(left, right) -> Table:
    t = Table([[left, right]], colWidths=[_TEXT_W / 2, _TEXT_W / 2], hAlign="LEFT")
    t.setStyle(TableStyle([("VALIGN", (0, 0), (-1, -1), "TOP"),
                           ("LEFTPADDING", (0, 0), (-1, -1), 0),
                           ("RIGHTPADDING", (0, 0), (-1, -1), 3)]))
    return t


def _heading(i: int) -> list:
    return [CondPageBreak(60 * mm), Paragraph(SECTIONS[i], _S["h1"])]


def _short(name: str) -> str:
    return name.split(":")[-1] if ":" in str(name) else str(name)


def _name(name) -> str:
    """A model name for a narrow cell: a user model's class first, its module below."""
    name = str(name)
    if ":" not in name:
        return _e(name)
    mod, cls = name.rsplit(":", 1)
    return f"{_e(cls)}<br/><font size=5.8 color='#555555'>{_e(mod)}</font>"


# ======================================================================================
# the report's view of an assessment
# ======================================================================================
class _View:
    """The payload plus the few things the figures need from the live object."""

    def __init__(self, a):
        from ..figures import model_styles

        self.a = a
        self.d = a.to_dict()
        self.ranking = self.d.get("ranking") or []
        self.names = [r["surrogate"] for r in self.ranking]
        self.ok = [r["surrogate"] for r in self.ranking if r.get("status") == "ok"]
        self.styles = model_styles(self.names)
        inp = self.d.get("input") or {}
        self.log_name = Path(str(inp.get("path") or "trial log")).name
        self.sha = str(inp.get("sha256") or "")
        self.objective = str(inp.get("objective") or "objective")
        units = getattr(a.trials, "units", "") or ""
        self.objective_label = f"{self.objective} [{units}]" if units else self.objective
        self.sign = float(getattr(a.trials, "sign", 1.0))
        self.direction = str(inp.get("direction") or "minimize")
        self.planning = self.d.get("planning") or {}
        self.backtest = self.d.get("backtest")

    def entry(self, name):
        return next((r for r in self.ranking if r["surrogate"] == name), None)

    def plan_part(self, *keys):
        for k in keys:
            v = self.planning.get(k)
            if v:
                return v
        return None

    def proposals(self):
        import pandas as pd

        p = getattr(self.a, "proposals", None)
        if p is None:
            rec = self.planning.get("proposals")
            if rec:
                p = pd.DataFrame(rec)
        return p if p is not None and len(p) else None




# ======================================================================================
# the content a section gives to both renderers
# ======================================================================================
@dataclass
class TableData:
    """A table's content, shared by the PDF and the notebook view.

    Cells are strings in paragraph markup (``<b>``, ``<i>``, ``<br/>``, ``<font>``,
    ``&nbsp;``): the subset of HTML that reportlab's ``Paragraph`` reads, so both
    renderers show the same text.  ``spans`` are reportlab spans,
    ``((col0, row0), (col1, row1))`` with -1 for the last column.
    """

    rows: list
    header_rows: int = 1
    spans: list = field(default_factory=list)
    extra: list = field(default_factory=list)  # reportlab-only style commands

    def to_pdf(self, widths, **kw):
        """The reportlab table (header rows bold, long tables split with the header)."""
        rows = [_cells(r, "cellhead" if i < self.header_rows else "cell")
                for i, r in enumerate(self.rows)]
        # reportlab's header styling needs at least one row; a table without a header
        # (header_rows=0) overrides that row's background through ``extra``.
        return _table(rows, widths, header_rows=max(self.header_rows, 1), spans=self.spans,
                      extra=list(self.extra) + list(kw.pop("extra", ())), **kw)

    def to_html(self) -> str:
        """An HTML table; spanned cells become one cell with ``colspan``."""
        ncol = max((len(r) for r in self.rows), default=0)
        covered, colspan = set(), {}
        for (c0, r0), (c1, r1) in self.spans:
            c1 = ncol - 1 if c1 == -1 else c1
            colspan[(r0, c0)] = c1 - c0 + 1
            covered |= {(r0, c) for c in range(c0 + 1, c1 + 1)}
        out = ["<table class='advisor-table'>"]
        for i, row in enumerate(self.rows):
            tag = "th" if i < self.header_rows else "td"
            cells = []
            for j, cell in enumerate(row):
                if (i, j) in covered:
                    continue
                span = colspan.get((i, j), 1)
                attr = f" colspan='{span}'" if span > 1 else ""
                cells.append(f"<{tag}{attr} style='text-align:left;vertical-align:top'>"
                             f"{_html_markup(str(cell))}</{tag}>")
            out.append("<tr>" + "".join(cells) + "</tr>")
        out.append("</table>")
        return "\n".join(out)


@dataclass(frozen=True)
class FigureSpec:
    """A named report figure: ``build(view) -> matplotlib Figure`` and its caption."""

    name: str
    build: Callable
    caption: str | Callable = ""

    def caption_for(self, v) -> str:
        return self.caption(v) if callable(self.caption) else self.caption


def _html_markup(text: str) -> str:
    """Paragraph markup as HTML: reportlab's ``<font size=5.8 color='#555'>`` (sizes in
    points) becomes a small grey span; everything else is already HTML."""
    text = re.sub(r"<font\b[^>]*>", "<span style='font-size:85%;color:#555555'>", text)
    return text.replace("</font>", "</span>")
