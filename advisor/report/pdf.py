"""The design-review document (reportlab).  First cut: decision, caution, ranking."""

from __future__ import annotations

from pathlib import Path

from reportlab.lib import colors
from reportlab.lib.pagesizes import A4
from reportlab.lib.styles import getSampleStyleSheet
from reportlab.lib.units import mm
from reportlab.platypus import Paragraph, SimpleDocTemplate, Spacer, Table, TableStyle

from .export import atomic_path

__all__ = ["write_pdf", "CAUTION"]

CAUTION = ("This report is statistical advice drawn from past trial logs. It does not "
           "know the limits, hazards or constraints of your system beyond what the log "
           "contains. Try any suggested setting only within validated safe operating "
           "limits, following your site's procedures; local codes and licensed "
           "engineering practice govern. Nothing here guarantees safety.")


def write_pdf(a, dest: Path) -> Path:
    d = a.to_dict()
    styles = getSampleStyleSheet()
    story = [Paragraph(f"Surrogate recommendation: {Path(d['input']['path']).name}",
                       styles["Title"])]
    rec = d["recommendation"]
    story.append(Paragraph(f"<b>Use {rec['surrogate']}</b> with "
                           f"{rec['acquisition']['name']} {rec['acquisition']['params']}. "
                           f"Confidence: {rec['confidence']}. {rec['statement']}",
                           styles["BodyText"]))
    story.append(Spacer(1, 4 * mm))
    box = Table([[Paragraph(CAUTION, styles["BodyText"])]], colWidths=[170 * mm])
    box.setStyle(TableStyle([("BOX", (0, 0), (-1, -1), 1, colors.black),
                             ("BACKGROUND", (0, 0), (-1, -1), colors.HexColor("#f2f2f2"))]))
    story += [box, Spacer(1, 4 * mm)]
    rows = [["rank", "surrogate", "CRPS", "NLL", "cov 90", "fit s"]]
    for r in d["ranking"]:
        m = r["metrics"]
        rows.append([r["rank"], r["surrogate"], _f(m.get("crps")), _f(m.get("nll")),
                     _f(m.get("coverage_90")), _f(m.get("fit_seconds"))])
    t = Table(rows)
    t.setStyle(TableStyle([("GRID", (0, 0), (-1, -1), 0.3, colors.grey)]))
    story.append(t)
    story.append(Spacer(1, 4 * mm))
    story.append(Paragraph(f"Input SHA-256 {d['input']['sha256'][:16]}, seed {d['seed']}.",
                           styles["BodyText"]))
    with atomic_path(dest) as tmp:
        SimpleDocTemplate(str(tmp), pagesize=A4).build(story)
    return Path(dest)


def _f(v):
    return "n/a" if v is None else f"{v:.4g}"
