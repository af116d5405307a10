"""The pool campaign every backtest experiment runs (replay and simulated)."""

from __future__ import annotations

from typing import Callable, Sequence

import copy

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from ..acquisition import AcquisitionSetting, incumbent, select_batch

__all__ = ["replay_pool", "update_paths"]

def replay_pool(make: Callable, surrogate: str, setting: AcquisitionSetting, space,
                frame: pd.DataFrame, y: np.ndarray, init: Sequence[int], n_picks: int,
                *, batch: int = 1, method: str = "kriging_believer", refit_every: int = 1,
                model_seed: int = 0, rng: np.random.Generator | int = 0,
                quick: bool = False, cache: dict | None = None,
                reoptimize_every: int | None = None, failures=None
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
        Batch size and method, steps between refits, model seed, acquisition RNG,
        quick model budget.
    cache : dict, optional
        Fitted models keyed by how they were fitted and on which rows (in order).  Runs
        of several settings on the same pool with the same ``model_seed`` share it, so
        the fit on the common start (and on any identical history) is done once; a fit
        is a deterministic function of seed and data, so sharing changes no result.
    reoptimize_every : int, optional
        Cheap updates (see :func:`_schedule`): full fits (hyperparameters re-optimized)
        only every ``reoptimize_every`` steps or when the training set has doubled
        since the last one; in between, a model offering
        ``with_fixed_hyperparameters()`` is refitted at every refit step with the
        hyperparameters of its last full fit held (the GPs: one Cholesky factorization;
        the neural process: its trained network conditioned on the run's trials), and
        any other model is kept as it was (the incumbent is always current).  None: a
        full fit at every refit step.
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
    state = _FitState()
    model, draws, picked, step = None, None, [], 0
    while len(picked) < n_picks:
        q = min(batch, n_picks - len(picked))
        cand = np.flatnonzero(free)
        if setting.name == "random":
            sel = rng.choice(len(cand), size=q, replace=False)
        else:
            rows = used if failures is None else failures.successful(used)
            Xt, yt = X[rows], y[rows]
            if model is None or step % max(1, int(refit_every)) == 0:
                model = state.fit(build, Xt, yt, tuple(rows), step, reoptimize_every,
                                  cache) or model
            if failures is not None:  # the run's own classifier of failure, every pick
                failures.refit(space, frame, used)
            pick = select_batch if failures is None else failures.selector(cand)
            s = pick(model, setting, X[cand], incumbent(model, Xt), q, rng, method,
                     y_scale=_scale(yt), X_train=Xt, y_train=yt,
                     refit=_fantasy_refit(model, build))
            sel, draws = s.indices, draws or s.draws
        idx = [int(i) for i in cand[sel]]
        picked.extend(idx)
        used.extend(idx)
        free[idx] = False
        step += 1
    return picked, draws


#: Scheduled re-optimizations start from the last full fit (``warm_started()``) for a
#: model that allows it (:func:`_warm_in_backtest`).
_WARM_REOPTIMIZE = True


def _warm_in_backtest(model) -> bool:
    """May a scheduled re-optimization start from ``model``'s last fit?  A model class
    says no with ``warm_reoptimize = False`` (optional protocol member; default yes).

    The GPs say no (since stop 28).  Their warm start is one optimizer run from the
    hyperparameters of a fit on the run's first handful of trials, and it stays in that
    fit's basin; a full fit's random starts leave it.  Measured on the three sample logs
    (``benchmarks/warm_refits.py``: the backtest alone, campaign_gp and gp, quick plan and
    grid, seed 0, without failure models; EI xi=0.01's final regret as a multiple of
    random search's, moulding / fermentation / forecast): campaign_gp 0.72 / 0.80 / 0.57
    with warm re-fits, 0.21 / 0.22 / 0.014 with full ones; gp 0.71 / 0.74 / 0.67 against
    0.45 / 0.32 / 0.074; the backtest's CPU about doubled (12.6-14.2 to 22.6-24.8 s a log,
    one process).  The networks' warm start continues training from the last weights on
    the grown data (fine-tuning, not a one-start search over hyperparameters) and is kept.
    """
    return bool(getattr(model, "warm_reoptimize", True))


class _FitState:
    """The last full fit of a run, whose hyperparameters the cheap updates hold."""

    def __init__(self):
        self.base, self.base_key, self.base_step = None, None, 0

    def fit(self, build, X, y, key, step, reoptimize_every, cache):
        """The model for this step; None = keep the current one (a model with no
        fixed-hyperparameter path between two scheduled full fits)."""
        fixed = getattr(self.base, "with_fixed_hyperparameters", None)
        doubling = bool(getattr(self.base, "reoptimize_on_doubling", True))
        if (reoptimize_every is None or self.base is None
                or _schedule(step - self.base_step, len(key), len(self.base_key),
                             int(reoptimize_every), doubling)):
            warm = getattr(self.base, "warm_started", None)
            if (reoptimize_every is not None and callable(warm) and _WARM_REOPTIMIZE
                    and _warm_in_backtest(self.base)):
                # Re-optimize from the last full fit's hyperparameters, one start and
                # no random restarts (what a campaign's own loop does between
                # iterations, common practice); the run's first fit has its own starts.
                model = _fitted(warm, X, y, ("warm", self.base_key) + key, cache)
            else:
                model = _fitted(build, X, y, ("full",) + key, cache)
            self.base, self.base_key, self.base_step = model, key, step
            return model
        if not callable(fixed):
            return None
        return _fitted(fixed, X, y, ("fixed", self.base_key) + key, cache)


def update_paths(model, plan) -> dict:
    """What :class:`_FitState` does with ``model`` (an unfitted instance) under ``plan``:
    read from the optional protocol members the model offers, never from its name.

    Returns ``{"first_fit", "scheduled_refit", "between_refits", "reoptimize_on_doubling"}``:
    ``first_fit`` is always ``"full"``; ``scheduled_refit`` is ``"warm_started"`` (the
    model's ``warm_started()`` from its last fit) or ``"full"``; ``between_refits`` is
    ``"fixed_hyperparameters"`` (``with_fixed_hyperparameters()`` refitted at every
    refit step), ``"kept"`` (the last fit used as it was) or ``"none"`` (no cheap
    updates: a full fit at every refit step).
    """
    cheap = plan.reoptimize_every is not None
    warm = (cheap and _WARM_REOPTIMIZE and callable(getattr(model, "warm_started", None))
            and _warm_in_backtest(model))
    fixed = callable(getattr(model, "with_fixed_hyperparameters", None))
    return {"first_fit": "full",
            "scheduled_refit": "warm_started" if warm else "full",
            "between_refits": ("none" if not cheap else
                               "fixed_hyperparameters" if fixed else "kept"),
            "reoptimize_on_doubling": bool(getattr(model, "reoptimize_on_doubling", True))}


def _schedule(steps_since: int, n_now: int, n_then: int, every: int,
              doubling: bool = True) -> bool:
    """Re-optimize the hyperparameters now?  After ``every`` steps, or once the training
    set has doubled since the last optimization (early on a handful of points carries
    little information about the length scales, so the first ones are re-learned
    sooner; our choice).  A model whose class sets ``reoptimize_on_doubling = False``
    (the neural process: a retrain costs the same at any size, and between retrains it
    conditions on the new trials) is re-optimized after ``every`` steps only."""
    return steps_since >= every or (doubling and n_now >= 2 * n_then)


def _fantasy_refit(model, build):
    """Refit for the batch fantasies: hyperparameters fixed when the model allows it
    (the fantasies are not data to learn length scales from), else a full fit."""
    fixed = getattr(model, "with_fixed_hyperparameters", None)
    if callable(fixed):
        return lambda Xa, ya: fixed().fit(Xa, ya)
    return lambda Xa, ya: build().fit(Xa, ya)


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
               method, refit_every, model_seed, rng_seeds, quick, reoptimize_every=None,
               failures=None):
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
                    quick=quick, cache=cache, reoptimize_every=reoptimize_every,
                    failures=None if failures is None else copy.deepcopy(failures))
                out.append({"picked": picked, "draws": draws, "error": None})
            except Exception as exc:  # a failing surrogate is recorded, never fatal
                out.append({"picked": None, "draws": None,
                            "error": f"{type(exc).__name__}: {exc}"})
    return out
