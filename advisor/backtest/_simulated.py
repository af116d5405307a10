"""Simulated campaigns on stand-in functions: stand-ins, starts, noise and tasks."""

from __future__ import annotations

import numpy as np
from threadpoolctl import threadpool_limits

from ..execution import task_seed
from ._plan import _n_init
from ._standins import posterior_standins
from ._summaries import _best_k_threshold

def _simulated_grid(trials, surrogates, settings, seed, quick, budget, batch, plan, make):
    units, tasks, keys = {}, [], []
    if not plan.simulate:
        return None, units, tasks, keys
    try:
        with threadpool_limits(limits=1):
            stand = posterior_standins(trials, plan.sim_functions,
                                       plan.sim_extra_candidates, seed, make=make,
                                       quick=quick)
    except Exception as exc:  # no sampler: the replay still stands on its own
        return ({"error": f"{type(exc).__name__}: {exc}", "functions": [], "results": []},
                units, tasks, keys)
    n_pool = len(stand.frame)
    total = budget if plan.sim_max_budget is None else min(budget, plan.sim_max_budget)
    total = min(total, n_pool)
    k = _n_init(total, plan)
    info = {"error": None, "budget": int(total), "n_init": int(k),
            "candidates": int(n_pool), "logged_candidates": int(stand.n_logged),
            "sampler": "gp", "noise_std": float(stand.noise_std),
            "observations": "posterior draws plus normal noise at the sampler's fitted "
                            "noise level; regret scored on the noise-free draw",
            "functions": []}
    for f in range(len(stand.values)):
        v = stand.values[f]
        inits = []
        for s in range(plan.sim_seeds):
            r = np.random.default_rng(task_seed(seed, "sim-init", f, s))
            inits.append(sorted(int(i) for i in r.choice(n_pool, size=k, replace=False)))
        uid = f"f{f}"
        units[uid] = {"id": uid, "y": v, "lo": float(stand.optimum[f]), "hi": float(v.max()),
                      "threshold": _best_k_threshold(v), "inits": inits, "length": total,
                      "lines": None, "ordered": False}
        info["functions"].append({"id": uid, "optimum": float(stand.optimum[f]),
                                  "worst": float(v.max()),
                                  "argmin_is_logged": bool(stand.argmin[f] < stand.n_logged)})
        # one noise draw per stand-in, shared by every setting (paired)
        v_obs = v + stand.noise_std * np.random.default_rng(
            task_seed(seed, "sim-noise", f)).standard_normal(len(v))
        for name in surrogates:
            for s, init in enumerate(inits):
                tasks.append((make, name, [st.to_dict() for st in settings], trials.space,
                              stand.frame, v_obs, init, total - k, batch,
                              plan.batch_method,
                              plan.refit_every,
                              task_seed(seed, "model", name, "simulated", uid, s),
                              [task_seed(seed, "acq", name, st.label, "simulated", uid, s)
                               for st in settings], quick))
                keys.append((name, uid, s))
    return info, units, tasks, keys
