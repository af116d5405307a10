"""How far the total Sobol index of a refitted surrogate moves, and which interval holds it.

Reproduces the review finding of issue 13 and measures the choice made in
``advisor.planning._relevance._model_uncertainty``:

1. Moulding sample log (invented scenario, ``sample_logs/moulding_warpage.md``), GP,
   quick: the relevance table's total-index intervals — the Monte-Carlo-only interval
   (BCa bootstrap over the design rows of one fitted model; the old interval) and the
   half-sample refit interval (the one that now decides) — against the total indices of
   ``B`` refits on bootstrap resamples (n rows drawn with replacement, the review's
   procedure) and on half-samples; the share of those refits each interval holds.
2. A known process (y = a + b + c + 0.5ab + 0.2d + noise on [0, 1]^4, n = 60): the
   spread (sd) of the GP's total index over *independent* data sets from the process
   (the model's uncertainty itself), against the spread over bootstrap-resample refits
   and over half-sample refits of one data set — which resampling reproduces it.

    PYTHONPATH=. python benchmarks/relevance_refit_spread.py [--refits 30]
    # writes benchmarks/results/relevance_refit_spread.json
"""

from __future__ import annotations

import argparse
import json
import platform
from pathlib import Path

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from advisor import planning as P
from advisor.logs import load_trials
from advisor.planning import _relevance as R
from advisor.space import ParameterSpace
from advisor.surrogates import make_surrogate

ROOT = Path(__file__).resolve().parent.parent
OUT = ROOT / "benchmarks" / "results" / "relevance_refit_spread.json"


def _total(X, y, space, seed):
    model = make_surrogate("gp", seed=seed, quick=True).fit(X, y)
    return R._sobol_point(lambda Z: model.predict(Z)[0], space, "onehot", n_base=256,
                          seed=seed)[1]


def _refits(X, y, space, B, rng, kind):
    n = len(y)
    out = []
    for b in range(B):
        idx = (rng.integers(0, n, n) if kind == "bootstrap"
               else np.sort(rng.permutation(n)[: n // 2]))
        out.append(_total(X[idx], y[idx], space, b))
    return np.array(out)


def moulding(B):
    trials = load_trials(ROOT / "sample_logs" / "moulding_warpage.csv",
                         objective="warpage_mm", campaign="lot", order="run")
    res = P.parameter_relevance(trials, "gp", seed=0, quick=True)
    X, y = trials.space.encode(trials.used, "onehot"), trials.y
    rng = np.random.default_rng(1)
    spreads = {k: _refits(X, y, trials.space, B, rng, k) for k in ("bootstrap", "half")}
    rows = []
    for i, p in enumerate(res["parameters"]):
        row = {"parameter": p["name"], "total": p["total"],
               "interval_monte_carlo": p["total_interval_monte_carlo"],
               "interval_refits": p["total_interval"], "freeze": p["freeze"]}
        for kind, vals in spreads.items():
            v = vals[:, i]
            row[f"{kind}_refits_range"] = [float(v.min()), float(v.max())]
            for key in ("interval_monte_carlo", "interval_refits"):
                lo, hi = p["total_interval" if key == "interval_refits"
                           else "total_interval_monte_carlo"]
                row[f"{kind}_refits_inside_{key}"] = float(np.mean((v >= lo) & (v <= hi)))
        rows.append(row)
        print(f"{p['name']:22s} MC [{row['interval_monte_carlo'][0]:.3f}, "
              f"{row['interval_monte_carlo'][1]:.3f}]  refit [{row['interval_refits'][0]:.3f},"
              f" {row['interval_refits'][1]:.3f}]  bootstrap refits "
              f"{row['bootstrap_refits_range'][0]:.2f}-{row['bootstrap_refits_range'][1]:.2f}"
              f" (inside MC {row['bootstrap_refits_inside_interval_monte_carlo']:.2f}, "
              f"refit {row['bootstrap_refits_inside_interval_refits']:.2f})  freeze {p['freeze']}")
    return rows


def known_process(B, n_sets=4, n_independent=40):
    cols = list("abcd")
    space = ParameterSpace.infer(pd.DataFrame([[0.0] * 4, [1.0] * 4], columns=cols), cols)

    def data(seed, n=60):
        rng = np.random.default_rng(seed)
        X = rng.uniform(0, 1, (n, 4))
        return X, (X[:, 0] + X[:, 1] + X[:, 2] + 0.5 * X[:, 0] * X[:, 1] + 0.2 * X[:, 3]
                   + 0.2 * rng.normal(size=n))

    independent = np.array([_total(*data(1000 + k), space, k) for k in range(n_independent)])
    out = {"independent_sd": independent.std(0, ddof=1).tolist(), "data_sets": []}
    print("sd over independent data sets:", np.round(out["independent_sd"], 3))
    for s in range(n_sets):
        X, y = data(s)
        rng = np.random.default_rng(77 + s)
        entry = {}
        for kind in ("bootstrap", "half"):
            sd = _refits(X, y, space, B, rng, kind).std(0, ddof=1)
            entry[f"{kind}_sd_over_independent_sd"] = (sd / out["independent_sd"]).tolist()
        out["data_sets"].append(entry)
        print(f"data set {s}: sd ratio bootstrap "
              f"{np.round(entry['bootstrap_sd_over_independent_sd'], 2)}, half-sample "
              f"{np.round(entry['half_sd_over_independent_sd'], 2)}")
    return out


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--refits", type=int, default=30)
    args = ap.parse_args()
    with threadpool_limits(1):
        result = {"machine": platform.platform(), "refits": args.refits,
                  "moulding_gp_quick": moulding(args.refits),
                  "known_process": known_process(args.refits)}
    OUT.write_text(json.dumps(result, indent=2))
    print("wrote", OUT.relative_to(ROOT))


if __name__ == "__main__":
    main()
