"""Section 5, the next campaign: parameter relevance, freeze candidates, the proposed
first batch with predicted intervals and the cautions beside it, learning curve, cost
projection."""

from __future__ import annotations

from reportlab.lib.units import mm
from reportlab.platypus import KeepTogether, Paragraph, Spacer

from .feasibility import low_success_flowables
from ._base import (FigureSpec, CAUTION, _RULE, _S, _TEXT_W, TableData, _View, _box, _cells,
                    _e, _finite, _heading, _image, _name, _num, _p, _side_by_side, _table)

# ======================================================================================
# 5. next campaign
# ======================================================================================
def _planning_caution() -> str:
    try:
        from ...planning import CAUTION as plan_caution
    except ImportError:  # planning is optional for the report
        return CAUTION
    return plan_caution


def _relevance(v: _View):
    return v.plan_part("relevance", "parameter_relevance")


def _learning(v: _View):
    return v.plan_part("learning_curve", "learning")


def _cost(v: _View):
    return v.plan_part("cost", "cost_projection")


def _relevance_fig(v: _View):
    from ..figures import relevance_figure

    return relevance_figure(_relevance(v))


def _proposals_fig(v: _View):
    from ..figures import proposals_figure

    return proposals_figure(v.proposals(), v.objective_label, _best_logged(v), v.direction)


def _learning_fig(v: _View):
    from ..figures import learning_curve_figure

    return learning_curve_figure(_learning(v), v.objective_label, v.styles)


def _cost_fig(v: _View):
    from ..figures import cost_figure

    return cost_figure(_cost(v), v.styles)


FIGURES = {f.name: f for f in (
    FigureSpec("relevance", _relevance_fig,
               lambda v: _e((_relevance(v) or {}).get("method", ""))),
    FigureSpec("proposals", _proposals_fig,
               "Predicted mean and 90% interval of each proposal (new observation, "
               "noise included), against the best logged value."),
    FigureSpec("learning_curve", _learning_fig,
               lambda v: _e((_learning(v) or {}).get("reading")
                            or "Learning curve did not run.")),
    FigureSpec("cost", _cost_fig,
               lambda v: _e((_cost(v) or {}).get("method") or "Cost projection did not run.")),
)}


def story(v: _View) -> list:
    story = []
    rel, cost = _relevance(v), _cost(v)
    learn = _learning(v)
    fig = {n: (f.build, f.caption_for(v)) for n, f in FIGURES.items()}
    props = v.proposals()
    if not (rel or learn or cost or props is not None):
        return _heading(4) + [_p("The next-campaign plan did not run for this report.")]
    if rel:  # the heading travels with the first figure, never alone at a page foot
        story.append(KeepTogether(_heading(4) + [Paragraph("Which parameters matter", _S["h2"]),
                                   _image(fig["relevance"][0](v)),
                                   _p(fig["relevance"][1], "caption")]))
        story += _freeze_block(rel)
        if rel.get("caution"):
            story.append(_p(_e(rel["caution"]), "small"))
    else:
        story += _heading(4) + [Paragraph("Which parameters matter", _S["h2"]),
                  _p("Parameter relevance did not run.")]
    if props is not None:
        # One block, so the caution is never a page away from the settings it qualifies.
        story.append(KeepTogether([Paragraph("Proposed first batch", _S["h2"])]
                                  + _proposal_tables(v, props) + [_side_by_side(
            [_image(fig["proposals"][0](v), _TEXT_W / 2 - 4),
             _p(fig["proposals"][1], "caption")],
            _box(_planning_caution(), "Before running these", _TEXT_W / 2 - 6))]
            + low_success_flowables(v)))
    else:
        story += [Paragraph("Proposed first batch", _S["h2"]),
                  _p("No proposals were requested for this report.")]
    left = [_image(fig["learning_curve"][0](v), _TEXT_W / 2 - 4),
            _p(fig["learning_curve"][1], "caption")]
    right = [_image(fig["cost"][0](v), _TEXT_W / 2 - 4), _p(fig["cost"][1], "caption")]
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


def _interval(iv, margin=None) -> str:
    """``low – high``; the upper end in bold when it reaches the margin (it blocked)."""
    if not iv or not all(_finite(x) for x in iv):
        return "–"
    hi = f"{float(iv[1]):.3f}"  # shares of variance: fixed decimals compare at a glance
    if _finite(margin) and not float(iv[1]) < float(margin):
        hi = f"<b>{hi}</b>"
    return f"{float(iv[0]):.3f} – {hi}"


def freeze_table(rel) -> TableData:
    """Every parameter with the intervals that decided its freeze flag: the total Sobol
    index with its refit interval (the model's uncertainty) and, beside it, the
    Monte-Carlo interval of the one fitted model; the permutation importance with its
    interval; the decision.  An upper end at or above its margin is in bold."""
    thr = rel.get("thresholds") or {}
    t_m, p_m = thr.get("total_upper_below"), thr.get("permutation_upper_below")
    rows = [["parameter", "total ST", "95% interval (refits)", "Monte-Carlo only",
             "permutation", "95% interval", "decision"]]
    for r in rel.get("parameters") or []:
        if r.get("freeze"):
            decision = f"freeze at {_e(_fmt_setting(r.get('freeze_value')))}"
        else:
            why = []
            t_iv, p_iv = r.get("total_interval") or [], r.get("permutation_interval") or []
            if len(t_iv) == 2 and _finite(t_iv[1]) and _finite(t_m) and t_iv[1] >= t_m:
                why.append("total")
            if len(p_iv) == 2 and _finite(p_iv[1]) and _finite(p_m) and p_iv[1] >= p_m:
                why.append("permutation")
            decision = ("keep tuning (" + " and ".join(why) + ")") if why else "not judged"
        rows.append([_e(r.get("name")), f"{r['total']:.3f}" if _finite(r.get("total")) else "n/a",
                     _interval(r.get("total_interval"), t_m),
                     _interval(r.get("total_interval_monte_carlo")),
                     (f"{r['permutation_importance']:.3f}"
                      if _finite(r.get("permutation_importance")) else "n/a"),
                     _interval(r.get("permutation_interval"), p_m), decision])
    return TableData(rows)


def _freeze_block(rel) -> list:
    thr = rel.get("thresholds") or {}
    mu = rel.get("model_uncertainty") or {}
    n_frozen = sum(1 for r in rel.get("parameters") or [] if r.get("freeze"))
    refits = (f"{mu.get('refits_used')} refits of the model on random halves of the "
              f"trials ({mu.get('subsample_size')} trials each)" if mu else
              "refits of the model on random halves of the trials")
    intro = (f"<b>Freeze rule.</b> A parameter is a candidate to freeze only when the upper "
             f"end of its total-index interval is below {_num(thr.get('total_upper_below'))} "
             f"and the upper end of its permutation-importance interval is below "
             f"{_num(thr.get('permutation_upper_below'))} of the objective's variance. The "
             f"total-index interval comes from {refits}, so it carries the model's own "
             "uncertainty; the Monte-Carlo interval of the one fitted model is shown beside "
             "it for comparison. Bold: an upper end that reached its margin and blocked the "
             f"freeze. Freeze candidates: {n_frozen}.")
    w = [34 * mm, 16 * mm, 28 * mm, 26 * mm, 20 * mm, 26 * mm]
    return [_p(intro, "small"),
            freeze_table(rel).to_pdf(w + [_TEXT_W - sum(w)])]


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
                         ("predicted_high_90", "90% interval high"),
                         ("p_success", "P(success), section 7")):
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
    rows = [_cells(["surrogate", "fit s at log size", "regime of the projection",
                    "exponent b (t ∝ n^b) in it",
                    f"projected s / iteration at {cost.get('projected_size', '?')}",
                    "over limit"], "cellhead")]
    for n, e in (cost.get("surrogates") or {}).items():
        if e.get("error"):
            rows.append(_cells([_name(n), f"<i>error</i>: {_e(e['error'])}", "", "", "", ""]))
            continue
        sizes, fits = e.get("sizes") or [], e.get("fit_seconds") or []
        at_log = dict(zip(sizes, fits)).get(cost.get("logged_trials"), (fits or [None])[-1])
        rows.append(_cells([_name(n), _num(at_log), _e(e.get("projection_regime") or "–"),
                            _num(e.get("fit_seconds_exponent")),
                            _num(e.get("projected_seconds_per_iteration")),
                            "yes" if e.get("over_max_fit_seconds") else "no"]))
    return [_table(rows, [38 * mm, 22 * mm, 38 * mm, 26 * mm, 36 * mm, _TEXT_W - 160 * mm]),
            _p("Timings were measured on this machine and differ between runs. One power "
               "law is fitted per size regime of the model (for the GP: the exact fit, the "
               "exact fit with its starts on a subset, FITC beyond the exact limit), and the "
               "projection uses only the law of the regime the projected size falls in; a "
               "negative exponent is shown as n/a, never as a growth rate. Models timed: "
               + _e(cost.get("scope") or "every model that passed cross-validation")
               + ".", "small")]


