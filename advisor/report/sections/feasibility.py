"""Section 7, where trials fail: the classifiers of trial success/failure and their
scores, the parameters that drive failure, the failure-probability map, and what the
failure model did to the backtest and the proposals.

Present only when the log has failed trials (the JSON ``feasibility`` section is not
None); when the model was skipped the section says why in a line.  It comes last so
that the other sections keep their numbers whether or not a log has failures.

:func:`classifier_table`, :func:`parameter_table`, :func:`low_success_warning` and
:data:`FIGURES` are shared with the notebook view; :func:`low_success_warning` also
stands beside the caution in the next-campaign section.
"""

from __future__ import annotations

from reportlab.lib.units import mm
from reportlab.platypus import KeepTogether, Paragraph, Spacer, Table, TableStyle

from ._base import (_CAUTION_BG, _CAUTION_EDGE, _S, _TEXT_W, FigureSpec, TableData, _e,
                    _finite, _heading, _image, _num, _p, _pct, _View)

#: Index of this section's heading in :data:`advisor.report.sections.SECTIONS`.
HEADING = 6
#: Parameters listed in the importance table.
MAX_PARAMETERS = 8

_NAMES = {"constant": "constant rate (knowing nothing)", "logistic": "logistic regression",
          "forest": "random forest", "gp": "GP classifier"}


def feasibility(v: _View) -> dict | None:
    """The JSON ``feasibility`` section, or None when no trial failed."""
    return v.d.get("feasibility")


def modelled(v: _View) -> bool:
    f = feasibility(v)
    return bool(f) and not f.get("skipped") and not f.get("error") and bool(f.get("chosen"))


def _map_fig(v: _View):
    import numpy as np
    import pandas as pd

    from ..figures import failure_map_figure

    fmap = (feasibility(v) or {}).get("map")
    names = list((fmap or {}).get("parameters") or [])
    log_axes, points = [], None
    t = getattr(v.a, "trials", None)
    space = getattr(t, "space", None)
    for n in names:
        try:
            log_axes.append(bool(getattr(space[n], "log", False)))
        except Exception:  # a space without this parameter: a linear axis
            log_axes.append(False)
    try:
        frame = t.frame
        if names and all(n in frame for n in names):
            points = pd.DataFrame({n: frame[n] for n in names})
            points["failed"] = ~np.asarray(t.ok, dtype=bool)
            keep = points[names].notna().all(axis=1)
            points = points.loc[keep].reset_index(drop=True)
    except Exception:  # the logged points are an overlay, never needed
        points = None
    return failure_map_figure(fmap, log_axes, points)


def _map_caption(v: _View) -> str:
    f = feasibility(v) or {}
    fmap = f.get("map") or {}
    if not fmap:
        return "No failure map (the chosen model is the constant rate)."
    text = (f"Predicted probability that a trial fails, by {' and '.join(fmap['parameters'])}"
            f" (partial dependence of the {_NAMES.get(f.get('chosen'), f.get('chosen'))}: "
            "the other parameters averaged over up to 150 logged settings); crosses: logged "
            "failed trials.")
    if not f.get("beats_constant"):
        text += (" The chosen model does not beat the constant failure rate beyond its "
                 "95% interval: read the map as a hint.")
    return _e(text)


FIGURES = {f.name: f for f in (
    FigureSpec("failure_map", _map_fig, _map_caption),
)}


def classifier_table(v: _View) -> TableData:
    """One row per candidate classifier, the chosen one first."""
    f = feasibility(v) or {}
    head = ["classifier", "log loss (nats / trial)", "Brier", "reliability error",
            "mean predicted P(fail)", "Δ log loss vs chosen [95%]", "chosen",
            "beats constant rate"]
    rows = [head]
    for r in f.get("classifiers") or []:
        k = r.get("classifier")
        chosen = k == f.get("chosen")
        diff = "—" if chosen else (f"{_num(r.get('log_loss_diff'))} "
                                   f"[{_num(r.get('log_loss_diff_low'))}, "
                                   f"{_num(r.get('log_loss_diff_high'))}]")
        if k == "constant":
            beats = "(reference)"
        elif chosen:
            beats = "<b>yes</b>" if f.get("beats_constant") else "no (within interval)"
        else:
            beats = ""
        name = _e(_NAMES.get(k, k))
        rows.append([f"<b>{name}</b>" if chosen else name, _num(r.get("log_loss")),
                     _num(r.get("brier")), _num(r.get("reliability_error")),
                     _pct(r.get("mean_predicted_failure")), diff,
                     "<b>chosen</b>" if chosen else
                     ("tied" if r.get("tied_with_leader") else ""), beats])
    return TableData(rows)


def parameter_table(v: _View) -> TableData:
    """The parameters that drive failure: permutation importance of the chosen model."""
    f = feasibility(v) or {}
    rows = [["parameter", "importance: rise in held-out log loss when permuted (nats)",
             "sd over folds"]]
    for r in (f.get("parameters") or [])[:MAX_PARAMETERS]:
        rows.append([_e(r.get("name")), _num(r.get("importance")),
                     _num(r.get("importance_fold_sd"))])
    return TableData(rows)


def low_success_warning(v: _View) -> str | None:
    """A warning (paragraph markup) when any proposal's P(success) is below the stated
    threshold, else None."""
    f = feasibility(v) or {}
    low = list(f.get("proposals_below_threshold") or [])
    if not low:
        return None
    thr = f.get("low_success_threshold")
    props = v.proposals()
    detail = []
    if props is not None and "p_success" in props:
        for i in low:
            if 1 <= i <= len(props) and _finite(props["p_success"].iloc[i - 1]):
                detail.append(f"#{i}: {_pct(props['p_success'].iloc[i - 1])}")
    listed = ", ".join(detail) if detail else ", ".join(f"#{i}" for i in low)
    return (f"<b>Likely to fail.</b> {len(low)} proposal(s) have a predicted probability "
            f"of success below {_pct(thr)} ({_e(listed)}), from the failure model of "
            "section 7. A failed trial is a wasted batch and, on a plant, may be worse: "
            "check these settings against your safe operating limits before running "
            "them, or leave them out. P(success) is a statistical estimate from the log, "
            "not a safety assessment; a high value does not make a setting safe.")


def low_success_flowables(v: _View) -> list:
    """The warning about proposals likely to fail, as a boxed paragraph to stand under
    the caution beside the proposals (nothing when no proposal is below the threshold)."""
    text = low_success_warning(v)
    if text is None:
        return []
    box = Table([[Paragraph(text, _S["caution"])]], colWidths=[_TEXT_W])
    box.setStyle(TableStyle([("BOX", (0, 0), (-1, -1), 0.9, _CAUTION_EDGE),
                             ("BACKGROUND", (0, 0), (-1, -1), _CAUTION_BG),
                             ("LEFTPADDING", (0, 0), (-1, -1), 6),
                             ("RIGHTPADDING", (0, 0), (-1, -1), 6),
                             ("TOPPADDING", (0, 0), (-1, -1), 5),
                             ("BOTTOMPADDING", (0, 0), (-1, -1), 5)]))
    return [Spacer(1, 2 * mm), box]


def _backtest_line(v: _View) -> str | None:
    sim = (v.backtest or {}).get("simulated") or {}
    info = sim.get("failures")
    if not info:
        return None
    per = {}
    for r in sim.get("results") or []:
        picks = [run["failed_picks"] for run in r.get("runs") or []
                 if run.get("failed_picks") is not None]
        if picks:
            per[f"{r.get('surrogate')} + {r.get('label')}"] = sum(picks) / len(picks)
    shares = info.get("failed_share") or []
    share = sum(shares) / len(shares) if shares else None
    text = ("In the simulated campaigns of section 4 trials failed where this model says "
            f"(on average {_pct(share)} of each stand-in's candidates), a failed trial gave "
            "no value and counted as no progress, and every model-based setting was "
            "weighted by P(success) from a classifier refitted on the run's own outcomes "
            "(random search unweighted)")
    if per:
        text += ". Failed picks per run, mean: " + "; ".join(
            f"{k} {m:.1f}" for k, m in list(per.items())[:8])
        picks = (sim.get("budget") or 0) - (sim.get("n_init") or 0)
        if share is not None and picks > 0:
            text += (f" (picks at random would fail {share * picks:.1f} of the {picks} "
                     "picks on average)")
    return _e(text + ".")


def story(v: _View) -> list:
    f = feasibility(v)
    if not f:
        return []
    out = _heading(HEADING)
    n_fail, n = f.get("failed"), f.get("trials")
    if f.get("error") or f.get("skipped"):
        reason = f.get("skipped") or "the failure model could not be fitted"
        if f.get("error"):
            reason += f" ({f['error']})"
        out.append(_p(f"The model of trial failure was skipped because {_e(reason)}."
                      + (f" Rule: {_e(f['rule'])}." if f.get("rule") else "")))
        return out
    val = f.get("validation") or {}
    intro = (f"{n_fail} of {n} trials failed. Four classifiers of success/failure were "
             f"scored on held-out trials ({_e(val.get('description') or val.get('scheme'))}"
             f", {val.get('tested_trials', 'n/a')} tested) by log loss, Brier score and "
             "reliability error; the one with the lowest log loss is chosen, and each "
             "other's difference to it carries a 95% bootstrap interval. "
             f"Chosen: <b>{_e(_NAMES.get(f['chosen'], f['chosen']))}</b> "
             f"({_e(f.get('evidence'))}).")
    table = classifier_table(v).to_pdf([34 * mm, 22 * mm, 14 * mm, 18 * mm, 20 * mm,
                                        34 * mm, 14 * mm, _TEXT_W - 156 * mm])
    out = [KeepTogether(out + [_p(intro), table])]  # the heading travels with the table
    out.append(_p(_e(f.get("reason", "")), "small"))
    out.append(Paragraph("Which parameters drive failure", _S["h2"]))
    out.append(parameter_table(v).to_pdf([45 * mm, 85 * mm, 25 * mm]))
    out.append(_p("Permutation importance of the chosen classifier over the validation "
                  "folds (a categorical parameter is permuted as one); 0 or below: no "
                  "evidence that the parameter matters for failure.", "small"))
    if f.get("map"):
        fig = FIGURES["failure_map"]
        out.append(KeepTogether([Paragraph("Where failures cluster", _S["h2"]),
                                 _image(fig.build(v), _TEXT_W * 0.8),
                                 _p(fig.caption_for(v), "caption")]))
    line = _backtest_line(v)
    if line:
        out.append(_p(line, "small"))
    out.append(_p("Proposals are weighted by this model's P(success) (expected improvement "
                  "times P(success); settings below 50% left out while any candidate "
                  f"reaches it); those below {_pct(f.get('low_success_threshold'))} are "
                  "flagged in section 5. A predicted probability of success is not a "
                  "promise of safety.", "small"))
    return out
