"""The ranked table and the recommendation, printed to the terminal with rich."""

from __future__ import annotations

from rich.console import Console
from rich.markup import escape
from rich.table import Table

from .pdf import CAUTION

__all__ = ["print_assessment"]


def _f(v, fmt="{:.3g}"):
    return "–" if v is None else fmt.format(v)


def print_assessment(a, payload: dict, written, console: Console | None = None) -> None:
    con = console or Console(width=None if Console().is_terminal else 132, highlight=False)
    d = payload
    inp = d["input"]
    con.print(f"[bold]{inp['path'] or 'in-memory DataFrame'}[/]  sha256 {inp['sha256'][:12]}  "
              f"{inp['rows_used']} trials used, {inp['rows_failed']} failed, "
              f"{len(d['campaigns'])} campaign(s); objective {inp['objective']} "
              f"({inp['direction']})")
    for note in d.get("notes", []):
        con.print(f"  note: {escape(note)}")
    v = d["validation"]
    con.print(f"validation: {v['scheme']} ({v['reason']}); {v['n_folds']} folds, "
              f"{v['tested_trials']} held-out trials"
              + (f"; {escape(v['statement'])}" if v.get("statement") else ""))
    t = Table(title="Surrogates, best first", header_style="bold")
    for col in ("#", "surrogate", "CRPS", "95% CI", "NLL", "cov 90", "cal err",
                "Spearman", "P(best)", "fit s", "note"):
        t.add_column(col, justify="left" if col in ("surrogate", "note") else "right")
    for r in d["ranking"]:
        m = r["metrics"]
        ci = r.get("intervals", {}).get("crps")
        comp = r.get("comparison") or {}
        note = ""
        if r["status"] != "ok":
            note = "failed"
        elif comp.get("tied_with_leader") and r["rank"] != 1:
            note = "tied"
        if r.get("variance_scale", 1.0) not in (None, 1.0):
            note = (note + " " if note else "") + f"std×{r['variance_scale']:.2f}"
        guards = r.get("guards") or {}
        if guards and not (guards.get("coverage") and guards.get("order")):
            note = (note + " " if note else "") + "guard"
        if (r.get("info") or {}).get("converged") is False:
            note = (note + " " if note else "") + "not converged"
        t.add_row(str(r["rank"]), r["surrogate"], _f(m.get("crps"), "{:.4g}"),
                  "–" if not ci or ci[0] is None else f"{ci[0]:.3g}–{ci[1]:.3g}",
                  _f(m.get("nll")), _f(m.get("coverage_90"), "{:.2f}"),
                  _f(m.get("calibration_error"), "{:.3f}"), _f(m.get("spearman"), "{:.2f}"),
                  _f(comp.get("p_best"), "{:.2f}"), _f(m.get("fit_seconds"), "{:.2f}"), note)
    con.print(t)
    for r in d["ranking"]:
        info = r.get("info") or {}
        if info.get("converged") is False:
            folds = info.get("converged_folds")
            con.print(f"[bold]{r['surrogate']}:[/] "
                      + (f"converged on {folds} folds; " if folds else "")
                      + escape(str(info.get("warning") or "sampler not converged")))
    by = v.get("metrics_by_scheme") or {}
    if len(by) > 1:
        for scheme, scores in list(by.items())[1:]:
            con.print(f"also scored under {scheme}: " + ", ".join(
                f"{n} CRPS {m['crps']:.4g}" for n, m in scores.items() if m.get("crps") is not None))
    _print_noise(con, d)
    rec = d["recommendation"]
    acq = rec["acquisition"]
    params = ", ".join(f"{k}={v}" for k, v in acq.get("params", {}).items())
    scale = rec.get("variance_scale") or 1.0
    scale_txt = f", standard deviation scaled by {scale:.2f}" if abs(scale - 1) > 1e-9 else ""
    acq_txt = f"{acq['name']}({params})" if params else acq["name"]
    test = rec.get("acquisition_test") or {}
    if rec.get("acquisition_source") != "backtest":
        src = "a default, not tested"
    elif test.get("beats_default"):
        src = f"beats the default at level {test.get('level')}"
    else:
        src = f"the default, kept: nothing beats it at level {test.get('level')}"
    con.print(f"[bold]Recommendation:[/] {rec['surrogate']}{scale_txt}, acquisition "
              f"{acq_txt} ({src}); confidence [bold]{rec['confidence']}[/].")
    if rec.get("beats_random_search") is False:
        from ..decision import RANDOM_CAVEAT
        con.print(f"[bold]Caveat:[/] {RANDOM_CAVEAT} (see baselines below).")
    pair = rec.get("pair")
    if pair:
        con.print(f"[bold]The pair:[/] {pair['calibration']} for calibrated predictions, "
                  f"{pair['optimization']} ({pair.get('optimization_acquisition')}) for the "
                  f"optimization loop (paired test p = {pair['p_holm']:.3g} < "
                  f"{pair['level']}).")
    dis = rec.get("score_disagreement") or {}
    if dis.get("disagree"):
        con.print(f"[bold]Scores disagree:[/] CRPS leader {dis['crps_leader']}, NLL leader "
                  f"{dis['nll_leader']} (p = {dis['p_value']:.3g}"
                  + (", significant" if dis.get("significant") else ", not significant")
                  + ").")
    for reason in rec.get("reasons", []):
        con.print(f"  - {escape(reason)}")
    for note in rec.get("cheaper_alternatives_by_fit_seconds") or []:
        con.print(f"  - {escape(note)}")
    for r in d["ranking"][1:]:
        if r.get("reasons"):
            con.print(f"  {r['surrogate']}: {escape(r['reasons'][0])}")
    _print_plan(con, d)
    _print_feasibility(con, d)
    con.print(f"[dim]{CAUTION}[/]")
    for w in written:
        con.print(f"wrote {w}")


def _print_noise(con, d) -> None:
    """Replicate-based noise estimate beside each model's fitted noise level."""
    fitted = {k: v for k, v in (d.get("noise") or {}).get("fitted", {}).items() if v is not None}
    rep = (d.get("noise") or {}).get("replicates")
    if not fitted and not rep:
        return
    parts = []
    if rep and rep.get("noise_std") is not None:
        lo, hi = (rep.get("noise_std_interval") or [None, None])[:2]
        ci = f" (95% {lo:.3g}–{hi:.3g})" if lo is not None and hi is not None else ""
        parts.append(f"from replicates {rep['noise_std']:.3g}{ci}")
    else:
        parts.append("no replicated settings")
    if fitted:
        parts.append("fitted: " + ", ".join(f"{k} {v:.3g}" for k, v in fitted.items()))
    con.print("noise std: " + "; ".join(parts))


def _print_plan(con, d) -> None:
    """The next-campaign plan in a few lines: what to freeze, whether more trials help,
    what an iteration will cost, and the proposals."""
    plan = d.get("planning") or {}
    if not plan:
        return
    con.print(f"[bold]Next campaign[/] (with {plan.get('surrogate')}):")
    rel = plan.get("relevance") or {}
    frozen = [p for p in rel.get("parameters") or [] if p.get("freeze")]
    if rel:
        if frozen:
            con.print("  - candidates to freeze at their best logged value (total effect and "
                      "permutation importance both bounded below their margins, the model's "
                      "uncertainty included, in the logged region): "
                      + ", ".join(f"{p['name']}={p['freeze_value']}" for p in frozen))
        else:
            con.print("  - no parameter is shown to have a small effect (an interval's upper "
                      "end reaches its margin); none is suggested for freezing")
    lc = plan.get("learning_curve") or {}
    if lc.get("reading"):
        con.print(f"  - learning curve: {escape(lc['reading'])}")
    cost = (plan.get("cost") or {}).get("surrogates") or {}
    over = [n for n, c in cost.items() if c.get("over_max_fit_seconds")]
    if over:
        con.print("  - projected time per iteration over --max-fit-seconds: " + ", ".join(over))
    props = plan.get("proposals") or {}
    if props.get("rows"):
        con.print(f"  - {len(props['rows'])} proposed settings for the first batch are in the "
                  "proposals CSV (predicted mean and 90% interval beside each)")
    for key, err in (plan.get("errors") or {}).items():
        con.print(f"  - {key} did not run: {escape(err)}")


def _print_feasibility(con, d) -> None:
    """One line on the model of trial failure."""
    f = d.get("feasibility")
    if not f:
        return
    if f.get("skipped"):
        con.print(f"failure model: skipped ({escape(f['skipped'])})")
        return
    top = [p["name"] for p in (f.get("parameters") or [])[:2] if p["importance"] > 0]
    low = f.get("proposals_below_threshold") or []
    con.print(f"failure model: {f['chosen']} ({escape(f.get('evidence', ''))}); "
              f"{f['failed']} of {f['trials']} trials failed"
              + (f"; failures depend most on {', '.join(top)}" if top else ""))
    if low:  # beside the caution, which the caller prints next
        rows = ((d.get("planning") or {}).get("proposals") or {}).get("rows") or []
        ps = [f"#{i}: {rows[i - 1]['p_success']:.0%}" for i in low
              if i <= len(rows) and rows[i - 1].get("p_success") is not None]
        con.print(f"[bold]warning:[/] {len(low)} proposal(s) likely to fail, P(success) "
                  f"below {f['low_success_threshold']:.0%} ({', '.join(ps) or low}); "
                  "check them against your safe operating limits or leave them out. "
                  "P(success) is an estimate from the log, not a safety assessment.")
