"""Section 4, the acquisition backtest: replay and simulated-campaign curves against
random and grid search, the reasons for the chosen setting, the replay's limits and its
own paired test, trials to the best 5%."""

from __future__ import annotations

from reportlab.lib.units import mm
from reportlab.platypus import KeepTogether, Paragraph

from ._base import (FigureSpec, _S, _TEXT_W, _View, _cells, _e, _finite, _heading, _image,
                    _name, _num, _p, _table)

# ======================================================================================
# 4. backtest
# ======================================================================================
def _backtest_fig(v: _View):
    from ..figures import backtest_figure

    return backtest_figure(v.backtest, v.styles)


FIGURES = {f.name: f for f in (
    FigureSpec("backtest", _backtest_fig,
               "Each surrogate with the setting the backtest chose for it; dotted black with "
               "grey band: random order; dashed grey: the campaigns' actual order."),
)}


def story(v: _View) -> list:
    bt = v.backtest
    story = []
    if not bt:
        story += _heading(3)
        story.append(_p("The acquisition backtest did not run for this report; the "
                        "acquisition setting on page one is a default."))
        return story
    choice = bt.get("choice") or {}
    cfg = bt.get("config") or {}
    intro = _p(_intro_text(bt, cfg))
    fig = FIGURES["backtest"]
    story.append(KeepTogether(_heading(3) + [intro, _image(fig.build(v)),
                                             _p(fig.caption_for(v), "caption")]))
    for r in choice.get("reasons") or []:
        story.append(_p("• " + _e(r), "small"))
    story += _replay_limits(bt)
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
    for ref in ("random", "grid", "actual"):
        cells = ["<i>reference</i>", _e("grid search" if ref == "grid" else ref + " order")]
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




def _intro_text(bt, cfg) -> str:
    sim = bt.get("simulated") or {}
    st = sim.get("standins") or {}
    classes = st.get("classes") or {}
    if classes:
        drawn = " and ".join(f"{n} × {(st.get('descriptions') or {}).get(c, c)}"
                             for c, n in classes.items())
        sims = (f"run on {sim.get('runs_per_setting', 'n/a')} simulated campaigns per "
                f"setting (stand-in functions fitted to the whole log: {_e(drawn)}; "
                "observed with the log's noise; candidates are fresh samples of the "
                "parameter space)")
    else:
        sims = "run on simulated campaigns drawn from a model of the log"
    updates = sim.get("updates")
    grid = sim.get("grid_design")
    text = ("The simulated campaigns are the evidence: each surrogate and acquisition "
            f"setting was {sims}, from the same starting trials as random search (batch "
            f"{cfg.get('batch', 1)}, budget {sim.get('budget', cfg.get('budget', 'n/a'))}"
            ")" + (f"; {_e(updates)}" if updates else "") + ". ")
    if grid:
        text += (f"Grid search ran on the same functions: a full factorial with "
                 f"{grid.get('levels_per_parameter')} levels per parameter at cell "
                 f"midpoints over {grid.get('parameters')} parameters, a random subset "
                 "of it when it exceeds the budget. ")
    text += ("The pool replay on the logged campaigns is a secondary diagnostic. Curves "
             "show normalized regret of the best so far: 0 is the pool's best value, 1 "
             "its worst; line = median, band = interquartile range.")
    models = bt.get("surrogates") or []
    if models and bt.get("candidates_rule"):
        # issue 12, item 8: only the models that can matter are backtested; say which
        rule = str(bt["candidates_rule"]).removeprefix("backtested: ")
        text += f" Models backtested: {_e(', '.join(models))} ({_e(rule)})."
    return text


def _replay_limits(bt) -> list:
    """What the replay cannot show, and its own paired test against the default."""
    rep = bt.get("replay") or {}
    if not rep.get("results"):
        return []
    out = [Paragraph("What the pool replay can and cannot show", _S["h2"]),
           _p("The replay may only pick trials that were actually run, and those were "
              "chosen by the campaign's own optimizer, mostly near its optimum; a full "
              "replay ends at the campaign's logged best whatever the order, so it shows "
              "how fast a setting would have got there, never whether it would have found "
              "better settings. Few campaigns make few paired runs. It therefore decides "
              "nothing on its own: it counts only through its own paired test below, and "
              "only when no simulated campaign ran.", "small")]
    tests = rep.get("paired_test") or {}
    for name, t in tests.items():
        comps = t.get("comparisons") or []
        if not comps:
            continue
        best = min(comps, key=lambda c: c.get("p_holm", 1.0))
        floor = t.get("min_attainable_p")
        verdict = ("a setting beats the default" if t.get("significant")
                   else "no setting beats the default")
        out.append(_p(
            f"• {_name(name)}: replay paired test ({_e(t.get('test'))}, level "
            f"{_num(t.get('alpha'))}, {t.get('pairs', 0)} pairs by campaign and start): "
            f"{verdict}; smallest adjusted p = {_num(best.get('p_holm'))} "
            f"({_e(best.get('label'))})"
            + (f"; with this many pairs no p below {_num(floor)} is attainable"
               if _finite(floor) else "") + ".", "small"))
    return out
