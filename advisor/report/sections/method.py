"""Section 6, method and reproducibility: metric definitions and sources, validation
scheme, ranking rule, command, seed, versions, date, input SHA-256."""

from __future__ import annotations

import re

from reportlab.lib import colors
from reportlab.lib.units import mm
from reportlab.platypus import Paragraph, Spacer

from ._base import (_MONO, CAUTION, _RULE, _S, _TEXT_W, _View, _box, _cells, _e, _heading,
                    _num, _p, _table)

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
    from ... import scoring as sc

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


def story(v: _View) -> list:
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


