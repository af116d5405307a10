"""Does every model know more than nothing?  Held-out NLL per model per case.

Cases: each sample log under forward chaining and leave-one-campaign-out (all folds,
``advisor.assess(..., quick=True, backtest=False, plan=False)``), 40 rows of pure noise
in 6 inputs scored on 300 fresh rows, and Hartmann-3 (Dixon & Szegő 1978) on the first 3
of 16 inputs, 150 rows, scored on 300.  The README's table comes from this script.

    python benchmarks/graceful_degradation.py [models,comma,separated] [logs,noise,h3] [out.json]

Writes ``benchmarks/results/graceful_degradation_rerun.json`` by default (the committed
``graceful_degradation.json`` holds the README's numbers and those before the change).
"""
import sys, time, json
import numpy as np
from pathlib import Path
from scipy.stats import norm
import advisor
from advisor.surrogates import make_surrogate

root = Path(__file__).resolve().parent.parent
LOGS = {
 "moulding": dict(path="sample_logs/moulding_warpage.csv", objective="warpage_mm", campaign="lot", order="run"),
 "fermentation": dict(path="sample_logs/fermentation_yield.csv", objective="yield_g_per_l", direction="maximize", campaign="batch_series", order="run", status="outcome", success=["ok"]),
 "forecast": dict(path="sample_logs/forecast_tuning.csv", objective="val_mape", campaign="search_round", order="trial", space="sample_logs/forecast_tuning.space.toml"),
}
models = sys.argv[1].split(",") if len(sys.argv) > 1 else ["gp","campaign_gp","warped_gp","forest","dngo","bnn","ensemble","neural_process","baseline"]
which = sys.argv[2].split(",") if len(sys.argv) > 2 else ["logs","noise","h3"]
rows = {}
if "logs" in which:
  for name, kw in LOGS.items():
    kw = dict(kw); p = root / kw.pop("path")
    if "space" in kw: kw["space"] = root / kw["space"]
    trials = advisor.load_trials(p, **kw)
    for val in ["forward", "campaign"]:
        t0 = time.time()
        a = advisor.assess(trials, seed=0, quick=True, surrogates=models, validation=val,
                           backtest=False, plan=False, jobs=1)
        rows[f"{name}/{val}"] = {m: a.metrics[m]["nll"] if m in a.metrics else float("nan") for m in models}
        print(name, val, f"{time.time()-t0:.0f}s", {m: round(v, 3) for m, v in rows[f'{name}/{val}'].items()}, a.failures if a.failures else "", flush=True)

def nll(model, X, y):
    mu, sd = model.predict(X); return float(-norm.logpdf(y, mu, sd).mean())

_A = np.array([[3, 10, 30], [0.1, 10, 35], [3, 10, 30], [0.1, 10, 35]])
_C = np.array([1.0, 1.2, 3.0, 3.2])
_P = 1e-4 * np.array([[3689, 1170, 2673], [4699, 4387, 7470],[1091, 8732, 5547], [381, 5743, 8828]])
def h3(X): return -np.sum(_C * np.exp(-np.sum(_A * (X[:, None, :3] - _P) ** 2, axis=2)), axis=1)

if "noise" in which:
  rng = np.random.default_rng(3)
  X, y = rng.uniform(size=(40, 6)), rng.standard_normal(40)
  Xt, yt = rng.uniform(size=(300, 6)), rng.standard_normal(300)
  rows["noise40x6"] = {m: nll(make_surrogate(m, seed=0, quick=True).fit(X, y), Xt, yt) for m in models}
  print("noise", {m: round(v, 3) for m, v in rows["noise40x6"].items()}, flush=True)
if "h3" in which:
  rng = np.random.default_rng(0)
  X, Xt = rng.uniform(size=(150, 16)), rng.uniform(size=(300, 16))
  y = h3(X) + 0.05 * rng.standard_normal(150); yt = h3(Xt) + 0.05 * rng.standard_normal(300)
  rows["hartmann3in16"] = {m: nll(make_surrogate(m, seed=0, quick=True).fit(X, y), Xt, yt) for m in models}
  print("h3", {m: round(v, 3) for m, v in rows["hartmann3in16"].items()}, flush=True)
out = sys.argv[3] if len(sys.argv) > 3 else str(root / "benchmarks" / "results" / "graceful_degradation_rerun.json")
json.dump(rows, open(out, "w"), indent=1)
