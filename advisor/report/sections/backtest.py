"""Section 4, the acquisition backtest: replay and simulated-campaign curves against
random search, the reasons for the chosen setting, trials to the best 5%."""

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
    intro = (_p(
        "Each surrogate and acquisition setting was replayed on the logged campaigns "
        "(picking only trials that were actually run) and run on simulated campaigns "
        "drawn from a Gaussian-process posterior of the log, from the same starting "
        f"trials as random search (batch {cfg.get('batch', 1)}, budget "
        f"{cfg.get('budget', 'n/a')}). Curves show normalized regret of the best so far: "
        "0 is the pool's best value, 1 its worst; line = median, band = interquartile "
        "range."))
    fig = FIGURES["backtest"]
    story.append(KeepTogether(_heading(3) + [intro, _image(fig.build(v)),
                                             _p(fig.caption_for(v), "caption")]))
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


