"""Section 1, the recommendation: one sentence, the confidence in plain words, the
runner-up and what separates them, the data the advice rests on, and the caution box.

The texts and the basis table are given as paragraph markup / :class:`TableData`, read
by the PDF (:func:`story`) and the notebook view alike."""

from __future__ import annotations

from reportlab.lib import colors
from reportlab.lib.units import mm
from reportlab.platypus import Paragraph, Spacer

from ._base import (CAUTION, _RULE, _S, _TEXT_W, TableData, _box, _e, _finite, _heading,
                    _num, _p, _View)

TITLE = "Surrogate design review"

_ACQ_WORDS = {"ei": "expected improvement", "pi": "probability of improvement",
              "ucb": "a confidence bound", "lcb": "a confidence bound",
              "thompson": "Thompson sampling", "random": "random search"}
_CONFIDENCE_WORDS = {
    "high": "High. Every other working model is outside the 95% model confidence set on "
            "held-out CRPS (largest rival p-value below 0.05). In seeded simulations of "
            "equally good models this word was said in at most about 5% of runs (README).",
    "moderate": "Moderate. It leads, but another model is still in the 95% model "
                "confidence set (largest rival p-value from 0.05 to 0.20); equally good "
                "models got this word or 'high' in about 20% of simulated runs.",
    "low": "Low. Another model is statistically tied with it (p-value 0.20 or more), or it "
           "misses a guard rail on coverage or ordering, or a tie-breaker put it ahead; "
           "treat it as one reasonable choice among several.",
    "none": "None. No surrogate produced usable predictions on every fold.",
}




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


def headline(v: _View) -> str:
    """The recommendation in one sentence (paragraph markup)."""
    rec = v.d.get("recommendation") or {}
    sur = rec.get("surrogate")
    if sur is None:
        return ("<b>No recommendation.</b> No surrogate produced usable predictions "
                "on every fold; see section 3 for each model's error.")
    scale = rec.get("variance_scale")
    if _finite(scale) and abs(float(scale) - 1.0) > 1e-9:
        scaling = (f"multiply its predictive standard deviation by {_num(scale)} "
                   "(the variance scale fitted on held-out folds)")
    else:
        scaling = "use its predictive variances as they are (no scaling needed)"
    src_text = _acq_source_text(rec)
    caveat = ""
    if rec.get("beats_random_search") is False:
        from ...decision import RANDOM_CAVEAT
        caveat = (f" <b>Caveat:</b> {_e(RANDOM_CAVEAT)} (see <i>Against random and grid "
                  "search</i> below).")
    return (f"Use the <b>{_e(sur)}</b> surrogate with "
            f"<b>{_e(_acq_text(rec.get('acquisition')))}</b> ({src_text}), and {scaling}."
            + caveat)


def _acq_source_text(rec: dict) -> str:
    """Where the acquisition setting came from, as the paired test decided it."""
    test = rec.get("acquisition_test") or {}
    level = test.get("level")
    if rec.get("acquisition_source") != "backtest":
        return "a default: the acquisition backtest did not test it"
    if test.get("beats_default"):
        return (f"chosen by the acquisition backtest: it beats the default at level "
                f"{_num(level)} by a paired test")
    return (f"the default, kept by the acquisition backtest: no setting beats it at "
            f"level {_num(level)}")


def decision_texts(v: _View) -> list[str]:
    """How the recommendation was decided (paragraph markup, one per item): the
    acquisition evidence with its test, level and power; the recommended setting
    against random and grid search; the tie-break; the pair; the
    NLL/CRPS disagreement; the validation scheme that decided."""
    rec = v.d.get("recommendation") or {}
    out = []
    st = rec.get("acquisition_statement")
    if st:
        word = rec.get("acquisition_evidence")
        extra = f" Evidence word: <i>{_e(word)}</i>." if word else ""
        out.append(f"<b>Acquisition.</b> {_e(st)}.{extra}")
    bs = (rec.get("acquisition_test") or {}).get("baseline_statement")
    if bs:
        out.append(f"<b>Against random and grid search.</b> {_e(bs[0].upper() + bs[1:])}.")
    tb = rec.get("tie_break")
    if tb:
        out.append(f"<b>Tie.</b> {_e(', '.join(tb.get('tied') or []))} are statistically "
                   f"tied on held-out CRPS; decided by {_e(tb.get('decided_by'))}: "
                   f"{_e(tb.get('reason'))}.")
    pair = rec.get("pair")
    if pair:
        out.append(f"<b>The pair.</b> For calibrated predictions use "
                   f"<b>{_e(pair.get('calibration'))}</b>; for the optimization loop "
                   f"<b>{_e(pair.get('optimization'))}</b> with "
                   f"{_e(pair.get('optimization_acquisition'))}. {_e(pair.get('statement'))}.")
    dis = rec.get("score_disagreement")
    if dis and dis.get("disagree"):
        out.append(f"<b>Scores disagree.</b> {_e(dis.get('statement'))}")
    val = v.d.get("validation") or {}
    if val.get("statement"):
        out.append(f"<b>Validation.</b> {_e(val['statement'][0].upper() + val['statement'][1:])}.")
    return out


def confidence_text(v: _View) -> str:
    conf = str((v.d.get("recommendation") or {}).get("confidence") or "none")
    return f"<b>Confidence:</b> {_e(_CONFIDENCE_WORDS.get(conf, conf))}"


def statement_text(v: _View) -> str | None:
    st = (v.d.get("recommendation") or {}).get("statement")
    return _e(st) if st else None


def subtitle(v: _View) -> str:
    return (f"{_e(v.log_name)} &nbsp;·&nbsp; objective {_e(v.objective_label)} "
            f"({_e(v.direction)}) &nbsp;·&nbsp; {_e(v.d.get('created', ''))}")


def story(v: _View) -> list:
    """Page one of the PDF."""
    story = [Paragraph(TITLE, _S["title"]), _p(subtitle(v), "subtitle")]
    story += _heading(0)
    story.append(_p(headline(v), "lead"))
    story.append(_p(confidence_text(v)))
    if statement_text(v):
        story.append(_p(statement_text(v)))
    story.append(_p(runner_up_text(v)))
    texts = decision_texts(v)
    if texts:
        story.append(Paragraph("How it was decided", _S["h2"]))
        story += [_p(t) for t in texts]
    story.append(Paragraph("What this rests on", _S["h2"]))
    story.append(basis_table(v).to_pdf(
        [30 * mm, _TEXT_W - 30 * mm], zebra=False, long=False,
        extra=[("BACKGROUND", (0, 0), (-1, 0), colors.white),
               ("LINEBELOW", (0, 0), (-1, -2), 0.25, _RULE)]))
    story += [Spacer(1, 5 * mm), _box(CAUTION)]
    return story


def runner_up_text(v: _View) -> str:
    """The runner-up and what separates it from the leader (paragraph markup)."""
    rec = v.d.get("recommendation") or {}
    ru = rec.get("runner_up")
    if not ru:
        return "<b>Runner-up:</b> none; no second model produced usable predictions."
    e = v.entry(ru) or {}
    c = e.get("comparison") or {}
    diff, lo, hi = c.get("crps_diff"), c.get("crps_diff_low"), c.get("crps_diff_high")
    text = f"<b>Runner-up:</b> {_e(ru)}."
    if _finite(diff):
        tied = bool(c.get("in_mcs", c.get("tied_with_leader")))
        pv = c.get("mcs_pvalue")
        ptxt = f"p-value {_num(pv, 2)}, " if _finite(pv) else ""
        text += (f" Its mean held-out CRPS is higher by {_num(diff)} (block bootstrap "
                 f"95% interval {_num(lo)} to {_num(hi)}); "
                 + (f"it is in the 95% model confidence set ({ptxt}so the two are "
                    "statistically tied)" if tied else
                    f"it is outside the 95% model confidence set ({ptxt}so the gap is "
                    "not noise)")
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
    return text


def basis_table(v: _View) -> TableData:
    """What the advice rests on: log, trials, parameters, campaigns, validation, seed."""
    d = v.d
    inp = d.get("input") or {}
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
    return TableData([[f"<b>{k}</b>", x] for k, x in rows], header_rows=0)


