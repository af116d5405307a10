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

**Simulated campaigns** (on stand-ins with a known optimum).  The project GP is fitted
to all logged trials and ``sim_functions`` functions are drawn *jointly* from its
posterior (``sample_y``) on a candidate set of fresh uniform samples of the same
parameter space (issue 12: candidate sets that were mostly logged points favoured
revisiting).  Each stand-in is defined on that finite set only, so its
minimum over the set is exactly known and the simple regret
:math:`r_t = \\min_{s \\le t} f(x_s) - \\min_C f` is exact.  Every surrogate and setting
runs a pool campaign of ``budget`` trials on each stand-in from ``sim_n_init`` random
starting points (the same for every setting: a paired design); random search from the
same start is the baseline.  The surrogates observe the draw plus normal noise at the
sampler's fitted noise level (one noise draw per candidate and stand-in, the same for
every setting); the regret is scored on the noise-free draw.  Models are refitted at
every step (``refit_every``) with their quick budget; nothing is carried between fits.  This follows the "prior/posterior draws as
test functions" practice of e.g. Hennig & Schuler (2012, sec. 4); the candidate-set
construction is ours.

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
``refit_every``            5 / 3           picks between refits (stale model in between,
                                           incumbent always current)
``random_orders``          32 / 200        shuffles for the random-order baseline
``sim_functions``          4 / 4           posterior draws (stand-ins)
``sim_seeds``              2 / 1           runs per stand-in (different random starts)
``sim_extra_candidates``   200 / 500       space samples added to the logged settings
``sim_max_budget``         12 / 24         cap on the simulated budget
=========================  ==============  ===============================================

The full plan was cut from "every pick, refit each step, 3 seeds, 8 stand-ins" after
that took 15 minutes for three surrogates on a 130-trial log; the class defaults keep
the exhaustive values for callers who want them (``plan=BacktestPlan()``).

The simulated budget defaults to the median campaign size of the log (the size of the
next campaign is most likely like the past ones).  With ``batch = q > 1`` each step picks
``q`` trials by the kriging believer (default) or the constant liar (Ginsbourger, Le
Riche & Carraro 2010), see :func:`advisor.acquisition.select_batch`.

A surrogate that raises anywhere in a run is recorded with its error in ``failures`` and
its result carries ``error``; the other surrogates are unaffected.

Choosing a setting (:func:`choose_setting`): for a given surrogate, the setting with the
lowest *score* = the mean over the experiments that ran (replay, simulated) of the median
``auc``; ties (within 1e-9) go to the lower median ``trials_to_best5`` in the replay,
then to the earlier setting in the list.  Margins are differences in score.

Output of :func:`run_backtest` (plain dicts, lists, str, int, float, bool, None)::

    config        {seed, quick, batch, batch_method (None when batch == 1), budget,
                   plan: {every BacktestPlan field}, xi_units, objective_direction,
                   score_rule}
    surrogates    [name, ...]
    settings      [{name, params, label}, ...]
    replay        None when plan.replay is False, else
      campaigns   [{campaign, trials, used: True, n_init, picks, best, worst,
                    threshold_best5, start} | {campaign, trials, used: False, note}]
      results     [RESULT, ...]  one per surrogate x setting, surrogate-major order
      random      SUMMARY + {label: "random order", per_unit_mean_auc: {campaign: float}}
      actual      SUMMARY + {label: "actual order", note}
    simulated     None when plan.simulate is False; {error: str, functions: [],
                  results: []} when no stand-ins could be drawn; else
      error None, budget, n_init, candidates, logged_candidates, sampler, observations,
      functions   [{id: "f0", optimum, worst, argmin_is_logged}, ...]
      results     [RESULT, ...]
      random      SUMMARY + {label, per_unit_mean_auc: {function id: float}}
    failures      [{surrogate, acquisition: {name, params}, label, experiment,
                    runs_failed, error (the first one)}, ...]
    per_surrogate {name: CHOICE}    the best setting for each surrogate
    choice        CHOICE            the best surrogate x setting overall

    SUMMARY = {runs_count,
               auc: STATS, trials_to_best5: STATS + {censored: int},
               curve: {median: [...], q25: [...], q75: [...]}}
              curve[t-1] is the normalized regret after t trials (start included)
    STATS   = {median, q25, q75, mean, sd, n}   (None values when n == 0)
    RESULT  = SUMMARY + {surrogate, acquisition: {name, params}, label,
                         error: str | None, draws: "joint" | "independent" | None,
                         runs: [{unit, seed_index, auc, trials_to_best5, censored,
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

import copy
import dataclasses
import math
from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from ..acquisition import BATCH_METHODS, AcquisitionSetting, incumbent, select_batch
from ..errors import UsageError
from ..execution import Executor, task_seed
from ..surrogates import make_surrogate

__all__ = ["BacktestPlan", "plan_for", "run_backtest", "choose_setting", "replay_pool",
           "posterior_standins", "StandIns", "campaign_pools"]

_TIE = 1e-9


# -- plan -----------------------------------------------------------------------------
@dataclass(frozen=True)
class BacktestPlan:
    """Every budget of a backtest; see the module docstring for the defaults."""

    replay_seeds: int = 3
    replay_max_picks: int | None = None
    refit_every: int = 1
    random_orders: int = 200
    sim_functions: int = 8
    sim_seeds: int = 2
    sim_extra_candidates: int = 1000
    sim_max_budget: int | None = None
    n_init: int | None = None
    batch_method: str = "kriging_believer"
    simulate: bool = True
    replay: bool = True

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)


def plan_for(quick: bool, **changes) -> BacktestPlan:
    """The quick or full plan, with any field overridden by keyword."""
    base = (BacktestPlan(replay_seeds=1, replay_max_picks=10, refit_every=5,
                         random_orders=32, sim_functions=4, sim_seeds=2,
                         sim_extra_candidates=200, sim_max_budget=12)
            if quick else BacktestPlan(replay_seeds=2, replay_max_picks=24, refit_every=3,
                                       sim_functions=4, sim_seeds=1,
                                       sim_extra_candidates=500, sim_max_budget=24))
    return dataclasses.replace(base, **changes)


def _n_init(n: int, plan: BacktestPlan) -> int:
    if plan.n_init is not None:
        return int(plan.n_init)
    return int(np.clip(n // 8, 2, 5))


# -- the pool campaign every experiment runs ------------------------------------------
def replay_pool(make: Callable, surrogate: str, setting: AcquisitionSetting, space,
                frame: pd.DataFrame, y: np.ndarray, init: Sequence[int], n_picks: int,
                *, batch: int = 1, method: str = "kriging_believer", refit_every: int = 1,
                model_seed: int = 0, rng: np.random.Generator | int = 0,
                quick: bool = False, cache: dict | None = None, failures=None
                ) -> tuple[list[int], str | None]:
    """Run one pool-based campaign and return the picked pool indices in pick order.

    Parameters
    ----------
    make : callable
        ``make(name, seed=..., quick=...)`` -> unfitted surrogate.
    surrogate : str
    setting : AcquisitionSetting
    space : ParameterSpace
        Encodes ``frame`` in the model's ``input_encoding``.
    frame : DataFrame
        The pool's settings, one row per pool member.
    y : ndarray (len(frame),)
        The pool's objective (minimization form).
    init : sequence of int
        Pool indices "run" before the first pick.
    n_picks : int
        Picks after the start (capped by the pool size).
    batch, method, refit_every, model_seed, rng, quick
        Batch size and method, picks between refits, model seed, acquisition RNG,
        quick model budget.
    cache : dict, optional
        Fitted models keyed by the training rows (in order).  Runs of several settings
        on the same pool with the same ``model_seed`` share it, so the fit on the common
        start (and on any identical history) is done once; a fit is a deterministic
        function of seed and data, so sharing changes no result.
    failures : RunFailures, optional
        Which pool members fail (:mod:`advisor.backtest._failures`): the model is then
        fitted on the successful trials only and the acquisition weighted by the run's
        own P(success).  None (default): every trial succeeds.

    Returns
    -------
    picked : list of int
        Distinct pool indices not in ``init``.
    draws : str or None
        ``"joint"`` / ``"independent"`` for Thompson sampling.
    """
    rng = np.random.default_rng(rng)
    y = np.asarray(y, dtype=float)
    used = [int(i) for i in init]
    free = np.ones(len(y), dtype=bool)
    free[used] = False
    n_picks = min(int(n_picks), int(free.sum()))

    def build():
        return make(surrogate, seed=model_seed, quick=quick)

    X = None
    if setting.name != "random":
        X = space.encode(frame, getattr(build(), "input_encoding", "onehot"))
    model, draws, picked, step = None, None, [], 0
    while len(picked) < n_picks:
        q = min(batch, n_picks - len(picked))
        cand = np.flatnonzero(free)
        if setting.name == "random":
            sel = rng.choice(len(cand), size=q, replace=False)
        else:
            rows = used if failures is None else failures.successful(used)
            Xt, yt = X[rows], y[rows]
            if model is None or step % refit_every == 0:
                model = _fitted(build, Xt, yt, tuple(rows), cache)
            if failures is not None:  # the run's own classifier of failure, every pick
                failures.refit(space, frame, used)
            pick = select_batch if failures is None else failures.selector(cand)
            s = pick(model, setting, X[cand], incumbent(model, Xt), q, rng, method,
                     y_scale=_scale(yt), X_train=Xt, y_train=yt,
                     refit=lambda Xa, ya: build().fit(Xa, ya))
            sel, draws = s.indices, draws or s.draws
        idx = [int(i) for i in cand[sel]]
        picked.extend(idx)
        used.extend(idx)
        free[idx] = False
        step += 1
    return picked, draws


def _fitted(build, X, y, key, cache):
    if cache is None:
        return build().fit(X, y)
    if key not in cache:
        cache[key] = build().fit(X, y)
    return cache[key]


def _scale(y) -> float:
    s = float(np.std(y))
    return s if s > 1e-12 else 1.0


def _pool_task(make, surrogate, setting_dicts, space, frame, y, init, n_picks, batch,
               method, refit_every, model_seed, rng_seeds, quick, failures=None):
    """Executor task: every setting of one surrogate on one pool and start.

    Returns one ``{"picked", "draws", "error"}`` per setting; an exception is recorded,
    never raised.  The settings share a model cache (see :func:`replay_pool`).  BLAS is
    held to one thread: the matrices are small, and on a shared machine multi-threaded
    BLAS made each GP fit 10-80 times slower (measured on 2 cores).
    """
    cache: dict = {}
    out = []
    with threadpool_limits(limits=1):
        for setting_dict, rng_seed in zip(setting_dicts, rng_seeds):
            try:
                picked, draws = replay_pool(
                    make, surrogate, AcquisitionSetting.from_dict(setting_dict), space,
                    frame, y, init, n_picks, batch=batch, method=method,
                    refit_every=refit_every, model_seed=model_seed, rng=rng_seed,
                    quick=quick, cache=cache,
                    failures=None if failures is None else copy.deepcopy(failures))
                out.append({"picked": picked, "draws": draws, "error": None})
            except Exception as exc:  # a failing surrogate is recorded, never fatal
                out.append({"picked": None, "draws": None,
                            "error": f"{type(exc).__name__}: {exc}"})
    return out


# -- curves and summaries -------------------------------------------------------------
def _regret_curve(y_seq: np.ndarray, lo: float, hi: float) -> np.ndarray:
    best = np.minimum.accumulate(np.asarray(y_seq, dtype=float))
    span = hi - lo
    return (best - lo) / span if span > 0 else np.zeros_like(best)


def _best_k_threshold(y: np.ndarray) -> float:
    """The ceil(5 %)-th lowest value: reaching it means finding the pool's best 5 %."""
    k = max(1, math.ceil(0.05 * len(y)))
    return float(np.sort(y)[k - 1])


def _trials_to(y_seq: np.ndarray, threshold: float) -> tuple[int, bool]:
    hit = np.flatnonzero(np.minimum.accumulate(y_seq) <= threshold)
    return (int(hit[0]) + 1, False) if hit.size else (len(y_seq) + 1, True)


def _stats(values) -> dict:
    v = np.asarray(values, dtype=float)
    if v.size == 0:
        return {"median": None, "q25": None, "q75": None, "mean": None, "sd": None, "n": 0}
    q25, med, q75 = np.percentile(v, [25, 50, 75])
    return {"median": float(med), "q25": float(q25), "q75": float(q75),
            "mean": float(v.mean()), "sd": float(v.std(ddof=1)) if v.size > 1 else 0.0,
            "n": int(v.size)}


def _band(curves: list[np.ndarray]) -> dict:
    """Pointwise median and quartiles; shorter curves are held at their last value."""
    if not curves:
        return {"median": [], "q25": [], "q75": []}
    T = max(len(c) for c in curves)
    M = np.array([np.concatenate([c, np.full(T - len(c), c[-1])]) for c in curves])
    q25, med, q75 = np.percentile(M, [25, 50, 75], axis=0)
    return {"median": [float(x) for x in med], "q25": [float(x) for x in q25],
            "q75": [float(x) for x in q75]}


def _summarize(runs: list[dict]) -> dict:
    """runs: dicts with 'curve' (ndarray), 'auc', 'ttb', 'censored'."""
    ttb = _stats([r["ttb"] for r in runs])
    ttb["censored"] = int(sum(r["censored"] for r in runs))
    return {"runs_count": len(runs), "auc": _stats([r["auc"] for r in runs]),
            "trials_to_best5": ttb, "curve": _band([r["curve"] for r in runs])}


def _score_sequence(y_seq, unit) -> dict:
    curve = _regret_curve(y_seq, unit["lo"], unit["hi"])
    ttb, cens = _trials_to(np.asarray(y_seq, float), unit["threshold"])
    return {"curve": curve, "auc": float(curve.mean()), "ttb": ttb, "censored": cens}


# -- pools ----------------------------------------------------------------------------
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


@dataclass
class StandIns:
    """Posterior draws used as simulated objectives.

    Attributes
    ----------
    frame : DataFrame
        The candidate set (logged settings first, then space samples).
    values : ndarray (n_functions, len(frame))
        Each row one drawn function on the candidate set (minimization form).
    optimum : ndarray (n_functions,)
        Each function's minimum over the candidate set (exact by construction).
    argmin : ndarray of int (n_functions,)
    n_logged : int
        How many leading rows of ``frame`` are logged settings.
    """

    frame: pd.DataFrame
    values: np.ndarray
    optimum: np.ndarray
    argmin: np.ndarray
    n_logged: int
    noise_std: float = 0.0


def posterior_standins(trials, n_functions: int, n_extra: int, seed: int, *,
                       make: Callable = make_surrogate, sampler: str = "gp",
                       quick: bool = False) -> StandIns:
    """Draw ``n_functions`` stand-in objectives from the ``sampler`` surrogate's posterior.

    The sampler is fitted on every successful logged trial; functions are drawn jointly
    with its ``sample_y`` on the logged settings plus ``n_extra`` uniform samples of
    ``trials.space``.

    Raises
    ------
    ValueError
        When the sampler has no ``sample_y`` (independent draws would not be functions).
    """
    rng = np.random.default_rng(task_seed(seed, "standins"))
    used = trials.used[trials.params].reset_index(drop=True)
    # fresh space samples only: a set that is mostly logged settings lets a setting
    # win by revisiting what the campaigns already found
    frame = trials.space.sample(int(n_extra), rng).reset_index(drop=True)
    model = make(sampler, seed=task_seed(seed, "standin-model"), quick=quick)
    if not callable(getattr(model, "sample_y", None)):
        raise ValueError(f"surrogate '{sampler}' has no sample_y; joint posterior draws "
                         "are needed for simulated campaigns")
    enc = getattr(model, "input_encoding", "onehot")
    model.fit(trials.space.encode(used, enc), trials.y)
    values = np.asarray(model.sample_y(trials.space.encode(frame, enc), n_functions, rng),
                        dtype=float).reshape(n_functions, len(frame))
    if not np.all(np.isfinite(values)):
        raise ValueError(f"surrogate '{sampler}' returned non-finite posterior draws")
    noise = getattr(model, "noise_std_", None)
    noise = float(noise) if noise is not None and np.isfinite(noise) else 0.0
    return StandIns(frame, values, values.min(axis=1), values.argmin(axis=1), 0, noise)


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
        "settings": [dict(s.to_dict(), label=s.label) for s in settings],
        "replay": replay,
        "simulated": simulated,
        "failures": failures,
    }
    out["per_surrogate"] = {name: choose_setting(out, name) for name in surrogates}
    for name in surrogates:
        out["per_surrogate"][name]["decision"] = _decide(out, name, seed)
    out["choice"] = _overall_choice(out)
    return out


DEFAULT_LABEL = "EI xi=0.01"


def _decide(bt: dict, surrogate: str, seed: int) -> dict:
    """The paired test of every setting against the default for ``surrogate``.

    Evidence = the simulated campaigns (runs paired by stand-in and start); the pool
    replay decides only when no simulated campaign ran, and says so.  The power to
    detect a true AUC improvement of 0.1 is measured by simulation (``paired_power``).
    """
    from ._decision import paired_decision, paired_power

    part = None
    for cand in ("simulated", "replay"):
        sec = bt.get(cand)
        if sec and not sec.get("error") and sec.get("results"):
            part = cand
            break
    if part is None:
        return {"experiment": None, "chosen": None, "beats_default": False,
                "comparisons": [], "power_at_0.1": None}
    values = {}
    for r in bt[part]["results"]:
        if r["surrogate"] != surrogate or r["error"] or r["acquisition"]["name"] == "random":
            continue
        values[r["label"]] = {(run["unit"], run["seed_index"]): run["auc"]
                              for run in r["runs"]}
    out = paired_decision(values, DEFAULT_LABEL)
    out["experiment"] = part
    out["metric"] = "normalized-regret AUC, paired by run"
    base = values.get(DEFAULT_LABEL, {})
    diffs = [np.array([v[k] - base[k] for k in sorted(set(v) & set(base))])
             for lab, v in values.items() if lab != DEFAULT_LABEL]
    rng = np.random.default_rng(task_seed(seed, "power", surrogate))
    out["power_at_0.1"] = paired_power(diffs, max(1, len(diffs)), rng)
    out["power_note"] = ("chance that a setting truly better than the default by 0.1 of "
                         "normalized-regret AUC is found significant with this many runs "
                         "(simulated from the observed paired spread, strictest Holm step)")
    return out


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
                                         p["campaign"], s) for st in settings], quick))
                keys.append((name, p["campaign"], s))
    return units, tasks, keys


def _simulated_grid(trials, surrogates, settings, seed, quick, budget, batch, plan, make,
                    failures=None):
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
    region = None if failures is None else failures.region(stand.frame, len(stand.values),
                                                           seed)
    if region is not None:
        info["failures"] = region.info()
    for f in range(len(stand.values)):
        v = stand.values[f] if region is None else region.scored_values(f, stand.values[f])
        inits = []
        for s in range(plan.sim_seeds):
            r = np.random.default_rng(task_seed(seed, "sim-init", f, s))
            starts = n_pool if region is None else region.allowed_starts(f)
            inits.append(sorted(int(i) for i in r.choice(starts, size=k, replace=False)))
        uid = f"f{f}"
        units[uid] = {"id": uid, "y": v, "lo": float(v.min()), "hi": float(v.max()),
                      "threshold": _best_k_threshold(v), "inits": inits, "length": total,
                      "lines": None, "ordered": False,
                      "failed": None if region is None else region.failed[f]}
        info["functions"].append({"id": uid, "optimum": float(v.min()),
                                  "worst": float(v.max()),
                                  "argmin_is_logged": bool(stand.argmin[f] < stand.n_logged)})
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
                               for st in settings], quick)
                             + (() if region is None else (region.for_function(
                                 f, task_seed(seed, "sim-fail-model", name, uid, s)),)))
                keys.append((name, uid, s))
    return info, units, tasks, keys


def _collect(part, units, keys, outputs, surrogates, settings, failures, trials) -> dict:
    runs: dict = {}
    errors: dict = {}
    failed_runs: dict = {}
    draws: dict = {}
    flat = [((name, st, uid, s), res) for (name, uid, s), per in zip(keys, outputs)
            for st, res in zip(settings, per)]
    for (name, st, uid, s), res in flat:
        key = (name, st)
        if res["error"] is not None:
            errors.setdefault(key, res["error"])
            failed_runs[key] = failed_runs.get(key, 0) + 1
            continue
        unit = units[uid]
        seq = list(unit["inits"][s]) + list(res["picked"])
        scored = _score_sequence(unit["y"][seq], unit)
        run = {"unit": uid, "seed_index": s, "auc": scored["auc"],
               "trials_to_best5": scored["ttb"], "censored": scored["censored"]}
        if unit["lines"] is not None:
            run["picked_lines"] = [int(unit["lines"][i]) for i in seq]
        if unit.get("failed") is not None:  # trials spent in failures (_failures.py)
            run["failed_picks"] = int(unit["failed"][list(res["picked"])].sum())
        runs.setdefault(key, []).append((run, scored))
        if res["draws"]:
            draws[key] = res["draws"]
    for (name, st), err in errors.items():
        failures.append({"surrogate": name, "acquisition": st.to_dict(), "label": st.label,
                         "experiment": part, "runs_failed": failed_runs[(name, st)],
                         "error": err})
    results = []
    for name in surrogates:
        for st in settings:
            key = (name, st)
            entry = {"surrogate": name, "acquisition": st.to_dict(), "label": st.label,
                     "error": errors.get(key), "draws": draws.get(key)}
            if key in errors or key not in runs:
                entry.update({"runs_count": 0, "auc": _stats([]),
                              "trials_to_best5": dict(_stats([]), censored=0),
                              "curve": _band([]), "runs": []})
            else:
                entry.update(_summarize([sc for _, sc in runs[key]]))
                entry["runs"] = [r for r, _ in runs[key]]
            results.append(entry)
    return {"results": results}


def _baselines(part, units, seed, plan) -> dict:
    """Random order (shuffles after the same start) and, for the replay, actual order."""
    rand_runs, actual_runs, per_unit = [], [], {}
    for uid, unit in units.items():
        y, L = unit["y"], unit["length"]
        r = np.random.default_rng(task_seed(seed, "random-order", part, uid))
        start = list(unit["inits"][0])
        rest = np.setdiff1d(np.arange(len(y)), start)
        aucs = []
        for _ in range(plan.random_orders):
            seq = (start + list(r.permutation(rest)))[:L]
            sc = _score_sequence(y[seq], unit)
            rand_runs.append(sc)
            aucs.append(sc["auc"])
        per_unit[uid] = float(np.mean(aucs))
        if part == "replay":
            actual_runs.append(_score_sequence(y[:L], unit))
    out = {"random": dict(_summarize(rand_runs), label="random order",
                          per_unit_mean_auc=per_unit)}
    if part == "replay":
        note = ("logged order" if all(u["ordered"] for u in units.values())
                else "file row order where the log has no order column")
        out["actual"] = dict(_summarize(actual_runs), label="actual order", note=note)
    return out


# -- choosing ---------------------------------------------------------------------------
def _experiments(bt: dict) -> list[tuple[str, dict]]:
    out = []
    for part in ("replay", "simulated"):
        sec = bt.get(part)
        if sec and not sec.get("error") and sec.get("results"):
            out.append((part, sec))
    return out


def _scores(bt: dict, surrogate: str | None = None) -> list[dict]:
    """One row per (surrogate, setting) that ran without error in every experiment."""
    parts = _experiments(bt)
    rows = {}
    for part, sec in parts:
        for r in sec["results"]:
            if surrogate is not None and r["surrogate"] != surrogate:
                continue
            key = (r["surrogate"], r["label"])
            row = rows.setdefault(key, {"surrogate": r["surrogate"],
                                        "acquisition": r["acquisition"],
                                        "label": r["label"], "parts": {}, "error": None,
                                        "beats": [0, 0]})
            if r["error"] or r["auc"]["median"] is None:
                row["error"] = r["error"] or "no runs"
                continue
            row["parts"][part] = {"auc": r["auc"]["median"],
                                  "ttb": r["trials_to_best5"]["median"]}
            ref = sec["random"]["per_unit_mean_auc"]
            for run in r["runs"]:
                row["beats"][0] += run["auc"] < ref[run["unit"]]
                row["beats"][1] += 1
    ok = []
    for row in rows.values():
        if row["error"] is None and len(row["parts"]) == len(parts):
            row["score"] = float(np.mean([v["auc"] for v in row["parts"].values()]))
            rp = row["parts"].get("replay")
            row["tie"] = rp["ttb"] if rp else math.inf
            ok.append(row)
    ok.sort(key=lambda r: (round(r["score"] / _TIE), r["tie"]))
    return ok


def _random_score(bt: dict) -> float | None:
    parts = _experiments(bt)
    if not parts:
        return None
    return float(np.mean([sec["random"]["auc"]["median"] for _, sec in parts]))


def _choice_from(ranked: list[dict], bt: dict, who: str) -> dict:
    parts = [p for p, _ in _experiments(bt)]
    if not ranked:
        return {"surrogate": who, "acquisition": None, "label": None, "score": None,
                "margin_over_runner_up": None, "margin_over_random": None,
                "runner_up": None,
                "reasons": [f"no setting ran without error for {who}" if parts
                            else "no backtest experiment ran"]}
    best = ranked[0]
    runner = ranked[1] if len(ranked) > 1 else None
    overall = len({r["surrogate"] for r in ranked}) > 1 or who != best["surrogate"]

    def name(r):
        return f"{r['surrogate']} + {r['label']}" if overall else r["label"]

    rand = _random_score(bt)
    m_run = None if runner is None else runner["score"] - best["score"]
    m_rand = None if rand is None else rand - best["score"]
    detail = ", ".join(f"{p} {best['parts'][p]['auc']:.3f}" for p in parts)
    reasons = [f"{name(best)} has the lowest median normalized-regret AUC "
               f"({detail}; score {best['score']:.3f}) among {len(ranked)} setting(s)"]
    if runner is not None:
        reasons.append(f"ahead of {name(runner)} by {m_run:.3f}")
        if m_run < 0.01:
            reasons.append("the margin over the runner-up is under 0.01: the two are "
                           "practically tied on these logs")
    if m_rand is not None:
        verdict = "better" if m_rand > 0 else "no better"
        reasons.append(f"{verdict} than random order (score {rand:.3f}, margin {m_rand:.3f})")
    won, total = best["beats"]
    if total:
        reasons.append(f"beats the random-order mean on {won} of {total} runs")
    return {"surrogate": best["surrogate"], "acquisition": best["acquisition"],
            "label": best["label"], "score": best["score"],
            "runner_up": None if runner is None else {"surrogate": runner["surrogate"],
                                                      "acquisition": runner["acquisition"],
                                                      "label": runner["label"],
                                                      "score": runner["score"]},
            "margin_over_runner_up": m_run, "margin_over_random": m_rand,
            "runs_beating_random": int(won), "runs": int(total), "reasons": reasons}


def choose_setting(backtest: dict, surrogate: str) -> dict:
    """The best acquisition setting for ``surrogate`` in a :func:`run_backtest` dict.

    Rule: lowest score = mean over the experiments that ran (replay, simulated) of the
    median normalized-regret AUC; ties (within 1e-9) to the lower median replay
    ``trials_to_best5``.  Settings that failed are not eligible.

    Returns
    -------
    dict
        ``surrogate``, ``acquisition`` ({"name", "params"} or None when nothing ran),
        ``label``, ``score``, ``runner_up``, ``margin_over_runner_up``,
        ``margin_over_random`` (random-order score minus the chosen score; > 0 means the
        setting beats random), ``runs_beating_random``, ``runs``, ``reasons``.
    """
    return _choice_from(_scores(backtest, surrogate), backtest, surrogate)


def _overall_choice(bt: dict) -> dict:
    return _choice_from(_scores(bt), bt, "any surrogate")
