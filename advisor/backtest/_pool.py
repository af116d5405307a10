"""The pool campaign every backtest experiment runs (replay and simulated)."""

from __future__ import annotations

from typing import Callable, Sequence

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from ..acquisition import AcquisitionSetting, incumbent, select_batch

__all__ = ["replay_pool"]

def replay_pool(make: Callable, surrogate: str, setting: AcquisitionSetting, space,
                frame: pd.DataFrame, y: np.ndarray, init: Sequence[int], n_picks: int,
                *, batch: int = 1, method: str = "kriging_believer", refit_every: int = 1,
                model_seed: int = 0, rng: np.random.Generator | int = 0,
                quick: bool = False, cache: dict | None = None
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
            Xt, yt = X[used], y[used]
            if model is None or step % refit_every == 0:
                model = _fitted(build, Xt, yt, tuple(used), cache)
            s = select_batch(model, setting, X[cand], incumbent(model, Xt), q, rng, method,
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
               method, refit_every, model_seed, rng_seeds, quick):
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
                    quick=quick, cache=cache)
                out.append({"picked": picked, "draws": draws, "error": None})
            except Exception as exc:  # a failing surrogate is recorded, never fatal
                out.append({"picked": None, "draws": None,
                            "error": f"{type(exc).__name__}: {exc}"})
    return out
