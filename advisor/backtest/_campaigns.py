"""Backtest acquisition settings on the user's own logs: pool replay and simulated campaigns.

Two experiments, each run for every surrogate × acquisition setting:

**Pool replay** (on each logged campaign).  The campaign's logged trials are the pool:
the surrogate may only ask for trials that were actually run, and gets the logged
objective back.  The replay starts from the campaign's first ``n_init`` trials by the
order column (random ones when the log has no order column), then repeatedly refits the
surrogate on what has been "run" and lets the acquisition pick the next trial(s) from
the campaign's not-yet-used trials.  The best-so-far curve is compared with *random
order* (many shuffles of the same pool after the same start) and with the campaign's
*actual order*.  A full replay ends with the whole pool run, so its best-so-far equals
the campaign's logged best: the replay can only show how *fast* a setting would have
got there, never better.  This is the offline replay idea of Li, Chu, Langford & Wang
(2011) applied to a finite design pool; the details below are our choices.

**Simulated campaigns** (on stand-ins with a known optimum), the evidence.  Stand-in
functions are drawn from models of two classes fitted to all logged trials, half each
(``sim_classes``, :mod:`._standins`): joint GP posterior draws (``sample_y``) and
bootstrap-forest functions (the mean of 5 distinct bootstrap trees; opt-in GP variants
``gp_hyper``, ``gp_sum``, ``gp_sum_ml``, ``gp_trend``; :mod:`._gp_standins`), on a candidate set
of fresh uniform samples of the parameter space (issue 12: candidate sets that were
mostly logged points favoured revisiting) plus the grid-search designs.  Each stand-in
is defined on that finite set only, so its minimum over the set is exactly known and the
simple regret :math:`r_t = \\min_{s \\le t} f(x_s) - \\min_C f` is exact.  Every surrogate
and setting runs a pool campaign of ``budget`` trials on each stand-in from ``n_init``
random starting points (the same for every setting: a paired design).  Baselines on the
same functions: random search from the same start, and grid search (:mod:`._grid`, a
full factorial sized to the budget, one design per start index).  The surrogates observe
the stand-in plus normal noise at the GP's fitted noise level (one noise draw per
candidate and stand-in, the same for every setting); the regret is scored on the
noise-free values.  Models are refitted at every step (``refit_every``) with their quick
budget; cheap updates (``reoptimize_every``): a full fit, hyperparameters re-optimized,
every ``reoptimize_every`` steps or when the training set has doubled since the last
one, and in between a model offering ``with_fixed_hyperparameters()`` is refitted
with those hyperparameters held (the GPs; the neural process keeps its trained network
and conditions on the run's trials, and is retrained every ``reoptimize_every`` steps
only, not on doubling: ``reoptimize_on_doubling = False``), any other model kept as it
was.  After the run's first fit, a model offering ``warm_started()`` starts its
scheduled re-fits from its last fit (the GPs from its hyperparameters; the deep ensemble
and DNGO from their trained weights, with a tenth of their Adam steps; the SGHMC
network from its last draw, a chain a quarter as long).  ``updates_by_model``
records the path each model took.  This follows
the "prior/posterior draws as test functions" practice of e.g. Hennig & Schuler (2012,
sec. 4); the candidate-set construction and the second class are ours.

**Failed trials** (only when ``run_backtest`` is given ``failures``, i.e. the log has a
model of failure): the stand-ins' candidates fail where that model says, a failed trial
gives no value, every model-based setting is weighted by P(success) from the run's own
outcomes and regret counts successful trials only; the rules are in
:mod:`advisor.backtest._failures`.  Without it nothing changes.

Summaries (per surrogate × setting, and for the baselines), over all runs
(campaign or stand-in × seed):

* ``curve``: normalized regret :math:`(b_t - f^*)/(f_{max} - f^*)` of the best-so-far
  :math:`b_t` after :math:`t` trials, :math:`f^*, f_{max}` the best and worst value in the
  pool (for the replay: the campaign's logged best and worst), pointwise median and
  quartiles; 0 = the pool's best found.
* ``auc``: the mean of that curve over the run's trials (the normalized area under the
  best-so-far curve, in [0, 1], lower is better).
* ``trials_to_best5``: trials (the start included) until the best-so-far reaches the
  pool's best 5 % (the :math:`\\lceil 0.05 n \\rceil`-th lowest value); a run that never
  gets there counts as its length + 1 and is reported in ``censored``.

Budgets (each a field of :class:`BacktestPlan`, quick / full):

=========================  ==============  ===============================================
``n_init``                 rule            clip(n // 8, 2, 5) of the campaign size
                                           (replay) or of the budget (simulated)
``replay_seeds``           1 / 2           model seeds per campaign (the start is fixed
                                           by the order column, so seeds vary the model
                                           and the Thompson / random draws)
``replay_max_picks``       10 / 24         picks after the start
``refit_every``            1 / 1           steps between refits (stale model in between,
                                           incumbent always current)
``reoptimize_every``       5 / 5           steps between full fits (see above; None =
                                           every refit is a full fit)
``random_orders``          32 / 200        shuffles for the random-order baseline
``sim_functions``          8 / 8           stand-ins, half per class in ``sim_classes``
``sim_seeds``              3 / 4           runs per stand-in (different random starts)
``sim_extra_candidates``   200 / 400       fresh space samples in the candidate set
``sim_max_budget``         30 / 30         cap on the simulated budget (12 / 20 until
                                           2026-12-03: at 12 trials the recommended
                                           setting beat random search on none of the
                                           sample logs' stand-ins, see
                                           ``decision.versus_baselines``)
``grid``                   True            grid search as a simulated baseline
=========================  ==============  ===============================================

Quick mode thus makes 24 paired runs per setting, thorough 32: enough that a true AUC
difference of 0.1 is found at the strictest Holm level with power >= 0.8 on the logs
measured (``power_at_0.1`` in each decision; README "What the backtest runs"), but not
a difference of 0.1 in final regret over random search's, the unit the decision reads
since stop 29 (``power_final_at_0.1``, by a proportional-gain model since stop 30: 0.00
on the sample logs at 24 runs, 0.03-0.12 at 384, 0.34-0.98 at 1,536; ``detectable_gain``
says what the runs can see); more runs (``sim_functions``, set by ``assess(backtest_runs=)``) buy it
slowly, about 1,500-3,000 per setting for 0.1 in that model; on benchmark logs whose real
next campaigns have a true winner, 1,536 runs still kept the default on 4 of 4 (the
stand-ins did not show the winner's gain; README "Buying power").  The class
defaults (``plan=BacktestPlan()``) keep exhaustive values: full fits at every step.

The simulated budget defaults to the median campaign size of the log (the size of the
next campaign is most likely like the past ones).  With ``batch = q > 1`` each step picks
``q`` trials by the kriging believer (default) or the constant liar (Ginsbourger, Le
Riche & Carraro 2010), see :func:`advisor.acquisition.select_batch`.

A surrogate that raises in a run is recorded with its error in ``failures``; when more
than ``MAX_FAILED_SHARE`` (10%) of a surrogate x setting's runs raised, its result carries
``error`` and no runs, otherwise it keeps the completed ones (``runs_failed`` says how
many were dropped); the other surrogates are unaffected.

Choosing a setting (:func:`choose_setting`): for a given surrogate, the setting with the
lowest *score* = the mean over the experiments that ran (replay, simulated) of the median
``auc``; ties (within 1e-9) go to the lower median ``trials_to_best5`` in the replay,
then to the earlier setting in the list.  Margins are differences in score.

Output of :func:`run_backtest` (plain dicts, lists, str, int, float, bool, None)::

    config        {seed, quick, batch, batch_method (None when batch == 1), budget,
                   plan: {every BacktestPlan field}, xi_units, objective_direction,
                   score_rule}
    surrogates    [name, ...]
    updates_by_model {name: {first_fit, scheduled_refit, between_refits,
                   reoptimize_on_doubling}}  how each model was refitted within a run
                   (replay and simulated), see :func:`._pool.update_paths`
    settings      [{name, params, label}, ...]
    replay        None when plan.replay is False, else
      campaigns   [{campaign, trials, used: True, n_init, picks, best, worst,
                    threshold_best5, start} | {campaign, trials, used: False, note}]
      results     [RESULT, ...]  one per surrogate x setting, surrogate-major order
      random      SUMMARY + {label: "random order", per_unit_mean_auc: {campaign: float},
                    per_unit_mean_final_regret: {campaign: float},
                    per_start_runs: {campaign: [{auc: [float per shuffle],
                    final_regret: [...]} per start index]}}  (SUMMARY, per_unit_*:
                    start 0)
      actual      SUMMARY + {label: "actual order", note}
      paired_test {surrogate: the replay's own paired test against the default,
                   see :func:`._replay.replay_paired_test`}
    simulated     None when plan.simulate is False; {error: str, functions: [],
                  results: []} when no stand-ins could be drawn; else
      error None, budget, n_init, candidates, logged_candidates, space_samples,
      grid_candidates, sampler ("gp+forest"), noise_std, observations, runs_per_setting,
      updates (text), standins: {classes: {class: count}, share, descriptions, failed},
      grid_design: {levels_per_parameter, parameters, rule} | None,
      functions   [{id: "f0", class, optimum, worst, argmin_is_logged,
                    argmin_is_grid}, ...]
      results     [RESULT, ...]
      random      SUMMARY + {label, per_unit_mean_auc: {function id: float},
                    per_unit_mean_final_regret: {function id: float},
                    per_start_runs: {function id: [{auc: [float per shuffle],
                    final_regret: [...]} per start index]}}  (SUMMARY, per_unit_*:
                    start 0)
      grid        SUMMARY + {label: "grid search", per_unit_mean_auc, runs: [{unit,
                    seed_index, auc, final_regret, trials_to_best5, censored}]}
                    (when plan.grid)
    failures      [{surrogate, acquisition: {name, params}, label, experiment,
                    runs_failed, runs, error (the first one), completed_runs_kept
                    (at most MAX_FAILED_SHARE of the runs failed: the result keeps
                    the others)}, ...]
    per_surrogate {name: CHOICE}    the best setting for each surrogate
    choice        CHOICE            the best surrogate x setting overall

    SUMMARY = {runs_count,
               auc: STATS, trials_to_best5: STATS + {censored: int},
               curve: {median: [...], q25: [...], q75: [...]}}
              curve[t-1] is the normalized regret after t trials (start included)
    STATS   = {median, q25, q75, mean, sd, n}   (None values when n == 0)
    RESULT  = SUMMARY + {surrogate, acquisition: {name, params}, label,
                         error: str | None, runs_failed: int (runs that raised; up to
                         MAX_FAILED_SHARE of them are dropped and the rest kept),
                         draws: "joint" | "independent" | None,
                         runs: [{unit, seed_index, auc, final_regret (the
                                 curve's last value), trials_to_best5, censored,
                                 picked_lines (replay only: file lines in run order,
                                 start included)}]}
    CHOICE  = see :func:`choose_setting`

References
----------
Li, L., Chu, W., Langford, J. & Wang, X. (2011). Unbiased offline evaluation of
contextual-bandit-based news article recommendation algorithms. WSDM, 297-306.
Hennig, P. & Schuler, C. J. (2012). Entropy search for information-efficient global
optimization. JMLR 13, 1809-1837.
Ginsbourger, D., Le Riche, R. & Carraro, L. (2010). Kriging is well-suited to
parallelize optimization. In Computational Intelligence in Expensive Optimization
Problems, Springer, 131-162.
"""

from __future__ import annotations

from typing import Callable

import numpy as np

from ..acquisition import BATCH_METHODS, AcquisitionSetting
from ..errors import UsageError
from ..execution import Executor, task_seed
from ..surrogates import make_surrogate
from ._choice import DEFAULT_LABEL, _decide, _overall_choice, choose_setting
from ._plan import BacktestPlan, plan_for
from ._pool import _pool_task, replay_pool, update_paths
from ._replay import _replay_grid, _skipped_campaigns, campaign_pools, replay_paired_test
from ._simulated import _simulated_grid
from ._standins import StandIns, posterior_standins
from ._summaries import _band, _score_sequence, _stats, _summarize

__all__ = ["BacktestPlan", "plan_for", "run_backtest", "choose_setting", "replay_pool",
           "posterior_standins", "StandIns", "campaign_pools", "DEFAULT_LABEL"]

# -- orchestration --------------------------------------------------------------------
def run_backtest(trials, surrogates: list[str], settings: list[AcquisitionSetting], *,
                 seed: int, quick: bool, budget: int | None = None, batch: int = 1,
                 executor: Executor | None = None, make: Callable = make_surrogate,
                 plan: BacktestPlan | None = None, failures=None) -> dict:
    """Backtest every surrogate × acquisition setting; a JSON-ready dict.

    Parameters
    ----------
    trials : TrialTable
    surrogates : list of str
        Names for ``make``.
    settings : list of AcquisitionSetting
    seed : int
        Run seed; every task's randomness comes from :func:`task_seed`.
    quick : bool
        Quick plan (see the module docstring) and quick model budgets.
    budget : int, optional
        Trials per simulated campaign; default the median campaign size.
    batch : int
        Trials picked per step (``q``).
    executor : Executor, optional
        Where the runs go (serial by default); results do not depend on it.
    make : callable
        Surrogate factory, ``make(name, seed=..., quick=...)``; must be picklable
        (a top-level function) for a parallel executor.
    plan : BacktestPlan, optional
        Overrides the quick/full plan.
    failures : FailureModel, optional
        The log's model of trial failure: simulated trials then fail where it says and
        every model-based setting is weighted by P(success)
        (:mod:`advisor.backtest._failures`).  None (default): no trial fails.

    Returns
    -------
    dict
        Every key is listed under *Output* in the module docstring.
    """
    if not surrogates:
        raise UsageError("no surrogates to backtest", fix="name at least one surrogate")
    if not settings:
        raise UsageError("no acquisition settings to backtest",
                         fix="give --acquisitions, e.g. 'ei:xi=0.01;thompson'")
    if int(batch) < 1:
        raise UsageError(f"batch={batch} must be >= 1", fix="use --batch 1 or more")
    plan = plan or plan_for(quick)
    if plan.batch_method not in BATCH_METHODS:
        raise UsageError(f"batch method {plan.batch_method!r} unknown",
                         fix="use " + " or ".join(BATCH_METHODS))
    executor = executor or Executor(jobs=1)
    settings = list(dict.fromkeys(settings))
    pools = campaign_pools(trials)
    sizes = [len(p["rows"]) for p in pools]
    if budget is None:
        budget = int(np.median(sizes))
    budget = int(budget)
    if budget < 3:
        raise UsageError(f"budget={budget} is too small for a simulated campaign",
                         fix="use a budget of at least 3 trials")

    replay_units, replay_tasks, replay_keys = _replay_grid(trials, pools, surrogates,
                                                           settings, seed, quick, batch,
                                                           plan, make)
    sim_info, sim_units, sim_tasks, sim_keys = _simulated_grid(
        trials, surrogates, settings, seed, quick, budget, batch, plan, make, failures)
    outputs = executor.map(_pool_task, replay_tasks + sim_tasks, label="backtest")
    replay_out, sim_out = outputs[:len(replay_tasks)], outputs[len(replay_tasks):]

    failures: list[dict] = []
    replay = _collect("replay", replay_units, replay_keys, replay_out, surrogates,
                      settings, failures, trials) if plan.replay else None
    if replay is not None:
        replay["campaigns"] = [u["info"] for u in replay_units.values()] + \
            [c for c in _skipped_campaigns(pools, plan)]
        replay.update(_baselines("replay", replay_units, seed, plan))
    simulated = sim_info
    if sim_info is not None and sim_info.get("error") is None:
        simulated.update(_collect("simulated", sim_units, sim_keys, sim_out, surrogates,
                                  settings, failures, trials))
        simulated.update(_baselines("simulated", sim_units, seed, plan))

    out = {
        "config": {"seed": int(seed), "quick": bool(quick), "batch": int(batch),
                   "batch_method": plan.batch_method if batch > 1 else None,
                   "budget": budget, "plan": plan.to_dict(),
                   "xi_units": "standard deviations of the training objective",
                   "objective_direction": trials.direction,
                   "score_rule": "mean over experiments of the median normalized-regret "
                                 "AUC; ties by replay trials_to_best5"},
        "surrogates": list(surrogates),
        "updates_by_model": {name: update_paths(make(name, seed=0, quick=quick), plan)
                             for name in surrogates},
        "settings": [dict(s.to_dict(), label=s.label) for s in settings],
        "replay": replay,
        "simulated": simulated,
        "failures": failures,
    }
    out["per_surrogate"] = {name: choose_setting(out, name) for name in surrogates}
    for name in surrogates:
        out["per_surrogate"][name]["decision"] = _decide(out, name, seed)
    if replay is not None:
        replay["paired_test"] = {name: replay_paired_test(replay, name, DEFAULT_LABEL)
                                 for name in surrogates}
    out["choice"] = _overall_choice(out)
    return out



#: A surrogate x setting keeps its completed runs when at most this share of its runs
#: raised (each failure is still recorded in ``failures`` with the count and the first
#: error, and the result says ``runs_failed``); beyond it the result carries ``error``
#: and no runs.  Paired tests use the runs both sides completed.  Why (stop 29): with
#: ``--backtest-runs 384`` one of 384 runs of the warped GP with EI raised on a Branin
#: log, the default setting lost all its runs and the decision could not run at all.
#: A share, not a count, so that a model failing systematically still fails; 10% is our
#: choice (common practice for "occasional" numerical failures, not measured).
MAX_FAILED_SHARE = 0.1


def _collect(part, units, keys, outputs, surrogates, settings, failures, trials) -> dict:
    runs: dict = {}
    errors: dict = {}
    failed_runs: dict = {}
    total: dict = {}
    draws: dict = {}
    flat = [((name, st, uid, s), res) for (name, uid, s), per in zip(keys, outputs)
            for st, res in zip(settings, per)]
    for (name, st, uid, s), res in flat:
        key = (name, st)
        total[key] = total.get(key, 0) + 1
        if res["error"] is not None:
            errors.setdefault(key, res["error"])
            failed_runs[key] = failed_runs.get(key, 0) + 1
            continue
        unit = units[uid]
        seq = list(unit["inits"][s]) + list(res["picked"])
        scored = _score_sequence(unit["y"][seq], unit)
        run = {"unit": uid, "seed_index": s, "auc": scored["auc"],
               "final_regret": float(scored["curve"][-1]),
               "trials_to_best5": scored["ttb"], "censored": scored["censored"]}
        if unit["lines"] is not None:
            run["picked_lines"] = [int(unit["lines"][i]) for i in seq]
        if unit.get("failed") is not None:  # trials spent in failures (_failures.py)
            run["failed_picks"] = int(unit["failed"][list(res["picked"])].sum())
        runs.setdefault(key, []).append((run, scored))
        if res["draws"]:
            draws[key] = res["draws"]
    tolerated = {key for key in errors
                 if key in runs and failed_runs[key] <= MAX_FAILED_SHARE * total[key]}
    for (name, st), err in errors.items():
        failures.append({"surrogate": name, "acquisition": st.to_dict(), "label": st.label,
                         "experiment": part, "runs_failed": failed_runs[(name, st)],
                         "runs": total[(name, st)], "error": err,
                         "completed_runs_kept": (name, st) in tolerated})
    results = []
    for name in surrogates:
        for st in settings:
            key = (name, st)
            entry = {"surrogate": name, "acquisition": st.to_dict(), "label": st.label,
                     "error": None if key in tolerated else errors.get(key),
                     "runs_failed": int(failed_runs.get(key, 0)), "draws": draws.get(key)}
            if (key in errors and key not in tolerated) or key not in runs:
                entry.update({"runs_count": 0, "auc": _stats([]),
                              "trials_to_best5": dict(_stats([]), censored=0),
                              "curve": _band([]), "runs": []})
            else:
                entry.update(_summarize([sc for _, sc in runs[key]]))
                entry["runs"] = [r for r, _ in runs[key]]
            results.append(entry)
    return {"results": results}


def _baselines(part, units, seed, plan) -> dict:
    """Random order (shuffles after the same start); for the replay, actual order; for
    the simulated campaigns, grid search (one design per start index, see ``_grid``)."""
    rand_runs, actual_runs, per_unit, per_unit_final = [], [], {}, {}
    per_start = {}   # {uid: [{"auc": [...], "final_regret": [...]} per start index]}
    for uid, unit in units.items():
        y, L = unit["y"], unit["length"]
        per_start[uid] = []
        for s, init in enumerate(unit["inits"]):
            # start 0 keeps the summary's own stream; the other starts (paired with the
            # settings' runs from them, for the test against random search) their own
            r = np.random.default_rng(task_seed(seed, "random-order", part, uid)
                                      if s == 0 else
                                      task_seed(seed, "random-order", part, uid, s))
            start = list(init)
            rest = np.setdiff1d(np.arange(len(y)), start)
            aucs, finals = [], []
            for _ in range(plan.random_orders):
                seq = (start + list(r.permutation(rest)))[:L]
                sc = _score_sequence(y[seq], unit)
                if s == 0:
                    rand_runs.append(sc)
                aucs.append(sc["auc"])
                finals.append(float(sc["curve"][-1]))
            per_start[uid].append({"auc": [float(a) for a in aucs],
                                   "final_regret": finals})
        per_unit[uid] = float(np.mean(per_start[uid][0]["auc"]))
        per_unit_final[uid] = float(np.mean(per_start[uid][0]["final_regret"]))
        if part == "replay":
            actual_runs.append(_score_sequence(y[:L], unit))
    out = {"random": dict(_summarize(rand_runs), label="random order",
                          per_unit_mean_auc=per_unit,
                          per_unit_mean_final_regret=per_unit_final,
                          per_start_runs=per_start)}
    grid_runs, grid_scored, grid_unit = [], [], {}
    for uid, unit in units.items():
        for s, rows in enumerate(unit.get("grid") or []):
            sc = _score_sequence(unit["y"][rows], unit)
            grid_scored.append(sc)
            grid_runs.append({"unit": uid, "seed_index": s, "auc": sc["auc"],
                              "final_regret": float(sc["curve"][-1]),
                              "trials_to_best5": sc["ttb"], "censored": sc["censored"]})
            grid_unit.setdefault(uid, []).append(sc["auc"])
    if grid_runs:
        out["grid"] = dict(_summarize(grid_scored), label="grid search",
                           per_unit_mean_auc={u: float(np.mean(a))
                                              for u, a in grid_unit.items()},
                           runs=grid_runs)
    if part == "replay":
        note = ("logged order" if all(u["ordered"] for u in units.values())
                else "file row order where the log has no order column")
        out["actual"] = dict(_summarize(actual_runs), label="actual order", note=note)
    return out
