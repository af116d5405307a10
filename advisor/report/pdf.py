"""The design-review document: an assessment as a PDF a team can read at a review.

Sections, in order (every one present even when its evidence did not run, then saying
so in one line):

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

The document reads only the assessment (mainly its JSON payload,
:func:`advisor.report.export.assessment_to_dict`) and never refits a model.  Layout,
palette and wording are our own.  The file is written atomically.
"""

from __future__ import annotations

import math
import re
from pathlib import Path
from xml.sax.saxutils import escape

from reportlab.lib import colors
from reportlab.lib.enums import TA_LEFT
from reportlab.lib.pagesizes import A4
from reportlab.lib.styles import ParagraphStyle, getSampleStyleSheet
from reportlab.lib.units import mm
from reportlab.pdfgen import canvas as rl_canvas
from reportlab.platypus import (BaseDocTemplate, CondPageBreak, Frame, Image, KeepTogether,
                                LongTable, PageTemplate, Paragraph, Spacer, Table,
                                TableStyle)

from .export import atomic_path

__all__ = ["write_pdf", "CAUTION", "SECTIONS"]

CAUTION = ("This report is statistical advice drawn from past trial logs. It does not "
           "know the limits, hazards or constraints of your system beyond what the log "
           "contains. Try any suggested setting only within validated safe operating "
           "limits, following your site's procedures; local codes and licensed "
           "engineering practice govern. Nothing here guarantees safety.")

#: Section headings, in document order.
SECTIONS = ("1  Recommendation", "2  Data", "3  Evidence per surrogate",
            "4  Acquisition backtest", "5  Next campaign", "6  Method and reproducibility")

#: A campaign whose failure share reaches this is flagged (our choice: one trial in five
#: lost is enough to ask whether the space reaches outside the process window).
HIGH_FAILURE_SHARE = 0.2
_MAX_FAILED_LISTED = 30

_PAGE_W, _PAGE_H = A4
_MARGIN = 18 * mm
_TEXT_W = _PAGE_W - 2 * _MARGIN
_INK = colors.HexColor("#1a1a1a")
_RULE = colors.HexColor("#9aa3b5")
_HEAD_BG = colors.HexColor("#dfe4ee")
_ZEBRA = colors.HexColor("#f5f6f9")
_CAUTION_BG = colors.HexColor("#fbf3df")
_CAUTION_EDGE = colors.HexColor("#8a5a00")

_ACQ_WORDS = {"ei": "expected improvement", "pi": "probability of improvement",
              "ucb": "a confidence bound", "lcb": "a confidence bound",
              "thompson": "Thompson sampling", "random": "random search"}
_CONFIDENCE_WORDS = {
    "high": "High. No other working model is statistically tied with it on held-out "
            "CRPS, and it scored best in at least 90% of bootstrap replicates.",
    "moderate": "Moderate. It leads, but either another model is close (tied on "
                "held-out CRPS) or its lead held in fewer than 90% of bootstrap replicates.",
    "low": "Low. Another model is statistically tied with it, or it misses a guard rail "
           "on coverage or ordering; treat it as one reasonable choice among several.",
    "none": "None. No surrogate produced usable predictions on every fold.",
}


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

    from .figures import figure_png

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
        from .figures import model_styles

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
# 1. recommendation
# ======================================================================================
def _acq_text(acq) -> str:
    if not acq:
        return "no acquisition setting"
    name = str(acq.get("name", "?"))
    params = acq.get("params") or {}
    words = _ACQ_WORDS.get(name.lower(), name)
    if params:
        words += " (" + ", ".join(f"{k} = {_num(v) if _finite(v) else v}"
                                  for k, v in params.items()) + ")"
    return words


def _page_one(v: _View) -> list:
    d, rec = v.d, v.d.get("recommendation") or {}
    inp = d.get("input") or {}
    story = [Paragraph("Surrogate design review", _S["title"]),
             _p(f"{_e(v.log_name)} &nbsp;·&nbsp; objective {_e(v.objective_label)} "
                f"({_e(v.direction)}) &nbsp;·&nbsp; {_e(d.get('created', ''))}", "subtitle")]
    story += _heading(0)
    sur = rec.get("surrogate")
    if sur is None:
        story.append(_p("<b>No recommendation.</b> No surrogate produced usable predictions "
                        "on every fold; see section 3 for each model's error.", "lead"))
    else:
        scale = rec.get("variance_scale")
        if _finite(scale) and abs(float(scale) - 1.0) > 1e-9:
            scaling = (f"multiply its predictive standard deviation by {_num(scale)} "
                       "(the variance scale fitted on held-out folds)")
        else:
            scaling = "use its predictive variances as they are (no scaling needed)"
        src = rec.get("acquisition_source")
        src_text = ("chosen by the acquisition backtest" if src == "backtest"
                    else "a default: the acquisition backtest did not choose one")
        story.append(_p(f"Use the <b>{_e(sur)}</b> surrogate with "
                        f"<b>{_e(_acq_text(rec.get('acquisition')))}</b> ({src_text}), and "
                        f"{scaling}.", "lead"))
    conf = str(rec.get("confidence") or "none")
    story.append(_p(f"<b>Confidence:</b> {_e(_CONFIDENCE_WORDS.get(conf, conf))}"))
    if rec.get("statement"):
        story.append(_p(_e(rec["statement"])))
    story.append(_runner_up(v, rec))
    story.append(Paragraph("What this rests on", _S["h2"]))
    story.append(_basis_table(v, inp))
    story += [Spacer(1, 5 * mm), _box(CAUTION)]
    return story


def _runner_up(v: _View, rec) -> Paragraph:
    ru = rec.get("runner_up")
    if not ru:
        return _p("<b>Runner-up:</b> none; no second model produced usable predictions.")
    e = v.entry(ru) or {}
    c = e.get("comparison") or {}
    diff, lo, hi = c.get("crps_diff"), c.get("crps_diff_low"), c.get("crps_diff_high")
    text = f"<b>Runner-up:</b> {_e(ru)}."
    if _finite(diff):
        tied = bool(c.get("tied_with_leader"))
        text += (f" Its mean held-out CRPS is higher by {_num(diff)} (paired bootstrap "
                 f"95% interval {_num(lo)} to {_num(hi)}); "
                 + ("the interval contains zero, so the two are statistically tied"
                    if tied else "the interval excludes zero, so the gap is not noise")
                 + ".")
    lead = v.entry(rec.get("surrogate")) or {}
    pb = (lead.get("comparison") or {}).get("p_best")
    if _finite(pb):
        text += f" The leader's probability of being best is {float(pb):.2f}."
    per = (v.backtest or {}).get("per_surrogate") or {}
    s1, s2 = (per.get(rec.get("surrogate")) or {}).get("score"), (per.get(ru) or {}).get("score")
    if _finite(s1) and _finite(s2):
        text += (f" In the backtest their best settings score {_num(s1)} and {_num(s2)} "
                 "(median normalized-regret area, lower is better).")
    return _p(text)


def _basis_table(v: _View, inp) -> Table:
    d = v.d
    val = d.get("validation") or {}
    camps = d.get("campaigns") or []
    rows = [
        ["Log", f"{_e(v.log_name)} (SHA-256 {_e(v.sha[:16])}…)"],
        ["Trials", f"{inp.get('rows_used', 'n/a')} used, {inp.get('rows_failed', 0)} failed "
                   f"(of {inp.get('rows_read', 'n/a')} rows read)"],
        ["Parameters", f"{len(inp.get('parameters') or [])}: "
                       + _e(", ".join(inp.get("parameters") or []))],
        ["Campaigns", f"{len(camps)}" + (f" (column '{_e(inp.get('campaign'))}')"
                                         if inp.get("campaign") else " (no campaign column)")],
        ["Validation", f"{_e(val.get('scheme', 'n/a'))}: {val.get('n_folds', 'n/a')} folds, "
                       f"{val.get('tested_trials', 'n/a')} trials held out; "
                       f"{_e(val.get('reason', ''))}"],
        ["Candidates", _e(", ".join(v.names)) or "none"],
        ["Seed", f"{_e(d.get('seed'))}" + (" (quick budget)" if d.get("quick") else "")],
    ]
    return _table([_cells([f"<b>{k}</b>", x]) for k, x in rows], [30 * mm, _TEXT_W - 30 * mm],
                  zebra=False,
                  extra=[("BACKGROUND", (0, 0), (-1, 0), colors.white),
                         ("LINEBELOW", (0, 0), (-1, -2), 0.25, _RULE)], long=False)


# ======================================================================================
# 2. data
# ======================================================================================
def _data_section(v: _View) -> list:
    d = v.d
    story = _heading(1)
    story.append(Paragraph("Parameters", _S["h2"]))
    story.append(_parameter_table(d.get("space") or []))
    notes = d.get("notes") or []
    if notes:
        story.append(_p("Loader notes: " + _e("; ".join(notes[:12]))
                        + (f" (and {len(notes) - 12} more)" if len(notes) > 12 else ""),
                        "small"))
    story.append(Paragraph("Campaigns", _S["h2"]))
    story += _campaign_table(d.get("campaigns") or [])
    story.append(Paragraph("Failed trials", _S["h2"]))
    story.append(_failed_list(d.get("failed_trials") or []))
    story.append(Paragraph("Observation noise", _S["h2"]))
    story += _noise_block(v)
    return story


def _parameter_table(space) -> Table | Paragraph:
    if not space:
        return _p("No parameters recorded.")
    head = ["parameter", "type", "range or levels", "scale", "source", "note"]
    rows = [_cells(head, "cellhead")]
    for p in space:
        if "levels" in p:
            lv = [str(x) for x in p["levels"]]
            shown = ", ".join(lv[:12]) + (f", … ({len(lv)} levels)" if len(lv) > 12 else "")
        else:
            shown = f"{_num(p.get('low'), 4)} to {_num(p.get('high'), 4)}"
            if p.get("unit"):
                shown += f" {p['unit']}"
        rows.append(_cells([_e(p.get("name")), _e(p.get("kind")), _e(shown),
                            _e(p.get("scale", "")), _e(p.get("source", "")),
                            _e(p.get("note", ""))]))
    w = [46 * mm, 17 * mm, 34 * mm, 12 * mm, 15 * mm]
    return _table(rows, w + [_TEXT_W - sum(w)])


def _campaign_table(camps) -> list:
    if not camps:
        return [_p("No campaign information.")]
    rows = [_cells(["campaign", "trials", "failed", "failure share", "flag"], "cellhead")]
    flagged = []
    for c in camps:
        share = c.get("failure_share")
        high = _finite(share) and float(share) >= HIGH_FAILURE_SHARE
        if high:
            flagged.append(c.get("campaign"))
        rows.append(_cells([_e(c.get("campaign")), str(c.get("trials", "")),
                            str(c.get("failed", "")), _pct(share),
                            "<b>high failure share</b>" if high else ""]))
    out = [_table(rows, [45 * mm, 20 * mm, 20 * mm, 25 * mm, 40 * mm])]
    if flagged:
        out.append(_p(f"Campaigns with a failure share of {_pct(HIGH_FAILURE_SHARE)} or more: "
                      f"{_e(', '.join(map(str, flagged)))}. Check whether their settings "
                      "reached outside the working window before reusing that region.",
                      "small"))
    if len(camps) == 1:
        out.append(_p("One campaign only: campaign-to-campaign shifts cannot be checked.",
                      "small"))
    return out


def _failed_list(failed) -> Paragraph | Table:
    if not failed:
        return _p("No failed trials.")
    shown = failed[:_MAX_FAILED_LISTED]
    rows = [_cells(["line", "campaign", "reason"], "cellhead")]
    for f in shown:
        rows.append(_cells([str(f.get("line", "")), _e(f.get("campaign") or ""),
                            _e(f.get("reason", ""))]))
    if len(failed) > len(shown):
        rows.append(_cells(["", "", f"… and {len(failed) - len(shown)} more failed trials "
                                    "(all listed in the JSON output)"]))
    return _table(rows, [14 * mm, 30 * mm, _TEXT_W - 44 * mm])


def _noise_block(v: _View) -> list:
    noise = v.d.get("noise") or {}
    rep = noise.get("replicates")
    out = []
    if rep and _finite(rep.get("noise_std")):
        iv = rep.get("noise_std_interval") or [None, None]
        out.append(_p(f"Replicates: {rep.get('groups')} repeated settings ({rep.get('rows')} "
                      f"trials, {rep.get('dof')} degrees of freedom) give a pooled noise "
                      f"standard deviation of <b>{_num(rep['noise_std'])}</b> "
                      f"({_pct(rep.get('level', 0.95))} interval {_num(iv[0])} to "
                      f"{_num(iv[1])}, in {_e(v.objective_label)})."))
    else:
        out.append(_p("Replicates: no setting was repeated, so the log gives no direct "
                      "estimate of the observation noise."))
    fitted = noise.get("fitted") or {}
    rows = [_cells(["surrogate", "fitted noise std", "ratio to replicate estimate"],
                   "cellhead")]
    for n in v.names:
        f = fitted.get(n)
        ratio = (float(f) / float(rep["noise_std"]) if rep and _finite(f)
                 and _finite(rep.get("noise_std")) and float(rep["noise_std"]) > 0 else None)
        rows.append(_cells([_name(n), _num(f) if _finite(f) else "not reported by the model",
                            _num(ratio) if ratio is not None else "n/a"]))
    out.append(_table(rows, [60 * mm, 45 * mm, 45 * mm]))
    return out


# ======================================================================================
# 3. evidence
# ======================================================================================
_CAL_COLS = [("nll", "NLL", None), ("crps", "CRPS", None), ("coverage_50", "cov. 50%", 0.5),
             ("coverage_90", "cov. 90%", 0.9), ("coverage_95", "cov. 95%", 0.95),
             ("calibration_error", "cal. error", None), ("sharpness", "sharpness", None)]
_ORDER_COLS = [("spearman", "Spearman", None), ("kendall", "Kendall", None),
               ("top_quarter_spearman", "top-quarter Spearman", None),
               ("top_hit_rate", "top-3 hit", None), ("fit_seconds", "fit s", None),
               ("predict_seconds", "predict s", None)]


def _best_marks(v: _View, cols) -> dict:
    """Column key -> set of models holding the best value (coverage: nearest nominal)."""
    from ..scoring import LOWER_IS_BETTER

    out = {}
    for key, _, nominal in cols:
        vals = {}
        for n in v.ok:
            x = ((v.entry(n) or {}).get("metrics") or {}).get(key)
            if _finite(x):
                vals[n] = float(x)
        if len(vals) < 2:
            out[key] = set()
            continue
        if nominal is not None:
            score = {n: abs(x - nominal) for n, x in vals.items()}
        elif key in LOWER_IS_BETTER:
            score = {n: (x if LOWER_IS_BETTER[key] else -x) for n, x in vals.items()}
        else:  # seconds: lower is cheaper
            score = vals
        best = min(score.values())
        out[key] = {n for n, s in score.items() if s <= best + 1e-12 * max(1, abs(best))}
    return out


def _metric_cell(e, key, bold: bool) -> str:
    m = (e.get("metrics") or {}).get(key)
    pct = key.startswith("coverage") or key == "top_hit_rate"
    text = _pct(m) if pct else _num(m)
    if bold:
        text = f"<b>{text}</b>"
    iv = (e.get("intervals") or {}).get(key)
    if iv and all(_finite(x) for x in iv):
        lo, hi = (_pct(iv[0]), _pct(iv[1])) if pct else (_num(iv[0]), _num(iv[1]))
        text += f"<br/><font size=5.8 color='#555555'>{lo} – {hi}</font>"
    return text


def _metrics_table(v: _View, cols, first_w: float):
    marks = _best_marks(v, cols)
    rows = [_cells(["rank / surrogate"] + [lab for _, lab, _ in cols], "cellhead")]
    spans, extra = [], []
    for e in v.ranking:
        n = e["surrogate"]
        label = f"{e.get('rank', '')}. {_name(n)}"
        if e.get("status") != "ok":
            errs = e.get("failures") or []
            msg = "; ".join(f"fold {f.get('fold')}: {f.get('error')}" for f in errs[:3])
            if len(errs) > 3:
                msg += f"; and {len(errs) - 3} more folds"
            rows.append(_cells([label, f"<i>failed</i> ({_e(msg or e.get('status'))})"]
                               + [""] * (len(cols) - 1)))
            r = len(rows) - 1
            spans.append(((1, r), (-1, r)))
            extra.append(("TEXTCOLOR", (1, r), (-1, r), colors.HexColor("#7a1f1f")))
            continue
        rows.append(_cells([label] + [_metric_cell(e, k, n in marks[k]) for k, _, _ in cols]))
    w = (_TEXT_W - first_w) / len(cols)
    return _table(rows, [first_w] + [w] * len(cols), spans=spans, extra=extra)


def _evidence_section(v: _View) -> list:
    from .figures import (coverage_figure, fold_spread_figure, predicted_observed_figure,
                          reliability_figure)

    a = v.a
    story = _heading(2)
    story.append(_p("Scores of the held-out predictions (every trial predicted by a model "
                    "that never saw it). Below each value: its 95% bootstrap interval "
                    "(resampling within folds). <b>Bold</b>: best in the column among "
                    "working models (coverage: nearest its nominal level)."))
    story.append(Paragraph("Probabilistic accuracy and calibration", _S["h2"]))
    story.append(_metrics_table(v, _CAL_COLS, 38 * mm))
    story.append(Spacer(1, 3 * mm))
    story.append(Paragraph("Ordering and cost", _S["h2"]))
    story.append(_metrics_table(v, _ORDER_COLS, 38 * mm))
    story.append(_p("Lower is better for NLL, CRPS, calibration error and sharpness; "
                    "higher for the rank correlations and the top-region scores; seconds are "
                    "the mean per fold on this machine (they vary between runs).", "small"))
    story.append(Paragraph("How each model was fitted", _S["h2"]))
    story += _model_notes(v)
    if not v.ok:
        story.append(_p("No working model: no figures of held-out predictions."))
        return story
    metrics = {n: (v.entry(n) or {}).get("metrics") or {} for n in v.ok}
    intervals = {n: (v.entry(n) or {}).get("intervals") or {} for n in v.ok}
    rel = reliability_figure(a.predictions, v.styles, order=v.ok)
    cov = coverage_figure(metrics, intervals, v.styles, order=v.ok)
    story.append(CondPageBreak(85 * mm))
    story.append(_side_by_side(
        [_image(rel, _TEXT_W / 2 - 4),
         _p("Reliability: share of held-out trials with F(y) ≤ p against p. Above the "
            "diagonal in the lower half and below it in the upper half means intervals "
            "too narrow.", "caption")],
        [_image(cov, _TEXT_W / 2 - 4),
         _p("Coverage of the central intervals against nominal (black ticks), with 95% "
            "bootstrap intervals.", "caption")]))
    top = v.ok[:3]
    story.append(_figure_block(
        predicted_observed_figure(a.predictions, top, v.sign, v.objective_label, v.styles),
        f"Predicted against observed for the top {len(top)} model(s), in the log's units, "
        "with 90% predictive intervals; open markers fall outside the interval."))
    story.append(_figure_block(
        fold_spread_figure(a.fold_metrics, "crps", v.styles, order=v.ok,
                           metric_label=f"held-out CRPS per fold ({v.objective_label})"),
        "Spread over folds: each marker is one fold's mean CRPS; the bar is the median. "
        "Strips that overlap mean the folds do not agree on the order."))
    story.append(Paragraph("Recalibration", _S["h2"]))
    story += _recalibration_table(v)
    story.append(Paragraph("Scores under each validation scheme", _S["h2"]))
    story += _scheme_table(v)
    return story


def _model_notes(v: _View) -> list:
    """Each model's description and the facts it recorded (approximation used, neural
    process mode, ensemble size, samples kept, ...), so the reader knows what was run."""
    rows = [_cells(["surrogate", "model", "as fitted (largest fold)"], "cellhead")]
    for e in v.ranking:
        facts = []
        for k, val in (e.get("info") or {}).items():
            if isinstance(val, float):
                val = f"{val:.4g}"
            elif isinstance(val, (list, tuple)):
                if len(val) > 6:
                    continue
                val = ", ".join(str(x) for x in val)
            facts.append(f"{k.replace('_', ' ')}: {val}")
        rows.append(_cells([_name(e["surrogate"]), _e(e.get("description", "")),
                            _e("; ".join(facts)) or "–"]))
    return [_table(rows, [30 * mm, 62 * mm, _TEXT_W - 92 * mm])]


def _scheme_table(v: _View) -> list:
    """Mean CRPS and 90% coverage of each working model under every scheme that ran."""
    val = v.d.get("validation") or {}
    by = val.get("metrics_by_scheme") or {}
    schemes = list(by)
    if len(schemes) < 2:
        return [_p(f"Only the {_e(val.get('scheme', 'primary'))} scheme ran (the quick budget "
                   "scores one scheme; a thorough run also scores the others that apply).")]
    head = ["surrogate"] + [f"CRPS, {s}" for s in schemes] + [f"cov 90, {s}" for s in schemes]
    rows = [_cells(head, "cellhead")]
    for n in v.ok:
        crps = [_num((by[s].get(n) or {}).get("crps")) for s in schemes]
        cov = [_pct((by[s].get(n) or {}).get("coverage_90")) for s in schemes]
        rows.append(_cells([_name(n)] + crps + cov))
    w = (_TEXT_W - 38 * mm) / (len(head) - 1)
    note = ("The ranking rests on the first scheme (" + _e(val.get("scheme", "")) + "). "
            "Shuffled k-fold is usually the most optimistic: campaign trials cluster near "
            "the optimum, so a held-out trial tends to have a near twin in training.")
    return [_table(rows, [38 * mm] + [w] * (len(head) - 1)), _p(note, "small")]


def _recalibration_table(v: _View) -> list:
    top = ["", "", "coverage of the 90% interval", "", "", "calibration error", "", "",
           "CRPS", ""]
    head = ["surrogate", "variance scale", "raw", "scaled", "isotonic", "raw", "scaled",
            "isotonic", "raw", "scaled"]
    rows = [_cells(top, "cellhead"), _cells(head, "cellhead")]
    for n in v.ok:
        rc = (v.entry(n) or {}).get("recalibration")
        if not rc:
            continue
        b, s, i = (rc.get(k) or {} for k in ("before", "after_scale", "after_isotonic"))
        rows.append(_cells([_name(n), _num(rc.get("scale")), _pct(b.get("coverage_90")),
                            _pct(s.get("coverage_90")), _pct(i.get("coverage_90")),
                            _num(b.get("calibration_error")), _num(s.get("calibration_error")),
                            _num(i.get("calibration_error")), _num(b.get("crps")),
                            _num(s.get("crps"))]))
    if len(rows) == 2:
        return [_p("Recalibration did not run.")]
    w = (_TEXT_W - 38 * mm) / (len(head) - 1)
    spans = [((2, 0), (4, 0)), ((5, 0), (7, 0)), ((8, 0), (9, 0))]
    return [_table(rows, [38 * mm] + [w] * (len(head) - 1), header_rows=2, spans=spans),
            _p("Each model's variance scale and isotonic map are fitted on the other folds "
               "and applied to the held-out one (cross-fitted), so the 'after' columns are "
               "honest held-out scores. A scale below 1 means the raw intervals were too "
               "wide; above 1, too narrow.", "small")]


# ======================================================================================
# 4. backtest
# ======================================================================================
def _backtest_section(v: _View) -> list:
    from .figures import backtest_figure

    bt = v.backtest
    story = []
    if not bt:
        story += _heading(3)
        story.append(_p("The acquisition backtest did not run for this report; the "
                        "acquisition setting on page one is a default."))
        return story
    choice = bt.get("choice") or {}
    cfg = bt.get("config") or {}
    intro = (_p(
        "Each surrogate and acquisition setting was replayed on the logged campaigns "
        "(picking only trials that were actually run) and run on simulated campaigns "
        "drawn from a Gaussian-process posterior of the log, from the same starting "
        f"trials as random search (batch {cfg.get('batch', 1)}, budget "
        f"{cfg.get('budget', 'n/a')}). Curves show normalized regret of the best so far: "
        "0 is the pool's best value, 1 its worst; line = median, band = interquartile "
        "range."))
    fig = backtest_figure(bt, v.styles)
    story.append(KeepTogether(_heading(3) + [intro, _image(fig), _p(
        "Each surrogate with the setting the backtest chose for it; dotted black with grey "
        "band: random order; dashed grey: the campaigns' actual order.", "caption")]))
    for r in choice.get("reasons") or []:
        story.append(_p("• " + _e(r), "small"))
    story.append(Paragraph("Trials needed to reach the best 5%", _S["h2"]))
    story += _ttb_table(v, bt)
    fails = bt.get("failures") or []
    if fails:
        shown = "; ".join(f"{_e(f.get('surrogate'))} {_e(f.get('label'))} "
                          f"({_e(f.get('experiment'))}): {_e(f.get('error'))}"
                          for f in fails[:5])
        story.append(_p(f"Failed runs ({len(fails)}): {shown}"
                        + (" …" if len(fails) > 5 else ""), "small"))
    return story


def _ttb_cell(res) -> str:
    t = (res or {}).get("trials_to_best5") or {}
    if not _finite(t.get("median")):
        return _e((res or {}).get("error") or "n/a")[:60]
    text = f"{_num(t['median'])} ({_num(t.get('q25'))}–{_num(t.get('q75'))})"
    if t.get("censored"):
        text += f"<br/><font size=5.8>{t['censored']} of {t.get('n')} never</font>"
    return text


def _ttb_table(v: _View, bt) -> list:
    parts = [p for p in ("replay", "simulated")
             if (bt.get(p) or {}).get("results") and not (bt.get(p) or {}).get("error")]
    if not parts:
        return [_p("Neither experiment produced results.")]
    head = ["surrogate", "setting"] + [f"{p}: median (quartiles)" for p in parts]
    rows = [_cells(head, "cellhead")]
    keys = []
    for p in parts:
        for r in bt[p]["results"]:
            k = (r.get("surrogate"), r.get("label"))
            if k not in keys:
                keys.append(k)
    chosen = {(n, (c or {}).get("label")) for n, c in (bt.get("per_surrogate") or {}).items()}
    for k in keys:
        cells = [_name(k[0]), _e(k[1]) + (" <b>(chosen)</b>" if k in chosen else "")]
        for p in parts:
            res = next((r for r in bt[p]["results"]
                        if (r.get("surrogate"), r.get("label")) == k), None)
            cells.append(_ttb_cell(res))
        rows.append(_cells(cells))
    for ref in ("random", "actual"):
        cells = ["<i>reference</i>", _e(ref + " order")]
        have = False
        for p in parts:
            res = (bt.get(p) or {}).get(ref)
            have |= res is not None
            cells.append(_ttb_cell(res) if res else "n/a")
        if have:
            rows.append(_cells(cells))
    w = (_TEXT_W - 80 * mm) / len(parts)
    return [_table(rows, [42 * mm, 38 * mm] + [w] * len(parts)),
            _p("Trials counted from the first, the starting trials included; a run that "
               "never reached the best 5% counts as its length + 1 ('never').", "small")]


# ======================================================================================
# 5. next campaign
# ======================================================================================
def _planning_caution() -> str:
    try:
        from ..planning import CAUTION as plan_caution
    except ImportError:  # planning is optional for the report
        return CAUTION
    return plan_caution


def _next_section(v: _View) -> list:
    from .figures import (cost_figure, learning_curve_figure, proposals_figure,
                          relevance_figure)

    story = []
    rel = v.plan_part("relevance", "parameter_relevance")
    learn = v.plan_part("learning_curve", "learning")
    cost = v.plan_part("cost", "cost_projection")
    props = v.proposals()
    if not (rel or learn or cost or props is not None):
        return _heading(4) + [_p("The next-campaign plan did not run for this report.")]
    if rel:  # the heading travels with the first figure, never alone at a page foot
        story.append(KeepTogether(_heading(4) + [Paragraph("Which parameters matter", _S["h2"]),
                                   _image(relevance_figure(rel)),
                                   _p(_e(rel.get("method", "")), "caption")]))
        story += _freeze_block(rel)
        if rel.get("caution"):
            story.append(_p(_e(rel["caution"]), "small"))
    else:
        story += _heading(4) + [Paragraph("Which parameters matter", _S["h2"]),
                  _p("Parameter relevance did not run.")]
    if props is not None:
        best = _best_logged(v)
        # One block, so the caution is never a page away from the settings it qualifies.
        story.append(KeepTogether([Paragraph("Proposed first batch", _S["h2"])]
                                  + _proposal_tables(v, props) + [_side_by_side(
            [_image(proposals_figure(props, v.objective_label, best, v.direction),
                    _TEXT_W / 2 - 4),
             _p("Predicted mean and 90% interval of each proposal (new observation, "
                "noise included), against the best logged value.", "caption")],
            _box(_planning_caution(), "Before running these", _TEXT_W / 2 - 6))]))
    else:
        story += [Paragraph("Proposed first batch", _S["h2"]),
                  _p("No proposals were requested for this report.")]
    left = [_image(learning_curve_figure(learn, v.objective_label, v.styles),
                   _TEXT_W / 2 - 4),
            _p(_e((learn or {}).get("reading") or "Learning curve did not run."), "caption")]
    right = [_image(cost_figure(cost, v.styles), _TEXT_W / 2 - 4),
             _p(_e((cost or {}).get("method") or "Cost projection did not run."), "caption")]
    story.append(KeepTogether([Paragraph("More trials and their cost", _S["h2"]),
                               _side_by_side(left, right)]))
    if cost:
        story += _cost_table(cost)
    return story


def _best_logged(v: _View):
    try:
        y = v.a.trials.y_raw
        return float(min(y) if v.direction == "minimize" else max(y))
    except Exception:  # a fake or partial trial table: the reference line is optional
        return None


def _freeze_block(rel) -> list:
    frozen = [r for r in rel.get("parameters") or [] if r.get("freeze")]
    if not frozen:
        return [_p("No parameter is a freeze candidate: each has a total effect that "
                   "cannot be ruled below the threshold, or a clear permutation importance.",
                   "small")]
    rows = [_cells(["parameter", "freeze at (best logged)", "evidence"], "cellhead")]
    for r in frozen:
        rows.append(_cells([_e(r.get("name")), _e(r.get("freeze_value")),
                            _e(r.get("evidence", ""))]))
    return [_p(f"{len(frozen)} freeze candidate(s):", "small"),
            _table(rows, [38 * mm, 30 * mm, _TEXT_W - 68 * mm])]


def _proposal_tables(v: _View, props) -> list:
    """Proposals transposed (parameters as rows) so twenty parameters still fit."""
    params = [p for p in (v.d.get("input") or {}).get("parameters") or [] if p in props]
    n = len(props)
    out = []
    per = 10
    for start in range(0, n, per):
        idx = list(range(start, min(n, start + per)))
        head = ["parameter"] + [f"#{i + 1}" for i in idx]
        rows = [_cells(head, "cellhead")]
        for p in params:
            rows.append(_cells([_e(p)] + [_e(_fmt_setting(props[p].iloc[i])) for i in idx]))
        for key, lab in (("predicted_mean", f"predicted {v.objective_label}"),
                         ("predicted_low_90", "90% interval low"),
                         ("predicted_high_90", "90% interval high")):
            if key in props:
                rows.append(_cells([f"<b>{_e(lab)}</b>"]
                                   + [_num(props[key].iloc[i]) for i in idx]))
        w = min(20 * mm, (_TEXT_W - 46 * mm) / len(idx))
        extra = [("LINEABOVE", (0, len(params) + 1), (-1, len(params) + 1), 0.6, _RULE)]
        out += [_table(rows, [46 * mm] + [w] * len(idx), extra=extra), Spacer(1, 2 * mm)]
    return out


def _fmt_setting(x) -> str:
    if isinstance(x, float):
        return _num(x, 4)
    return "" if x is None else str(x)


def _cost_table(cost) -> list:
    rows = [_cells(["surrogate", "fit s at log size", "exponent b (t ∝ n^b)",
                    f"projected s / iteration at {cost.get('projected_size', '?')}",
                    "over limit"], "cellhead")]
    for n, e in (cost.get("surrogates") or {}).items():
        if e.get("error"):
            rows.append(_cells([_name(n), f"<i>error</i>: {_e(e['error'])}", "", "", ""]))
            continue
        fit = (e.get("fit_seconds") or [None])[-1]
        rows.append(_cells([_name(n), _num(fit), _num(e.get("fit_seconds_exponent")),
                            _num(e.get("projected_seconds_per_iteration")),
                            "yes" if e.get("over_max_fit_seconds") else "no"]))
    return [_table(rows, [45 * mm, 28 * mm, 32 * mm, 45 * mm, _TEXT_W - 150 * mm]),
            _p("Timings were measured on this machine and differ between runs.", "small")]


# ======================================================================================
# 6. method and reproducibility
# ======================================================================================
def _doc_summary(fn) -> str:
    text = (fn.__doc__ or "").strip().split("\n\n")[0]
    text = re.sub(r":math:`([^`]*)`", r"\1", text)
    text = re.sub(r":func:`~?([^`]*)`", r"\1", text)
    for key, who in (("[KFE2018]", "Kuleshov et al. (2018)"),
                     ("[GRWG2005]", "Gneiting et al. (2005)"),
                     ("[GR2007]", "Gneiting & Raftery (2007)")):
        text = text.replace(key, who)
    return " ".join(text.replace("``", "").split())


def _metric_definitions() -> list[list[str]]:
    from .. import scoring as sc

    return [
        ["NLL", _doc_summary(sc.gaussian_nll),
         "½ log(2πσ²) + (y − μ)² / (2σ²), mean over held-out trials (nats)",
         "Gneiting & Raftery (2007), logarithmic score"],
        ["CRPS", _doc_summary(sc.gaussian_crps),
         "σ [z(2Φ(z) − 1) + 2φ(z) − 1/√π], z = (y − μ)/σ; units of the objective",
         "Gneiting, Raftery, Westveld & Goldman (2005), Eq. 5"],
        ["coverage", _doc_summary(sc.interval_coverage),
         "share of |y − μ| ≤ z<sub>(1+l)/2</sub> σ, for l = 50%, 90%, 95%", "definition"],
        ["calibration error", _doc_summary(sc.calibration_error),
         "mean over p = 0.05, 0.10, …, 0.95 of (p − q<sub>p</sub>)², q<sub>p</sub> = share of F(y) ≤ p",
         "Kuleshov, Fenner & Ermon (2018), Eq. 9 (averaged, not summed)"],
        ["sharpness", _doc_summary(sc.sharpness), "mean of σ² (squared objective units)",
         "Kuleshov, Fenner & Ermon (2018), Sec. 3.3"],
        ["Spearman, Kendall", "Rank correlation of the predicted means with the held-out "
         "objective (scipy.stats).", "ρ on ranks; τ by concordant pairs",
         "Spearman (1904); Kendall (1938)"],
        ["best-region scores", _doc_summary(sc.best_region_scores),
         "Spearman over the best quarter of y; hit if argmin μ is among the 3 best y",
         "our choice, motivated by Foldager et al. (2023)"],
    ]


def _markdown_paragraphs(text: str) -> list:
    """The ranking rule's light markup (**bold**, *italic*, numbered items) as paragraphs."""
    out = []
    for block in re.split(r"\n\s*\n", text.strip()):
        lines = [ln.strip() for ln in block.splitlines()]
        items, cur = [], []
        for ln in lines:
            if re.match(r"^\d+\.\s", ln) and cur:
                items.append(" ".join(cur))
                cur = []
            cur.append(ln)
        if cur:
            items.append(" ".join(cur))
        for it in items:
            t = _e(it)
            t = re.sub(r"\*\*(.+?)\*\*", r"<b>\1</b>", t)
            t = re.sub(r"(?<![\w*])\*(?!\s)(.+?)(?<!\s)\*(?![\w*])", r"<i>\1</i>", t)
            out.append(_p(t, "small"))
    return out


def _appendix(v: _View) -> list:
    d = v.d
    story = _heading(5)
    story.append(Paragraph("Metrics", _S["h2"]))
    rows = [_cells(["metric", "definition", "formula", "source"], "cellhead")]
    rows += [_cells([_e(r[0]), _e(r[1]), r[2], _e(r[3])]) for r in _metric_definitions()]
    story.append(_table(rows, [24 * mm, 62 * mm, 50 * mm, _TEXT_W - 136 * mm]))
    story.append(_p("μ, σ: predictive mean and standard deviation of a new observation "
                    "(noise included); all scores in minimization form.", "small"))
    val = d.get("validation") or {}
    story.append(Paragraph("Validation scheme", _S["h2"]))
    story.append(_p(f"<b>{_e(val.get('scheme', 'n/a'))}</b>: {_e(val.get('description', ''))}. "
                    f"Why: {_e(val.get('reason', 'n/a'))}."))
    story.append(Paragraph("Ranking rule", _S["h2"]))
    rule = d.get("ranking_rule") or ""
    story += _markdown_paragraphs(rule) if rule else [_p("Not recorded.")]
    story.append(Paragraph("Reproducibility", _S["h2"]))
    vers = d.get("versions") or {}
    timing = d.get("timing") or {}
    rows = [
        ["command", _e(d.get("command") or "(called from Python; no command line)")],
        ["seed", _e(d.get("seed"))],
        ["budget", "quick" if d.get("quick") else "full"],
        ["created", _e(d.get("created"))],
        ["input", _e((d.get("input") or {}).get("path"))],
        ["input SHA-256", f"<font name='{_MONO}' size=6.5>{_e(v.sha)}</font>"],
        ["versions", _e(", ".join(f"{k} {x}" for k, x in vers.items()))],
        ["run time", _e(", ".join(f"{k.replace('_', ' ')} {_num(x)}" for k, x in timing.items()))],
    ]
    story.append(_table([_cells([f"<b>{k}</b>", x]) for k, x in rows],
                        [28 * mm, _TEXT_W - 28 * mm], zebra=False, long=False,
                        extra=[("BACKGROUND", (0, 0), (-1, 0), colors.white),
                               ("LINEBELOW", (0, 0), (-1, -2), 0.25, _RULE)]))
    story.append(Spacer(1, 4 * mm))
    story.append(_box(CAUTION))
    return story


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
    story = (_page_one(v) + _data_section(v) + _evidence_section(v) + _backtest_section(v)
             + _next_section(v) + _appendix(v))
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
