"""The planning stage's campaign GP with and without the trials' campaigns.

Before this change the planning stage (relevance, learning curve, proposals) fitted
every model as ``fit(X, y)``; a model with ``uses_groups`` (the campaign GP) then saw
all campaigns as one.  Now it is told each trial's campaign, as cross-validation does.
This script runs the quick planning functions on the three sample logs with the
``campaign_gp`` twice, on the same seeds and splits:

* ``pooled``: a subclass with ``uses_groups = False``, so the planning calls
  ``fit(X, y)`` / ``predict(X)`` exactly as before the change;
* ``grouped``: the model as it is (campaigns given; new-campaign predictions for the
  Sobol design and the proposals; the acquisition's sd that of the difference to the
  incumbent within the next campaign, ``_proposals._WithinNextCampaign``);
* ``grouped_full_sd_in_acq`` (proposals only): grouped, but the acquisition reads the
  model's full new-campaign sd (the campaign's unknown level included).

Against the truth: each sample log's data sheet (``sample_logs/*.md``) gives the
response it was generated from; without its campaign shifts (and, for the moulding log,
with the lot-dependent mould-temperature optimum at its mean over the lots, 68 C, which
changes the function by a constant only) that is the population function the planning
should read.  Its total Sobol indices under the tool's own design
(``_sobol_point``, 2^14 base rows) are compared with each fit's, and the proposals are
scored by it (minimization form, the objective's units).

    PYTHONPATH=. python benchmarks/planning_groups.py
    # writes benchmarks/results/planning_groups.json
"""

from __future__ import annotations

import json
import platform
import time
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

from advisor.logs import load_trials
from advisor.planning import _proposals, learning_curve, parameter_relevance, propose_batch
from advisor.planning._relevance import _sobol_point
from advisor.surrogates import make_surrogate
from advisor.surrogates.gp_campaign import CampaignGP

ROOT = Path(__file__).resolve().parents[1]
LOGS = {
    "moulding": dict(path="sample_logs/moulding_warpage.csv", objective="warpage_mm",
                     campaign="lot", order="run"),
    "fermentation": dict(path="sample_logs/fermentation_yield.csv",
                         objective="yield_g_per_l", direction="maximize",
                         campaign="batch_series", order="run", status="outcome",
                         success=["ok"]),
    "forecast": dict(path="sample_logs/forecast_tuning.csv", objective="val_mape",
                     campaign="search_round", order="trial",
                     space="sample_logs/forecast_tuning.space.toml"),
}


class PooledCampaignGP(CampaignGP):
    """The campaign GP as the planning stage called it before: never told campaigns."""

    uses_groups = False


def make_pooled(name, seed=0, quick=False):
    assert name == "campaign_gp"
    return PooledCampaignGP(**make_surrogate(name, seed=seed, quick=quick).get_params())


def _moulding(f):
    return (0.00025 * (f.mould_temp_c - 68) ** 2 + 3e-7 * (f.pack_pressure_bar - 650) ** 2
            + 0.0016 * (f.cooling_time_s - 19) ** 2 + 3e-5 * (f.melt_temp_c - 235) ** 2
            + 0.004 * np.sin(f.injection_speed_mm_s / 15) + 0.0015 * (f.hold_time_s - 7) ** 2)


def _fermentation(f):  # yield, maximized: minimization form is its negative
    media = {"yeast_extract": 5, "corn_steep": 3, "molasses": 0, "defined": -2}
    return -(np.array([media[m] for m in f.media]) - 0.30 * (f.temperature_c - 31.5) ** 2
             - 0.06 * (f.feed_rate_ml_h - 12) ** 2
             - 0.08 * np.maximum(0, f.feed_rate_ml_h - 4 - f.stir_rpm / 40) ** 2
             + 0.4 * np.log(f.inoculum_pct))


def _forecast(f):
    opt = {"adam": 0.0, "adamw": -0.3, "sgd": 1.0}
    shift = {"adam": 0.0, "adamw": 0.0, "sgd": 0.8}
    o = np.array([opt[x] for x in f.optimizer])
    s = np.array([shift[x] for x in f.optimizer])
    return (o + 1.1 * (np.log10(f.learning_rate) + 2.7 - s) ** 2
            + 0.15 * (np.log10(f.weight_decay) + 4) ** 2 + 0.35 * (f.n_layers - 3) ** 2
            + 2.5 * np.exp(-f.hidden_units / 60) + 6 * (f.dropout - 0.15) ** 2)


TRUTH = {"moulding": _moulding, "fermentation": _fermentation, "forecast": _forecast}


def _true_totals(log, space) -> dict:
    fn = TRUTH[log]
    _, st = _sobol_point(
        lambda Xe: np.array(fn(space.decode(Xe, "onehot")), dtype=float, copy=True),
        space, "onehot", n_base=2 ** 14, seed=1)
    return dict(zip(space.names, (float(v) for v in st)))


def _index_error(rows, truth) -> dict:
    err = [abs(r["total"] - truth[r["name"]]) for r in rows]
    held = sum(r["total_interval"][0] <= truth[r["name"]] <= r["total_interval"][1]
               for r in rows)
    return {"mean_abs_error": float(np.mean(err)), "max_abs_error": float(np.max(err)),
            "intervals_holding_truth": int(held), "parameters": len(rows)}


def _proposal_truth(log, frame) -> dict:
    v = np.asarray(TRUTH[log](frame), dtype=float)
    return {"true_mean": float(v.mean()), "true_best": float(v.min())}


def _relevance_rows(rel):
    return [{k: p[k] for k in ("name", "total", "total_interval", "permutation_importance",
                               "permutation_interval", "freeze")} for p in rel["parameters"]]


def _proposals_over_seeds(log, trials, k, seeds=range(5)) -> dict:
    """True value of the first batch (mean over its k settings, and its best), per
    variant, over ``seeds`` (the pool and the fit change with the seed)."""
    out = {}
    view = _proposals._acquisition_view
    for label in ("pooled", "grouped", "grouped_full_sd_in_acq"):
        vals = []
        for seed in seeds:
            make = make_pooled if label == "pooled" else make_surrogate
            if label == "grouped_full_sd_in_acq":
                _proposals._acquisition_view = lambda m, X_logged: m
            try:
                props = propose_batch(trials, "campaign_gp", "ei:xi=0.01", k, seed=seed,
                                      quick=True, make=make)
            finally:
                _proposals._acquisition_view = view
            vals.append(_proposal_truth(log, props))
        out[label] = {"true_mean": [v["true_mean"] for v in vals],
                      "true_best": [v["true_best"] for v in vals],
                      "true_mean_avg": float(np.mean([v["true_mean"] for v in vals])),
                      "true_best_avg": float(np.mean([v["true_best"] for v in vals]))}
    return out


def run(seed: int = 0, k: int = 5) -> dict:
    out = {}
    for log, spec in LOGS.items():
        spec = dict(spec)
        path = ROOT / spec.pop("path")
        if "space" in spec:
            spec["space"] = ROOT / spec["space"]
        trials = load_trials(path, **spec)
        truth = _true_totals(log, trials.space)
        res = {"n": trials.n_used, "campaigns": trials.n_campaigns, "true_total": truth}
        for label, make in (("pooled", make_pooled), ("grouped", make_surrogate)):
            t0 = time.perf_counter()
            rel = parameter_relevance(trials, "campaign_gp", seed=seed, quick=True, make=make)
            lc = learning_curve(trials, "campaign_gp", seed=seed, quick=True, make=make)
            props = propose_batch(trials, "campaign_gp", "ei:xi=0.01", k, seed=seed,
                                  quick=True, make=make)
            last = lc["points"][-1]
            res[label] = {
                "relevance": _relevance_rows(rel),
                "freeze_candidates": [p["name"] for p in rel["parameters"] if p["freeze"]],
                "total_vs_truth": _index_error(_relevance_rows(rel), truth),
                "proposals_true_value": _proposal_truth(log, props),
                "learning_curve": {"reading": lc["reading"], "n_train": last["n_train"],
                                   "crps_mean": last["crps_mean"], "crps": last["crps"],
                                   "nll_mean": last["nll_mean"],
                                   "points": [(p["n_train"], p["crps_mean"])
                                              for p in lc["points"]]},
                "proposals": props[trials.space.names + ["predicted_mean", "predicted_low_90",
                                                         "predicted_high_90"]]
                .to_dict(orient="records"),
                "seconds": time.perf_counter() - t0}
        a = np.array(res["grouped"]["learning_curve"]["crps"], dtype=float)
        b = np.array(res["pooled"]["learning_curve"]["crps"], dtype=float)
        d = a - b
        res["crps_difference_largest_size"] = {
            "grouped_minus_pooled_mean": float(np.mean(d)),
            "sd": float(np.std(d, ddof=1)), "repeats": len(d),
            "grouped_lower_in": int(np.sum(d < 0))}
        res["proposals_over_seeds"] = _proposals_over_seeds(log, trials, k)
        out[log] = res
        print(log, json.dumps(res["crps_difference_largest_size"]), flush=True)
    return out


def main():
    with threadpool_limits(1):
        result = run()
    result["_meta"] = {"python": platform.python_version(), "seed": 0, "quick": True,
                       "acquisition": "ei:xi=0.01", "k": 5}
    dest = ROOT / "benchmarks" / "results" / "planning_groups.json"
    dest.write_text(json.dumps(result, indent=1, default=float))
    print("wrote", dest)


if __name__ == "__main__":
    main()
