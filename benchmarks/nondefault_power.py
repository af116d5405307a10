"""With more simulated runs, can the decision pick a truly better setting?

    python benchmarks/nondefault_power.py run --constructions gp_trend,gp_trend+gp_sum \
        --functions 32 --starts 3 --log-seeds 0,1,2,3,4,5,6,7,8,9
    python benchmarks/nondefault_power.py summary

The ``power`` part of ``benchmarks/nondefault_wins.py`` (its ``unit`` part's backtest,
kept in a module of its own): the backtest alone (GP surrogate, 30 trials from d + 1
starts, as ``unit``) on each past log, but with the QUICK grid (EI xi=0.01, PI xi=0.01,
UCB beta=4, Thompson) and more simulated runs per log (``--functions`` stand-ins x
``--starts`` random starts; ``unit`` ran 8 x 3), for each stand-in construction
(``--constructions``: ``+``-joined ``BacktestPlan.sim_classes``, ``gp+forest`` being the
product's), decided in both units of ``unit`` (range-normalized AUC, and final regret
over random order's on the same stand-in) by the product's paired decision (one-sided
Wilcoxon vs the default, Holm over the grid at 0.05, intersection-union across classes).
Cases: ``levy3:0.05`` and ``branin:0.2`` have true winners (``truth``/``truth_40``;
within the quick grid: UCB beta=4 on Levy-3, Thompson on Branin 0.2),
``michalewicz2:0.05`` and ``branin:0.05`` are controls (no setting truly wins).

Each log's row is merged into the section ``power`` of
``benchmarks/results/nondefault_wins.json`` as it finishes (key: construction, case,
log seed); ``summary`` writes ``power_summary``: per construction and unit the true-winner
picks and false picks over logs with Clopper-Pearson 95% intervals (scipy) and CPU s per
log, and whether the construction meets the criterion stated before the run: a true
winner picked on >= 30% of the winner-case logs AND false picks on <= 10% of the
control logs.  The loop is seed-major (every construction and case for log seed 0, then
1, ...) so that a run stopped early leaves a balanced table.

    python benchmarks/nondefault_power.py run --constructions gp+forest \
        --cases levy3:0.05,branin:0.2 --log-seeds 0,1 --functions 512 --starts 3 \
        --jobs 2 --section power_1536

(stop 31) the product's own stand-ins (``gp+forest``) with 1,536 runs per setting, the
run count at which the sample logs' power for 0.1 is 0.34-0.98: does buying runs find
the true winners?  Each row also keeps the product's decision, its
``power_final_at_0.1`` and ``detectable_gain`` (``product``); section ``power_1536``,
summary ``power_1536_summary``; about 4.5 minutes a log with 2 workers.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np
from scipy import stats
from threadpoolctl import threadpool_limits

ROOT = Path(__file__).resolve().parent.parent
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from advisor.acquisition import default_settings  # noqa: E402
from benchmarks import nondefault_wins as nw  # noqa: E402

WINNER_CASES = ("levy3:0.05", "branin:0.2")
CONTROL_CASES = ("michalewicz2:0.05", "branin:0.05")
SECTION = "power"
#: the criterion, stated before the run
MIN_TRUE_PICKS = 0.30
MAX_FALSE_PICKS = 0.10


def _truth_winners(res, key) -> set:
    """True winners of a case (``truth`` at 20 replicates or ``truth_40``)."""
    out = set()
    for sec in ("truth", "truth_40"):
        out |= set(res.get(sec, {}).get(key, {}).get("true_winners", []))
    return out


def run(constructions, cases, log_seeds, functions, starts, budget=30, progress=print,
        jobs=1, section=SECTION):
    from advisor.assessment._stages import _quick_model
    from advisor.backtest import plan_for, run_backtest
    from advisor.execution import Executor

    settings = default_settings(quick=True)
    for s in log_seeds:
        for cons in constructions:
            classes = tuple(cons.split("+"))
            for key, seed, d, trials in nw._past_logs(cases, [s]):
                plan = plan_for(True, sim_max_budget=budget, n_init=d + 1, replay=False,
                                sim_functions=functions, sim_seeds=starts,
                                sim_classes=classes)
                t0, w0 = time.process_time(), time.time()
                with threadpool_limits(1):
                    bt = run_backtest(trials, ["gp"], settings, seed=seed, quick=True,
                                      budget=budget, make=_quick_model, plan=plan,
                                      executor=Executor(jobs=jobs))
                row = {m: nw._unit_decision(bt, "gp", m) for m in ("auc", "final")}
                dec = bt["per_surrogate"]["gp"]["decision"]
                # the product's own decision and what it says its runs can see
                row["product"] = {k: dec.get(k) for k in ("chosen", "power_final_at_0.1",
                                                           "detectable_gain")}
                row["runs_per_setting"] = bt["simulated"].get("runs_per_setting")
                row["classes"] = bt["simulated"]["standins"]["classes"]
                row["cpu_seconds"] = time.process_time() - t0
                row["wall_seconds"] = time.time() - w0
                res = json.loads(nw.OUT.read_text()) if nw.OUT.exists() else {}
                res.setdefault(section, {}).setdefault(cons, {}).setdefault(
                    key, {})[str(seed)] = row
                res[section]["_config"] = {"functions": functions, "starts": starts,
                                           "budget": budget, "grid": "quick"}
                nw.OUT.write_text(json.dumps(res, indent=1, default=float))
                progress(f"{cons} {key} seed {seed}: auc -> {row['auc']['chosen']}, final "
                         f"-> {row['final']['chosen']} [{row['cpu_seconds']:.0f} s cpu, "
                         f"{row['wall_seconds']:.0f} s wall]", flush=True)


def _cp(k, n) -> list:
    if n == 0:
        return [None, None]
    ci = stats.binomtest(k, n).proportion_ci(confidence_level=0.95, method="exact")
    return [float(ci.low), float(ci.high)]


def summarize(res, section=SECTION) -> dict:
    out = {}
    default = nw.DEFAULT.label
    quick = {s.label for s in default_settings(quick=True)}
    for cons, cases in res.get(section, {}).items():
        if cons.startswith("_"):
            continue
        seeds = [set(rows) for rows in cases.values()]
        common = set.intersection(*seeds) if seeds else set()  # balanced: logs every case has
        row = {}
        for unit in ("auc", "final"):
            tw = tw_n = fw = fc = fc_n = 0
            picks = {}
            for key, rows in cases.items():
                winners = _truth_winners(res, key) & quick
                for s in sorted(common, key=int):
                    ch = rows[s][unit]["chosen"]
                    picked = ch not in (None, default)
                    picks.setdefault(key, []).append(ch if picked else None)
                    if winners:
                        tw_n += 1
                        tw += ch in winners
                        fw += picked and ch not in winners
                    else:
                        fc_n += 1
                        fc += picked
            row[unit] = {
                "true_winner_picks": tw, "winner_case_logs": tw_n,
                "true_winner_rate": tw / tw_n if tw_n else None,
                "true_winner_ci95": _cp(tw, tw_n),
                "false_picks_on_controls": fc, "control_logs": fc_n,
                "false_pick_rate": fc / fc_n if fc_n else None,
                "false_pick_ci95": _cp(fc, fc_n),
                "wrong_picks_on_winner_cases": fw,
                "meets_criterion": bool(tw_n and fc_n and tw / tw_n >= MIN_TRUE_PICKS
                                        and fc / fc_n <= MAX_FALSE_PICKS),
                "picks": picks}
        cpu = [r["cpu_seconds"] for rows in cases.values() for r in rows.values()]
        row["logs_per_case"] = len(common)
        row["cpu_seconds_per_log"] = float(np.mean(cpu))
        row["runs_per_setting"] = next(iter(next(iter(cases.values())).values())).get(
            "runs_per_setting")
        # each true winner's mean simulated difference (final unit) and sign over logs
        diffs = {}
        for key, rows in cases.items():
            for w in sorted(_truth_winners(res, key) & quick):
                v = np.array([rows[s]["final"]["comparisons"][w]["mean_difference"]
                              for s in sorted(common, key=int)])
                p = [rows[s]["final"]["comparisons"][w]["p"] for s in sorted(common, key=int)]
                diffs[f"{key} {w}"] = {"mean": float(v.mean()), "negative": int((v < 0).sum()),
                                       "median_raw_p": float(np.median(p))}
        row["winner_final_differences"] = diffs
        out[cons] = row
    out["criterion"] = (f"wins if it picks a true winner on >= {MIN_TRUE_PICKS:.0%} of the "
                        f"winner-case logs and makes false picks on <= {MAX_FALSE_PICKS:.0%} "
                        "of the control logs (stated before the run)")
    return out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("part", choices=["run", "summary"])
    ap.add_argument("--constructions", default="gp_trend,gp_trend+gp_sum")
    ap.add_argument("--cases", default=",".join(WINNER_CASES + CONTROL_CASES))
    ap.add_argument("--log-seeds", default="0,1,2,3,4,5,6,7,8,9")
    ap.add_argument("--functions", type=int, default=32)
    ap.add_argument("--starts", type=int, default=3)
    ap.add_argument("--jobs", type=int, default=1, help="worker processes per backtest")
    ap.add_argument("--section", default=SECTION,
                    help="results section (its summary: SECTION_summary)")
    args = ap.parse_args(argv)
    if args.part == "run":
        run(args.constructions.split(","), nw._cases(args.cases),
            [int(s) for s in args.log_seeds.split(",")], args.functions, args.starts,
            jobs=args.jobs, section=args.section)
    res = json.loads(nw.OUT.read_text())
    summ = summarize(res, args.section)
    for cons, row in summ.items():
        if cons == "criterion":
            continue
        for unit in ("auc", "final"):
            u = row[unit]
            print(f"{cons} {unit}: true {u['true_winner_picks']}/{u['winner_case_logs']} "
                  f"{u['true_winner_ci95']}, false {u['false_picks_on_controls']}/"
                  f"{u['control_logs']} {u['false_pick_ci95']}, wrong on winner cases "
                  f"{u['wrong_picks_on_winner_cases']}, meets {u['meets_criterion']}")
        print(f"   {row['logs_per_case']} logs/case, {row['runs_per_setting']} runs, "
              f"{row['cpu_seconds_per_log']:.0f} s cpu/log; {row['winner_final_differences']}")
    res[f"{args.section}_summary"] = summ
    nw.OUT.write_text(json.dumps(res, indent=1, default=float))


if __name__ == "__main__":
    main()
