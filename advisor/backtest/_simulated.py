"""Simulated campaigns on stand-in functions: stand-ins, starts, noise, grid designs and
tasks (the method is described in ``_campaigns``'s docstring)."""

from __future__ import annotations

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from ..execution import task_seed
from ._grid import grid_design, grid_levels
from ._plan import _n_init
from ._standins import FOREST_TREES_PER_FUNCTION, mixed_standins
from ._summaries import _best_k_threshold

_CLASS_TEXT = {
    "gp": "Gaussian-process posterior draws (joint, latent)",
    "forest": f"bootstrap-forest functions (the mean of {FOREST_TREES_PER_FUNCTION} "
              "distinct trees, each fitted to a bootstrap resample of the log)",
    # opt-in classes (_gp_standins.py)
    "gp_hyper": "Gaussian-process posterior draws, each with its own hyperparameters "
                "slice-sampled from their posterior given the log (joint, latent)",
    "gp_sum": "Gaussian-process posterior draws with a second Matérn term of the same "
              "variance at a third of the fitted length scales (joint, latent)",
    "gp_sum_ml": "posterior draws of a Gaussian process whose kernel is a sum of two "
                 "Matérn-5/2 ARD terms, both fitted by type-II maximum likelihood "
                 "(joint, latent)",
    "gp_trend": "a quadratic trend (no interactions, least squares) plus joint latent "
                "posterior draws of a Gaussian process fitted to its residuals",
}


def _simulated_grid(trials, surrogates, settings, seed, quick, budget, batch, plan, make,
                    failures=None):
    units, tasks, keys = {}, [], []
    if not plan.simulate:
        return None, units, tasks, keys
    total = budget if plan.sim_max_budget is None else min(budget, plan.sim_max_budget)
    total = min(total, int(plan.sim_extra_candidates))
    designs = []
    if plan.grid:
        # one grid-search design per start index, shared by every stand-in (a team runs
        # one grid, whatever the response); appended to the candidate set
        designs = [grid_design(trials.space, total,
                               np.random.default_rng(task_seed(seed, "grid", s)))
                   for s in range(plan.sim_seeds)]
    extra = pd.concat(designs, ignore_index=True) if designs else None
    try:
        with threadpool_limits(limits=1):
            stand = mixed_standins(trials, plan.sim_functions, plan.sim_extra_candidates,
                                   seed, make=make, classes=plan.sim_classes, quick=quick,
                                   extra_frame=extra)
    except Exception as exc:  # no sampler: the replay still stands on its own
        return ({"error": f"{type(exc).__name__}: {exc}", "functions": [], "results": []},
                units, tasks, keys)
    n_pool = len(stand.frame)
    n_space = int(plan.sim_extra_candidates)
    k = _n_init(total, plan)
    grid_rows = [list(range(n_space + s * total, n_space + (s + 1) * total))
                 for s in range(len(designs))]
    count = {c: stand.classes.count(c) for c in dict.fromkeys(stand.classes)}
    info = {"error": None, "budget": int(total), "n_init": int(k),
            "candidates": int(n_pool), "logged_candidates": int(stand.n_logged),
            "space_samples": n_space, "grid_candidates": int(n_pool - n_space),
            "sampler": "+".join(count), "noise_std": float(stand.noise_std),
            "observations": "stand-in values plus normal noise at the GP's fitted noise "
                            "level (the log's); regret scored on the noise-free values",
            "standins": {
                "classes": count,
                "share": "equal shares per class (the first class takes an odd one)",
                "descriptions": {c: _CLASS_TEXT.get(c, f"joint draws of '{c}'")
                                 for c in count},
                "failed": dict(stand.failed)},
            "runs_per_setting": int(len(stand.values) * plan.sim_seeds),
            "updates": _updates_text(plan),
            "grid_design": None if not designs else {
                "levels_per_parameter": grid_levels(total, len(trials.params)),
                "parameters": len(trials.params),
                "rule": "full factorial at cell midpoints, levels = max(2, floor(budget^"
                        "(1/d))); a random subset of its points (one per start index) "
                        "when it exceeds the budget, topped up with random settings "
                        "when it falls short; random run order"},
            "functions": []}
    # with a model of failure (_failures.py): candidates fail where it says, failed
    # trials are scored at the stand-in's worst successful value, starts succeed
    region = None if failures is None else failures.region(stand.frame, len(stand.values),
                                                           seed)
    if region is not None:
        info["failures"] = region.info()
    for f in range(len(stand.values)):
        v = stand.values[f] if region is None else region.scored_values(f, stand.values[f])
        starts = np.arange(n_space)
        if region is not None:
            allowed = region.allowed_starts(f)
            starts = allowed[allowed < n_space] if np.sum(allowed < n_space) >= k else allowed
        inits = []
        for s in range(plan.sim_seeds):
            r = np.random.default_rng(task_seed(seed, "sim-init", f, s))
            # starts among the space samples, as the next campaign's random start
            inits.append(sorted(int(i) for i in r.choice(starts, size=k, replace=False)))
        uid = f"f{f}"
        lo = float(stand.optimum[f]) if region is None else float(v.min())
        units[uid] = {"id": uid, "y": v, "lo": lo, "hi": float(v.max()),
                      "threshold": _best_k_threshold(v), "inits": inits, "length": total,
                      "lines": None, "ordered": False, "grid": grid_rows,
                      "failed": None if region is None else region.failed[f]}
        info["functions"].append({"id": uid, "class": stand.classes[f],
                                  "optimum": lo,
                                  "worst": float(v.max()),
                                  "argmin_is_logged": bool(stand.argmin[f] < stand.n_logged),
                                  "argmin_is_grid": bool(stand.argmin[f] >= n_space)})
        # one noise draw per stand-in, shared by every setting (paired)
        v_obs = stand.values[f] + stand.noise_std * np.random.default_rng(
            task_seed(seed, "sim-noise", f)).standard_normal(len(v))
        for name in surrogates:
            for s, init in enumerate(inits):
                tasks.append((make, name, [st.to_dict() for st in settings], trials.space,
                              stand.frame, v_obs, init, total - k, batch,
                              plan.batch_method,
                              plan.refit_every,
                              task_seed(seed, "model", name, "simulated", uid, s),
                              [task_seed(seed, "acq", name, st.label, "simulated", uid, s)
                               for st in settings], quick,
                              plan.reoptimize_every)
                             + (() if region is None else (region.for_function(
                                 f, task_seed(seed, "sim-fail-model", name, uid, s)),)))
                keys.append((name, uid, s))
    return info, units, tasks, keys


def _updates_text(plan) -> str:
    every = "every step" if plan.refit_every == 1 else f"every {plan.refit_every} steps"
    if plan.reoptimize_every is None:
        return f"models refitted {every}, hyperparameters re-optimized at every refit"
    return (f"full fits (hyperparameters re-optimized) every {plan.reoptimize_every} "
            "steps or when the training set has doubled since the last one (a model "
            f"that says reoptimize_on_doubling = False: every {plan.reoptimize_every} "
            "steps only); after the run's first fit, a model offering warm_started() "
            "starts these from its last fit unless its class says warm_reoptimize = "
            "False (the Gaussian processes: their full fits keep their own starts; the "
            "deep ensemble and DNGO continue from their trained weights, a tenth of "
            "their Adam steps; the SGHMC network from its last draw, a chain a quarter "
            "as long); in between, a model offering with_fixed_hyperparameters() is "
            f"refitted {every} with them held (the GPs: one Cholesky factorization; "
            "the neural process: its trained network conditioned on the run's "
            "trials), and any other model is kept as "
            "it was; updates_by_model says which path each backtested model took")
