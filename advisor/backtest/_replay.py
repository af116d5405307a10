"""The pool replay on the logged campaigns: pools, starts and tasks."""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..execution import task_seed
from ._plan import _n_init
from ._summaries import _best_k_threshold

__all__ = ["campaign_pools"]

def campaign_pools(trials) -> list[dict]:
    """Each campaign's trials in logged order (order column, else file order).

    Returns dicts with ``campaign``, ``rows`` (indices into ``trials.used`` in logged
    order), ``y`` (minimization form, same order), ``ordered`` (whether an order column
    set the order).
    """
    groups = trials.groups
    order = trials.order_values
    y_all = trials.y
    pools = []
    for name in pd.unique(groups):
        rows = np.flatnonzero(groups == name)
        ordered = order is not None
        if ordered:
            key = np.where(np.isfinite(order[rows]), order[rows], np.inf)
            rows = rows[np.argsort(key, kind="stable")]
        pools.append({"campaign": str(name), "rows": rows, "y": y_all[rows],
                      "ordered": ordered})
    return pools



def _skipped_campaigns(pools, plan) -> list[dict]:
    out = []
    for p in pools:
        n = len(p["rows"])
        if n < _n_init(n, plan) + 2:
            out.append({"campaign": p["campaign"], "trials": n, "used": False,
                        "note": f"only {n} trials; at least {_n_init(n, plan) + 2} needed"})
    return out


def _replay_grid(trials, pools, surrogates, settings, seed, quick, batch, plan, make):
    units, tasks, keys = {}, [], []
    if not plan.replay:
        return units, tasks, keys
    used = trials.used
    lines = used["_line"].to_numpy() if "_line" in used.columns else np.arange(len(used)) + 2
    for p in pools:
        n = len(p["rows"])
        k = _n_init(n, plan)
        if n < k + 2:
            continue
        picks = n - k if plan.replay_max_picks is None else min(n - k, plan.replay_max_picks)
        frame = used.iloc[p["rows"]][trials.params].reset_index(drop=True)
        y = p["y"]
        inits = []
        for s in range(plan.replay_seeds):
            if p["ordered"]:
                inits.append(list(range(k)))
            else:
                r = np.random.default_rng(task_seed(seed, "replay-init", p["campaign"], s))
                inits.append(sorted(int(i) for i in r.choice(n, size=k, replace=False)))
        unit = {"id": p["campaign"], "y": y, "lo": float(y.min()), "hi": float(y.max()),
                "threshold": _best_k_threshold(y), "inits": inits, "length": k + picks,
                "lines": lines[p["rows"]], "ordered": p["ordered"],
                "info": {"campaign": p["campaign"], "trials": n, "used": True,
                         "n_init": k, "picks": picks, "best": float(y.min()),
                         "worst": float(y.max()), "threshold_best5": _best_k_threshold(y),
                         "start": "first trials by order" if p["ordered"]
                         else "random trials (no order column)"}}
        units[p["campaign"]] = unit
        for name in surrogates:
            for s, init in enumerate(inits):
                tasks.append((make, name, [st.to_dict() for st in settings], trials.space,
                              frame, y, init, picks, batch, plan.batch_method,
                              plan.refit_every,
                              task_seed(seed, "model", name, "replay", p["campaign"], s),
                              [task_seed(seed, "acq", name, st.label, "replay",
                                         p["campaign"], s) for st in settings], quick,
                              plan.reoptimize_every))
                keys.append((name, p["campaign"], s))
    return units, tasks, keys


def replay_paired_test(replay: dict, surrogate: str, default: str) -> dict:
    """The replay's own paired test of every setting against ``default`` (issue 12,
    item 6): one-sided Wilcoxon signed-rank over the replay runs paired by campaign and
    start, Holm over the grid (:func:`advisor.backtest.paired_decision`).

    The replay is a diagnostic: it feeds the recommendation only through this test, and
    only when no simulated campaign ran.  ``min_attainable_p`` is the smallest one-sided
    p-value the signed-rank test can give with this many pairs, ``2 ** -n`` (all
    differences of one sign; exact null distribution, Wilcoxon 1945): with 4 campaigns
    it is 0.0625, so a replay over few campaigns can never be significant at 0.05.
    """
    from ._decision import paired_decision

    values = {}
    for r in replay.get("results") or []:
        if r["surrogate"] != surrogate or r["error"] or r["acquisition"]["name"] == "random":
            continue
        values[r["label"]] = {f"{run['unit']}#{run['seed_index']}": run["auc"]
                              for run in r["runs"]}
    out = paired_decision(values, default)
    pairs = max((c["runs"] for c in out.get("comparisons") or []), default=0)
    out["metric"] = "normalized best-so-far AUC on the logged campaigns, paired by " \
                    "campaign and start"
    out["pairs"] = int(pairs)
    out["min_attainable_p"] = float(2.0 ** -pairs) if pairs else None
    out["significant"] = bool(out.get("beats_default"))
    return out
