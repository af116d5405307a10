"""Selection regret on the real logs with its Monte-Carlo error, and pick rules compared.

The single-run benchmark (``python -m benchmarks.real_logs --small``) scores every
candidate's true next-campaign NLL with one model fit (one seed) on one log; the truth
then moves by tenths of a nat with the model seed alone.  The user refits the pick with
an arbitrary seed, so the honest truth is the *expected* NLL over model seeds, and the
honest regret is averaged over logs too.  This script measures both:

* **log replicates** ``r``: replicate 0 is the committed log (campaigns ``past1..3``,
  ``new1..2``); replicate r > 0 runs the same optimizer on the same black box as fresh
  campaigns ``past1-r<r>`` ... (other optimizer and evaluation seeds).  The advisor's
  run seed is ``r``.
* **truth seeds** ``k``: each candidate is fitted on the past log with ``--truth-seeds``
  seeds and scored on the new campaigns; the truth is the mean NLL (and CRPS) over the
  seeds, with its standard error.

Per case (problem x replicate) the advisor ranks the candidates under forward chaining
(its default, ``validation="auto"``) and under leave-one-campaign-out, so the pick rules
below can be compared on the same fits:

* ``current``: the advisor's pick as recorded (forward chaining; CRPS leader among the
  models passing the guard rails; no backtest, so no tie-break by optimization) by the
  code that computed the case (``cv.auto.coverage_rule`` says which coverage guard);
  every other rule is reconstructed from the recorded tables under the rule in force;
* ``campaign``: the same rule under leave-one-campaign-out;
* ``forward+campaign``: the lowest mean of the two schemes' CRPS among the models that
  pass the guard rails under forward chaining;
* ``tie:campaign_crps`` / ``tie:campaign_nll`` / ``tie:forward_nll``: inside forward
  chaining's tie group (the leader and the models in its 95% model confidence set that
  pass the guard rails), the lowest leave-one-campaign-out CRPS / NLL, or forward NLL;
* ``nll_guard_<d>``: the lowest forward CRPS among the passing models whose forward NLL
  is within d nats per point of the best passing NLL;
* ``guard:coverage_both_bounds``: the rule before this benchmark, where a model whose
  held-out 90% interval covered more than 97% (and no variance scale brought it inside)
  failed the coverage guard rail too; ``guard:coverage_low_only`` (the current rule):
  only too narrow fails; ``guard:order_only``: no coverage guard at all;
* ``guard:baseline_floor``: the rule in force, but a model whose CRPS is above the
  baseline's (knowing nothing) cannot lead; with none left, the lowest CRPS of all;
* ``tie:oracle``: the truly best member of the tie group (how much any tie rule could
  gain: a bound, not a rule);
* ``always_<model>``: one fixed candidate everywhere (the reference a rule must beat).

Regret = the pick's expected true NLL minus the lowest expected true NLL among the
candidates (nats per point).  Its Monte-Carlo error per case is the standard error over
truth seeds of the paired difference (pick minus that best); over cases, the standard
error of the mean over the cases.  Rules are compared with the paired difference to
the rule in force, ``guard:coverage_low_only``, over cases (mean and standard error).

    python benchmarks/real_logs_regret.py                  # 20 trials, replicates 0-4, 3 truth seeds
    python benchmarks/real_logs_regret.py --resume         # reuse the cases already computed
    python benchmarks/real_logs_regret.py --table-only     # re-tabulate the stored cases

Writes ``benchmarks/results/real_logs_regret.json`` (cases and tables).  Black-box
evaluations come from (and new replicates go to) ``benchmarks/results/real_logs_cache.json``.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

RESULTS = ROOT / "benchmarks" / "results"
OUT = RESULTS / "real_logs_regret.json"


def campaign_names(replicate: int) -> tuple[list[str], list[str]]:
    from benchmarks.real_logs.measure import NEW, PAST
    if replicate == 0:
        return list(PAST), list(NEW)
    return [f"{c}-r{replicate}" for c in PAST], [f"{c}-r{replicate}" for c in NEW]


def _table(trials, names, seed: int, scheme: str) -> dict:
    import advisor
    a = advisor.assess(trials, seed=seed, quick=True, surrogates=names, validation=scheme,
                       jobs=1, backtest=False, plan=False)
    rows = {}
    for r in a.ranking.to_dict("records"):
        n = r["surrogate"]
        m = a.metrics.get(n, {})
        ok = r.get("status") == "ok"
        rows[n] = {"status": r.get("status"), "rank": int(r["rank"]),
                   "crps": _f(r.get("crps")) if ok else None,
                   "nll": _f(m.get("nll")) if ok else None,
                   "guards": bool(ok and r.get("guard_coverage") and r.get("guard_order")),
                   "guard_coverage": bool(ok and r.get("guard_coverage")),
                   "guard_order": bool(ok and r.get("guard_order")),
                   "coverage_90": _f(r.get("coverage_90")) if ok else None,
                   "coverage_wide": bool(ok and r.get("coverage_wide")),
                   "tied": bool(ok and r.get("tied_with_leader"))}
    # which coverage guard the advisor applied (the upper bound was dropped after this
    # benchmark; cases computed before say "both_bounds")
    rule = "low_only" if "coverage_wide" in a.ranking.columns else "both_bounds"
    return {"scheme": a.validation["scheme"], "pick": a.recommendation["surrogate"],
            "coverage_rule": rule, "models": rows}


def _f(v):
    return None if v is None or not np.isfinite(v) else float(v)


def measure_case(problem_name: str, replicate: int, n: int, truth_seeds: int) -> dict:
    import advisor
    from benchmarks.real_logs.campaigns import campaign_log
    from benchmarks.real_logs.measure import _load, _truth
    from benchmarks.real_logs.problems import PROBLEMS

    problem = PROBLEMS[problem_name]
    names = advisor.surrogate_names()
    past_c, new_c = campaign_names(replicate)
    past = campaign_log(problem_name, past_c, n)
    new = campaign_log(problem_name, new_c, n)
    sign = 1.0 if problem.direction == "minimize" else -1.0
    t0 = time.process_time()
    with tempfile.TemporaryDirectory() as tmp:
        trials = _load(problem, past, Path(tmp))
        truth = {m: {"nll": [], "crps": []} for m in names}
        for k in range(truth_seeds):
            got = _truth(trials, new, names, k, sign)
            for m in names:
                truth[m]["nll"].append(got[m]["nll"])
                truth[m]["crps"].append(got[m]["crps"])
        t_truth = time.process_time() - t0
        cv = {s: _table(trials, names, replicate, s) for s in ("auto", "campaign")}
    return {"problem": problem_name, "replicate": replicate, "n_per_campaign": n,
            "y_std": float(np.std(past[problem.objective].to_numpy(float))),
            "candidates": names, "truth": truth, "cv": cv,
            "cpu_seconds": {"truth": t_truth, "total": time.process_time() - t0}}


# ---------------------------------------------------------------------------- rules

def _eligible(table: dict) -> list[str]:
    """The models that pass the guard rails under the rule in force: as recorded, or (for
    cases computed before the coverage guard's upper bound was dropped) failing only by
    covering more than 97%."""
    return [n for n, r in table["models"].items() if r["crps"] is not None and (
        r["guards"] or (r.get("guard_order") and (r.get("coverage_wide")
                                                  or (r.get("coverage_90") or 0) > 0.97)))]


_passing = _eligible


def _leader(table: dict) -> str | None:
    """The rule in force: the lowest forward CRPS among the eligible models (all working
    models when none is eligible)."""
    fm = table["models"]
    ok = _eligible(table) or [n for n, r in fm.items() if r["crps"] is not None]
    return _argmin(ok, lambda n: fm[n]["crps"])


def _tie_group(table: dict) -> list[str]:
    lead = _leader(table)
    ok = set(_eligible(table))
    return [lead] + [n for n, r in table["models"].items()
                     if n != lead and r["tied"] and n in ok]


def _argmin(names, score):
    vals = {n: score(n) for n in names}
    vals = {n: v for n, v in vals.items() if v is not None}
    return min(vals, key=vals.get) if vals else None


def pick(rule: str, case: dict, truth_mean: dict | None = None) -> str | None:
    fwd, camp = case["cv"]["auto"], case["cv"]["campaign"]
    fm, cm = fwd["models"], camp["models"]
    if rule == "current":
        return fwd["pick"]
    if rule == "campaign":
        return _leader(camp)
    if rule == "forward+campaign":
        ok = [n for n in _passing(fwd) if cm.get(n, {}).get("crps") is not None]
        return _argmin(ok, lambda n: fm[n]["crps"] + cm[n]["crps"]) or _leader(fwd)
    if rule.startswith("tie:"):
        group = _tie_group(fwd)
        what = rule[4:]
        if what == "oracle":
            return _argmin(group, lambda n: truth_mean.get(n))
        scheme, score = what.split("_")
        src = cm if scheme == "campaign" else fm
        return _argmin(group, lambda n: src.get(n, {}).get(score)) or _leader(fwd)
    if rule.startswith("nll_guard_"):
        d = float(rule.rsplit("_", 1)[1])
        ok = [n for n in _passing(fwd) if fm[n]["nll"] is not None]
        if not ok:
            return _leader(fwd)
        best = min(fm[n]["nll"] for n in ok)
        return _argmin([n for n in ok if fm[n]["nll"] <= best + d], lambda n: fm[n]["crps"])
    if rule == "guard:coverage_both_bounds":
        # the rule before the real-log benchmark: a model covering more than 97% (with
        # no scale to bring it inside) failed the coverage guard rail too
        ok = [n for n, r in fm.items() if r["guards"] and not r.get("coverage_wide")
              and r["crps"] is not None]
        ok = ok or [n for n, r in fm.items() if r["crps"] is not None]
        return _argmin(ok, lambda n: fm[n]["crps"])
    if rule == "guard:coverage_low_only":
        return _leader(fwd)
    if rule == "guard:baseline_floor":
        # the rule in force, but a model whose forward CRPS is above the baseline's
        # (knowing nothing) is not eligible; with none eligible, the lowest CRPS of all
        base = (fm.get("baseline") or {}).get("crps")
        ok = [n for n in _eligible(fwd) if base is None or fm[n]["crps"] <= base]
        ok = ok or [n for n, r in fm.items() if r["crps"] is not None]
        return _argmin(ok, lambda n: fm[n]["crps"])
    if rule == "guard:order_only":
        ok = [n for n, r in fm.items() if r.get("guard_order") and r["crps"] is not None]
        return _argmin(ok, lambda n: fm[n]["crps"]) or fwd["pick"]
    if rule.startswith("always_"):
        return rule[len("always_"):]
    raise ValueError(rule)


#: The rule in force (the advisor's pick when every case was computed with this code):
#: the differences in the table are taken against it.
REFERENCE = "guard:coverage_low_only"

RULES = ["current", "campaign", "forward+campaign", "tie:campaign_crps", "tie:campaign_nll",
         "tie:forward_nll", "nll_guard_0.1", "nll_guard_0.25", "guard:coverage_both_bounds", "guard:baseline_floor",
         "guard:order_only",
         "guard:coverage_low_only", "tie:oracle"]


def case_truth(case: dict) -> tuple[dict, dict, int]:
    """({model: mean NLL over truth seeds}, {model: per-seed NLL array}, seeds)."""
    per = {m: np.array(v["nll"], float) for m, v in case["truth"].items()
           if v["nll"] and all(x is not None for x in v["nll"])}
    return {m: float(v.mean()) for m, v in per.items()}, per, len(next(iter(per.values())))


def case_regret(case: dict, name: str | None) -> dict | None:
    mean, per, k = case_truth(case)
    if name not in mean:
        return None
    best = min(mean, key=mean.get)
    order = sorted(mean, key=mean.get)
    d = per[name] - per[best]
    single = {m: float(v[0]) for m, v in per.items()}   # what one model seed says
    return {"pick": name, "regret": float(d.mean()),
            "se": float(d.std(ddof=1) / np.sqrt(k)) if k > 1 else None,
            "top2": name in order[:2], "best": best,
            "regret_single_seed": single[name] - min(single.values()),
            "top2_single_seed": name in sorted(single, key=single.get)[:2]}


def tabulate(cases: list[dict], rules=None) -> dict:
    names = list(dict.fromkeys(n for c in cases for n in c["candidates"]))
    rules = list(rules or RULES) + [f"always_{n}" for n in names]
    problems = list(dict.fromkeys(c["problem"] for c in cases))
    per_rule = {}
    for rule in rules:
        rows = []
        for c in cases:
            mean, _, _ = case_truth(c)
            g = case_regret(c, pick(rule, c, mean))
            rows.append(g)
        if any(g is None for g in rows):
            continue
        per_rule[rule] = rows
    cur = np.array([g["regret"] for g in per_rule[REFERENCE]])
    out = {"rules": {}, "problems": problems, "reference_rule": REFERENCE,
           "coverage_rule_of_cases": {k: sum(c["cv"]["auto"].get("coverage_rule",
                                                               "both_bounds") == k
                                           for c in cases)
                                      for k in ("both_bounds", "low_only")}}
    for rule, rows in per_rule.items():
        r = np.array([g["regret"] for g in rows])
        diff = r - cur
        n = len(r)
        by_p = {}
        for p in problems:
            sel = [g for g, c in zip(rows, cases) if c["problem"] == p]
            rp = np.array([g["regret"] for g in sel])
            by_p[p] = {"mean_regret": float(rp.mean()),
                       "se_over_replicates": float(rp.std(ddof=1) / np.sqrt(len(rp)))
                       if len(rp) > 1 else None,
                       "truth_se": float(np.sqrt(np.mean([(g["se"] or 0.0) ** 2 for g in sel])
                                         / len(sel))),
                       "top2_share": float(np.mean([g["top2"] for g in sel])),
                       "picks": [g["pick"] for g in sel], "best": [g["best"] for g in sel],
                       "regrets": [round(g["regret"], 4) for g in sel]}
        out["rules"][rule] = {
            "cases": n, "mean_regret": float(r.mean()),
            "se": float(r.std(ddof=1) / np.sqrt(n)) if n > 1 else None,
            "truth_se": float(np.sqrt(np.sum([(g["se"] or 0.0) ** 2 for g in rows])) / n),
            "top2_share": float(np.mean([g["top2"] for g in rows])),
            "max_regret": float(r.max()),
            "diff_vs_reference": float(diff.mean()),
            "diff_se": float(diff.std(ddof=1) / np.sqrt(n)) if n > 1 else None,
            "by_problem": by_p}
    # what one model seed would have said about the pick (the old measurement)
    cur_rows = per_rule[REFERENCE]
    out["single_seed_truth"] = {
        "mean_regret": float(np.mean([g["regret_single_seed"] for g in cur_rows])),
        "top2_share": float(np.mean([g["top2_single_seed"] for g in cur_rows])),
        "by_problem": {p: [round(g["regret_single_seed"], 4) for g, c in zip(cur_rows, cases)
                           if c["problem"] == p] for p in problems}}
    out["truth_seed_sd"] = {p: float(np.mean([np.std(np.array(v["nll"], float), ddof=1)
                                               for c in cases if c["problem"] == p
                                               for v in c["truth"].values()
                                               if v["nll"] and None not in v["nll"]
                                               and len(v["nll"]) > 1]))
                            for p in problems}
    return out


def _print_by_problem(rule: str, by_problem: dict) -> None:
    print(f"\n{rule} by problem (expected truth over model seeds; ± se over replicates):")
    for p, v in by_problem.items():
        print(f"  {p:14s} regret {v['mean_regret']:.3f} ± {v['se_over_replicates'] or 0:.3f} "
              f"(truth se {v['truth_se']:.3f})  top-2 {v['top2_share']:.2f}  picks "
              f"{','.join(v['picks'])}  best {','.join(v['best'])}  {v['regrets']}")


def print_table(t: dict) -> None:
    print(f"\n{'rule':20s} {'regret':>7s} {'±se':>6s} {'truth se':>8s} {'top-2':>6s} "
          f"{'max':>6s} {'vs ref.':>11s} {'±se':>6s}")
    for rule, r in sorted(t["rules"].items(), key=lambda kv: kv[1]["mean_regret"]):
        print(f"{rule:20s} {r['mean_regret']:7.3f} {r['se'] or 0:6.3f} {r['truth_se']:8.3f} "
              f"{r['top2_share']:6.2f} {r['max_regret']:6.2f} {r['diff_vs_reference']:+11.3f} "
              f"{r['diff_se'] or 0:6.3f}")
    print(f"\nreference rule {t['reference_rule']}; cases by the coverage rule the advisor "
          f"ran with: {t['coverage_rule_of_cases']}")
    for rule in ("guard:coverage_both_bounds", t["reference_rule"]):
        _print_by_problem(rule, t["rules"][rule]["by_problem"])
    s = t["single_seed_truth"]
    print(f"\nwith a single-seed truth (seed 0) the reference rule's mean regret would read "
          f"{s['mean_regret']:.3f}, top-2 {s['top2_share']:.2f}")
    print("sd of a model's true NLL over model seeds (mean over models and replicates):",
          {p: round(v, 3) for p, v in t["truth_seed_sd"].items()})


def main(argv=None):
    from benchmarks.real_logs.problems import PROBLEMS

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials", type=int, default=20, help="trials per campaign")
    ap.add_argument("--replicates", default="0,1,2,3,4", help="log replicates (comma-separated)")
    ap.add_argument("--truth-seeds", type=int, default=3)
    ap.add_argument("--problems", default=None)
    ap.add_argument("--resume", action="store_true", help="keep the stored cases")
    ap.add_argument("--table-only", action="store_true")
    ap.add_argument("--out", default=str(OUT))
    args = ap.parse_args(argv)
    out_path = Path(args.out)
    stored = json.loads(out_path.read_text()) if out_path.exists() else {}
    cases = {f"{c['problem']}/{c['replicate']}/{c['n_per_campaign']}": c
             for c in stored.get("cases", [])} if (args.resume or args.table_only) else {}
    if not args.table_only:
        if not args.resume:
            out_path.write_text(json.dumps({"cases": []}))
        probs = args.problems.split(",") if args.problems else list(PROBLEMS)
        for r in [int(x) for x in args.replicates.split(",")]:
            for p in probs:
                key = f"{p}/{r}/{args.trials}"
                if key in cases:
                    continue
                c = measure_case(p, r, args.trials, args.truth_seeds)
                cases[key] = c
                g = case_regret(c, c["cv"]["auto"]["pick"])
                print(f"{key:22s} pick {g['pick']:15s} best {g['best']:15s} regret "
                      f"{g['regret']:.3f} ± {g['se'] or 0:.3f}  ({c['cpu_seconds']['total']:.0f} "
                      "cpu s)", flush=True)
                # re-read and merge so that parallel runs on other problems are kept
                now = json.loads(out_path.read_text()) if out_path.exists() else {}
                merged = {f"{x['problem']}/{x['replicate']}/{x['n_per_campaign']}": x
                          for x in now.get("cases", [])}
                merged.update(cases)
                cases = merged
                out_path.write_text(json.dumps({"cases": list(cases.values())}, default=float))
    sel = [c for c in cases.values() if c["n_per_campaign"] == args.trials]
    sel.sort(key=lambda c: (list(PROBLEMS).index(c["problem"]), c["replicate"]))
    t = tabulate(sel)
    print_table(t)
    out_path.write_text(json.dumps({
        "description": __doc__.split("\n\n")[0], "n_per_campaign": args.trials,
        "replicates": sorted({c["replicate"] for c in sel}),
        "truth_seeds": sorted({len(c["truth"][c["candidates"][0]]["nll"]) for c in sel}),
        "table": t, "cases": list(cases.values())}, indent=1, default=float))
    print("wrote", out_path)


if __name__ == "__main__":
    main()
