"""Does model-based search beat random search on the sample logs' stand-ins?

    python benchmarks/baseline_pay.py                 # 12 and 30 trials, current code
    python benchmarks/baseline_pay.py --stale-campaign-gp   # the campaign GP kept
                                                      # stale between re-fits (as before
                                                      # 2026-12-03)

The product's backtest alone (``advisor.backtest.run_backtest``) on the three invented
sample logs, with campaign_gp and gp, the quick plan and grid, seed 0, the simulated
length capped at 12 or 30 trials (``sim_max_budget``), without the fermentation log's
model of failure.  Recorded per model: the paired decision (Holm-adjusted p of every
setting against the default, power) and ``versus_baselines`` (the default's placement
test against random search and signed-rank test against grid search, in AUC and final
regret, with the final regret as a multiple of the baseline's).  Writes
``benchmarks/results/baseline_pay.json`` (section per variant).  README: *Does
model-based search pay here at all?*
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

from threadpoolctl import threadpool_limits

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from advisor import load_trials  # noqa: E402
from advisor.assessment._stages import _quick_model, _settings  # noqa: E402
from advisor.backtest import plan_for, run_backtest  # noqa: E402

OUT = ROOT / "benchmarks" / "results" / "baseline_pay.json"
LOGS = {
    "fermentation_yield": dict(objective="yield_g_per_l", direction="maximize",
                               campaign="batch_series", order="run"),
    "moulding_warpage": dict(objective="warpage_mm", campaign="lot", order="run"),
    "forecast_tuning": dict(objective="val_mape", campaign="search_round", order="trial",
                            space=str(ROOT / "sample_logs" / "forecast_tuning.space.toml")),
}


def one(name: str, trials_cap: int, seed: int = 0) -> dict:
    tr = load_trials(ROOT / "sample_logs" / f"{name}.csv", **LOGS[name])
    t0 = time.process_time()
    with threadpool_limits(1):
        bt = run_backtest(tr, ["campaign_gp", "gp"], _settings(None, True), seed=seed,
                          quick=True, make=_quick_model,
                          plan=plan_for(True, sim_max_budget=trials_cap))
    out = {"trials": bt["simulated"]["budget"], "runs": bt["simulated"]["runs_per_setting"],
           "cpu_seconds": time.process_time() - t0,
           "updates_by_model": bt["updates_by_model"]}
    for m in ("campaign_gp", "gp"):
        dec = bt["per_surrogate"][m]["decision"]
        vb = dec.get("versus_baselines") or {}
        out[m] = {"chosen": dec["chosen"], "power_at_0.1": dec["power_at_0.1"],
                  "power_final_at_0.1": dec["power_final_at_0.1"],
                  "p_holm": {c["label"]: c["p_holm"] for c in dec["comparisons"]},
                  "versus_baselines": [
                      {k: c.get(k) for k in ("baseline", "metric", "test", "runs",
                                             "mean_difference", "p_holm", "significant",
                                             "ratio_of_means")}
                      for c in vb.get("comparisons", [])]}
    return out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials", default="12,30")
    ap.add_argument("--logs", default=",".join(LOGS))
    ap.add_argument("--stale-campaign-gp", action="store_true",
                    help="remove the campaign GP's with_fixed_hyperparameters() (the "
                         "behaviour before 2026-12-03) to reproduce the old figures")
    args = ap.parse_args(argv)
    variant = "current"
    if args.stale_campaign_gp:
        from advisor.surrogates.gp_campaign import CampaignGP
        del CampaignGP.with_fixed_hyperparameters
        variant = "stale_campaign_gp"
    res = json.loads(OUT.read_text()) if OUT.exists() else {}
    for name in args.logs.split(","):
        for cap in (int(t) for t in args.trials.split(",")):
            row = one(name, cap)
            vb = {(c["baseline"], c["metric"]): c for c in row["campaign_gp"]["versus_baselines"]}
            fin = vb.get(("random search", "final"), {})
            print(f"{variant} {name} {row['trials']} trials: campaign_gp vs random final "
                  f"p_holm {fin.get('p_holm')}, ratio {fin.get('ratio_of_means')}  "
                  f"[{row['cpu_seconds']:.0f} s cpu]", flush=True)
            res.setdefault(variant, {}).setdefault(name, {})[str(cap)] = row
            OUT.write_text(json.dumps(res, indent=1, default=float))


if __name__ == "__main__":
    main()
