"""What failed trials and the P(success) weighting do to the simulated campaigns.

    python benchmarks/failure_weighting.py          # both sample logs with failures
    python benchmarks/failure_weighting.py --jobs 1

On the two sample logs with failed trials (fermentation, forecast; invented data), the
backtest alone (campaign_gp, the quick plan and quick acquisition grid, seed 0, 24 runs
per setting) is run four ways on the same stand-ins, starts and noise:

* ``none``: without the log's failure model (no trial fails);
* ``weighted``: the failure model as the assessment uses it (failed picks give no
  value, every model-based setting weighted by the run's own P(success));
* ``unweighted``: the same failures, no weighting (``FailureModel(weighted=False)``);
* ``no_cutoff``: weighted, without leaving out candidates below P(success) 0.5.

Per log and way: the recommended setting's test against random and grid search
(``versus_baselines`` of the default EI xi = 0.01: raw one-sided p and the final regret
as a multiple of the baseline's), and per setting the mean final regret, the mean failed
picks per run and, against ``unweighted``, the paired difference of the final regret
with its standard error over the runs and how many runs ended differently.  Writes
``benchmarks/results/failure_weighting.json``.  About a minute on 2 cores.
"""

from __future__ import annotations

import argparse
import functools
import json
import sys
from pathlib import Path

import numpy as np

import advisor
import advisor.backtest._failures as _failures
from advisor.acquisition import default_settings
from advisor.assessment._stages import _feasibility, _quick_model
from advisor.backtest import FailureModel, plan_for, run_backtest
from advisor.batching import weight_by_success
from advisor.execution import Executor
from sample_log_args import SAMPLE_LOGS  # benchmarks/, on the path when run as a script

ROOT = Path(__file__).resolve().parent.parent
LOGS = {k: v for k, v in SAMPLE_LOGS.items() if k != "moulding_warpage"}  # failed trials
WAYS = ("none", "weighted", "unweighted", "no_cutoff")


def _run(trials, fm, way, seed, executor):
    failures = {"none": None, "weighted": FailureModel(fm, True),
                "unweighted": FailureModel(fm, False),
                "no_cutoff": FailureModel(fm, True)}[way]
    original = _failures.weight_by_success
    if way == "no_cutoff":   # in this process only: the executor must be serial
        _failures.weight_by_success = functools.partial(weight_by_success, min_success=0.0)
    try:
        return run_backtest(trials, ["campaign_gp"], default_settings(True), seed=seed,
                            quick=True, budget=None, batch=1,
                            executor=Executor(jobs=1) if way == "no_cutoff" else executor,
                            make=_quick_model, plan=plan_for(True), failures=failures)
    finally:
        _failures.weight_by_success = original


def _summary(out):
    sim = out["simulated"]
    vb = (out["per_surrogate"]["campaign_gp"].get("decision") or {}).get(
        "versus_baselines") or {}
    settings = {}
    for r in sim["results"]:
        fin = [x["final_regret"] for x in r["runs"]]
        settings[r["label"]] = {
            "final_regret": fin,
            "mean_final_regret": float(np.mean(fin)),
            "mean_failed_picks": float(np.mean([x.get("failed_picks", 0) for x in r["runs"]]))}
    rnd = sim["random"]["per_unit_mean_final_regret"]
    return {"versus_baselines": [
        {k: c.get(k) for k in ("baseline", "metric", "mean_difference", "p_value", "p_holm",
                               "ratio_of_means")} for c in vb.get("comparisons", [])],
        "setting_tested": vb.get("setting"),
        "random_mean_final_regret": float(np.mean(list(rnd.values()) if isinstance(rnd, dict)
                                                  else rnd)),
        "settings": settings,
        "failure_info": {k: v for k, v in (out.get("failures") or sim.get("failures") or {}).items()
                         if k in ("mean_failure_probability", "failed_share", "weighted")}}


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--out", default=str(ROOT / "benchmarks" / "results" /
                                         "failure_weighting.json"))
    args = ap.parse_args(argv)
    executor = Executor(jobs=args.jobs)
    doc = {"seed": args.seed, "surrogate": "campaign_gp", "plan": "quick", "logs": {}}
    for name, kw in LOGS.items():
        trials = advisor.load_trials(ROOT / "sample_logs" / f"{name}.csv", **kw)
        feas = _feasibility(trials, "forward", seed=args.seed, quick=True, executor=executor)
        fm = feas["_model"]
        kernel = fm.gp_kernel()
        entry = {"failure_model": feas.get("chosen"),
                 "failed_share_of_log": float(np.mean(fm.fail_)),
                 "run_classifier_kernel": str(kernel), "ways": {}}
        for way in WAYS:
            entry["ways"][way] = _summary(_run(trials, fm, way, args.seed, executor))
        base = entry["ways"]["unweighted"]["settings"]
        for way in ("weighted", "no_cutoff", "none"):
            for label, st in entry["ways"][way]["settings"].items():
                d = np.subtract(st["final_regret"], base[label]["final_regret"])
                st["minus_unweighted"] = {
                    "mean": float(d.mean()), "se": float(d.std(ddof=1) / np.sqrt(len(d))),
                    "runs_different": int(np.sum(~np.isclose(d, 0.0))), "runs": len(d)}
        doc["logs"][name] = entry
        for way in WAYS:
            w = entry["ways"][way]
            rs = next((c for c in w["versus_baselines"] if c["baseline"] == "random search"
                       and c["metric"] == "final"), None)
            line = "" if rs is None else f"vs random final {rs['ratio_of_means']:.2f}x p {rs['p_value']:.2g}"
            ei = w["settings"].get("EI xi=0.01", {})
            print(f"{name:20s} {way:10s} {line:28s} EI final {ei.get('mean_final_regret', float('nan')):.3f}"
                  f" failed picks {ei.get('mean_failed_picks', float('nan')):.2f}"
                  + (f"  minus unweighted {ei['minus_unweighted']['mean']:+.3f} ± "
                     f"{ei['minus_unweighted']['se']:.3f}" if "minus_unweighted" in ei else ""))
    for entry in doc["logs"].values():
        for w in entry["ways"].values():
            for st in w["settings"].values():
                st.pop("final_regret")
    out = Path(args.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps(doc, indent=2) + "\n")
    print(f"wrote {out}")


if __name__ == "__main__":
    sys.exit(main())
