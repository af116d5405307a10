"""Section 3, evidence per surrogate: metric tables with bootstrap intervals (best value
in bold), how each model was fitted, reliability diagram, coverage bars, predicted
against observed, spread over folds, recalibration before and after, and the scores
under each validation scheme.

:func:`metrics_table` (the ranking) and :data:`FIGURES` are shared with the notebook
view."""

from __future__ import annotations

from reportlab.lib import colors
from reportlab.lib.units import mm
from reportlab.platypus import CondPageBreak, KeepTogether, Paragraph, Spacer

from ._base import (_S, _TEXT_W, FigureSpec, TableData, _cells, _e, _figure_block, _finite,
                    _heading, _image, _name, _num, _p, _pct, _side_by_side, _table, _View)

# ======================================================================================
# 3. evidence
# ======================================================================================
#: (metric key, column label, nominal level for coverage) of the two metric tables.
CALIBRATION_COLUMNS = [("nll", "NLL", None), ("crps", "CRPS", None),
                       ("coverage_50", "cov. 50%", 0.5), ("coverage_90", "cov. 90%", 0.9),
                       ("coverage_95", "cov. 95%", 0.95),
                       ("calibration_error", "cal. error", None),
                       ("sharpness", "sharpness", None)]
ORDERING_COLUMNS = [("spearman", "Spearman", None), ("kendall", "Kendall", None),
                    ("top_quarter_spearman", "top-quarter Spearman", None),
               ("top_hit_rate", "top-3 hit", None), ("fit_seconds", "fit s", None),
               ("predict_seconds", "predict s", None)]


def _best_marks(v: _View, cols) -> dict:
    """Column key -> set of models holding the best value (coverage: nearest nominal)."""
    from ...scoring import LOWER_IS_BETTER

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


def metrics_table(v: _View, cols=None) -> TableData:
    """The ranking with one metric per column (default: accuracy and calibration),
    each value above its 95% bootstrap interval, the best value of a column in bold; a
    failed model spans the row with its first errors."""
    cols = CALIBRATION_COLUMNS if cols is None else cols
    marks = _best_marks(v, cols)
    rows = [["rank / surrogate"] + [lab for _, lab, _ in cols]]
    spans, extra = [], []
    for e in v.ranking:
        n = e["surrogate"]
        label = f"{e.get('rank', '')}. {_name(n)}"
        if e.get("status") != "ok":
            errs = e.get("failures") or []
            msg = "; ".join(f"fold {f.get('fold')}: {f.get('error')}" for f in errs[:3])
            if len(errs) > 3:
                msg += f"; and {len(errs) - 3} more folds"
            rows.append([label, f"<i>failed</i> ({_e(msg or e.get('status'))})"]
                        + [""] * (len(cols) - 1))
            r = len(rows) - 1
            spans.append(((1, r), (-1, r)))
            extra.append(("TEXTCOLOR", (1, r), (-1, r), colors.HexColor("#7a1f1f")))
            continue
        rows.append([label] + [_metric_cell(e, k, n in marks[k]) for k, _, _ in cols])
    return TableData(rows, spans=spans, extra=extra)


#: Rank metrics whose spread over folds the ties table shows (key, label).
FOLD_SPREAD_COLUMNS = [("spearman", "Spearman"), ("top_hit_rate", "top-3 hit")]


def _mean_sd(e, key) -> str:
    m = (e.get("metrics") or {}).get(key)
    spread = e.get("metrics_fold_spread") or {}
    sd, k = spread.get(f"{key}_fold_sd"), spread.get(f"{key}_folds")
    text = _num(m)
    if _finite(sd):
        text += f" ± {_num(sd, 2)}"
    if _finite(k):
        text += f"<br/><font size=5.8 color='#555555'>{int(k)} folds</font>"
    return text


def ties_table(v: _View) -> TableData:
    """Each working model against the leader: the CRPS difference with its block-
    bootstrap interval, P(best) from the same resampling, the model confidence set's
    p-value and membership, and the rank metrics' mean ± sd over folds."""
    rows = [["rank / surrogate", "CRPS − leader (95% interval)", "P(best)",
             "MCS p-value", "in the 95% set"]
            + [f"{lab} (mean ± sd over folds)" for _, lab in FOLD_SPREAD_COLUMNS]]
    leader = (v.d.get("recommendation") or {}).get("surrogate")
    for e in v.ranking:
        if e.get("status") != "ok":
            continue
        c = e.get("comparison") or {}
        diff = _num(c.get("crps_diff"))
        if e["surrogate"] == leader:
            diff = "leader"
        elif _finite(c.get("crps_diff_low")) and _finite(c.get("crps_diff_high")):
            diff += (f"<br/><font size=5.8 color='#555555'>{_num(c['crps_diff_low'])} – "
                     f"{_num(c['crps_diff_high'])}</font>")
        in_set = c.get("in_mcs", c.get("tied_with_leader"))
        rows.append([f"{e.get('rank', '')}. {_name(e['surrogate'])}", diff,
                     _num(c.get("p_best"), 2), _num(c.get("mcs_pvalue"), 2),
                     "<b>yes</b>" if in_set else "no"]
                    + [_mean_sd(e, k) for k, _ in FOLD_SPREAD_COLUMNS])
    return TableData(rows)


def ties_intro(v: _View) -> str:
    """The level and the block structure behind the ties table (paragraph markup)."""
    val = v.d.get("validation") or {}
    blocks = val.get("ranking_blocks") or {}
    inp = v.d.get("input") or {}
    level = blocks.get("level", 0.05)
    n_blocks = blocks.get("n_blocks")
    by_campaign = bool(inp.get("campaign")) and len(v.d.get("campaigns") or []) >= 2
    unit = ("campaign × fold cells" if by_campaign else
            "runs of consecutive held-out trials, four per fold")
    strat = (", stratified by fold," if blocks.get("stratified_by_fold") else "")
    return (f"Ties are decided by a {100 * (1 - float(level)):.0f}% model confidence set "
            f"(Hansen, Lunde &amp; Nason 2011): a model is tied with the leader when its "
            f"p-value is at least {_num(level)}. Held-out errors are correlated within a "
            f"campaign and a fold, so the unit of resampling is the block: "
            f"{_num(n_blocks) if _finite(n_blocks) else 'n/a'} blocks ({unit}). The CRPS "
            f"interval and P(best) come from a block bootstrap{strat} with the leader "
            "re-selected in every replicate; Spearman and top-3 hit are averaged within "
            "folds (± their standard deviation over folds). The README states the measured "
            "error rates of these calls.")


def _metrics_table(v: _View, cols, first_w: float):
    w = (_TEXT_W - first_w) / len(cols)
    return metrics_table(v, cols).to_pdf([first_w] + [w] * len(cols))


def _ok_metrics(v: _View):
    metrics = {n: (v.entry(n) or {}).get("metrics") or {} for n in v.ok}
    intervals = {n: (v.entry(n) or {}).get("intervals") or {} for n in v.ok}
    return metrics, intervals


def _reliability(v: _View):
    from ..figures import reliability_figure

    return reliability_figure(v.a.predictions, v.styles, order=v.ok)


def _coverage(v: _View):
    from ..figures import coverage_figure

    metrics, intervals = _ok_metrics(v)
    return coverage_figure(metrics, intervals, v.styles, order=v.ok)


def _predicted_observed(v: _View):
    from ..figures import predicted_observed_figure

    return predicted_observed_figure(v.a.predictions, v.ok[:3], v.sign, v.objective_label,
                                     v.styles)


def _fold_spread(v: _View):
    from ..figures import fold_spread_figure

    return fold_spread_figure(v.a.fold_metrics, "crps", v.styles, order=v.ok,
                              metric_label=f"held-out CRPS per fold ({v.objective_label})")


FIGURES = {f.name: f for f in (
    FigureSpec("calibration", _reliability,
               "Reliability: share of held-out trials with F(y) ≤ p against p. Above the "
               "diagonal in the lower half and below it in the upper half means intervals "
               "too narrow."),
    FigureSpec("coverage", _coverage,
               "Coverage of the central intervals against nominal (black ticks), with 95% "
               "bootstrap intervals."),
    FigureSpec("predicted_observed", _predicted_observed,
               lambda v: f"Predicted against observed for the top {len(v.ok[:3])} model(s), "
                         "in the log's units, with 90% predictive intervals; open markers "
                         "fall outside the interval."),
    FigureSpec("fold_spread", _fold_spread,
               "Spread over folds: each marker is one fold's mean CRPS; the bar is the "
               "median. Strips that overlap mean the folds do not agree on the order."),
)}

#: The sentence that introduces the metric tables.
INTRO = ("Scores of the held-out predictions (every trial predicted by a model "
         "that never saw it). Below each value: its 95% bootstrap interval "
         "(resampling within folds). <b>Bold</b>: best in the column among "
         "working models (coverage: nearest its nominal level).")


def story(v: _View) -> list:
    story = _heading(2)
    story.append(_p(INTRO))
    story.append(Paragraph("Probabilistic accuracy and calibration", _S["h2"]))
    story.append(_metrics_table(v, CALIBRATION_COLUMNS, 38 * mm))
    story.append(Spacer(1, 3 * mm))
    story.append(Paragraph("Ordering and cost", _S["h2"]))
    story.append(_metrics_table(v, ORDERING_COLUMNS, 38 * mm))
    story.append(_p("Lower is better for NLL, CRPS, calibration error and sharpness; "
                    "higher for the rank correlations and the top-region scores; seconds are "
                    "the mean per fold on this machine (they vary between runs).", "small"))
    if v.ok:  # heading, the rule and its table stay on one page
        w = [38 * mm, 34 * mm, 16 * mm, 18 * mm, 18 * mm]
        rest = (_TEXT_W - sum(w)) / len(FOLD_SPREAD_COLUMNS)
        story.append(KeepTogether([
            Paragraph("Ties and the chance of being best", _S["h2"]),
            _p(ties_intro(v), "small"),
            ties_table(v).to_pdf(w + [rest] * len(FOLD_SPREAD_COLUMNS))]))
    story.append(Paragraph("How each model was fitted", _S["h2"]))
    story += _model_notes(v)
    if not v.ok:
        story.append(_p("No working model: no figures of held-out predictions."))
        return story
    cal, cov = FIGURES["calibration"], FIGURES["coverage"]
    story.append(CondPageBreak(85 * mm))
    story.append(_side_by_side(
        [_image(cal.build(v), _TEXT_W / 2 - 4), _p(cal.caption_for(v), "caption")],
        [_image(cov.build(v), _TEXT_W / 2 - 4), _p(cov.caption_for(v), "caption")]))
    for name in ("predicted_observed", "fold_spread"):
        f = FIGURES[name]
        story.append(_figure_block(f.build(v), f.caption_for(v)))
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
                val = ", ".join(f"{x:.4g}" if isinstance(x, float) else str(x) for x in val)
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
    note = ("The ranking rests on the first scheme (" + _e(val.get("scheme", "")) + "); the "
            "others are diagnostics: on the real-log benchmark forward chaining picked best "
            "and averaging schemes did not help. "
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


