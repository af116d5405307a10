"""Stand-in objectives for the simulated campaigns: joint draws from models of more than
one class fitted to the whole log.

Half of the stand-ins are Gaussian-process posterior draws (``sample_y`` of the project
GP: smooth, stationary functions), half are bootstrap-forest functions (the mean of
``FOREST_TREES_PER_FUNCTION`` distinct trees of the project forest, each a regression
tree fitted to a bootstrap resample of the log: axis-aligned, non-stationary, with
plateaus and steps).  Two classes so that the evidence does not rest on the GP's own
assumptions, which would favour the GP-based settings being judged (issue 12, item 2).
One tree alone is piecewise constant with broad plateaus (its minimum is shared by
every candidate in one leaf, which makes "finding" it trivial); the mean of a few trees
is a finer staircase, still a joint function of the candidate set (our choice).

Opt-in classes ``gp_hyper``, ``gp_sum``, ``gp_sum_ml`` and ``gp_trend`` (GP draws
with sampled hyperparameters, a sum kernel or a quadratic trend,
:mod:`._gp_standins`) can be named in ``BacktestPlan.sim_classes``; none is a default (measured in
``benchmarks/nondefault_wins.py``, section ``standins_summary``: no clear gain).

Both are drawn jointly on the same candidate set, so each stand-in's minimum over the
set is exact.  The observation noise is the GP's fitted noise level (the noise the log
shows), the same for every class.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable, Sequence

import numpy as np
import pandas as pd

from ..execution import task_seed
from ..surrogates import make_surrogate
from ._gp_standins import (GP_STANDIN_CLASSES, hyper_draws, sum_kernel_draws,
                           trend_draws, two_component_draws)

__all__ = ["StandIns", "posterior_standins", "mixed_standins", "STANDIN_CLASSES",
           "FOREST_TREES_PER_FUNCTION"]

#: Model classes the stand-ins are drawn from, in equal shares (the first class gets
#: the odd one out).
STANDIN_CLASSES = ("gp", "forest")
#: Joint draws averaged into one stand-in, per class (a forest draw is one tree).
FOREST_TREES_PER_FUNCTION = 5
_DRAWS_PER_FUNCTION = {"forest": FOREST_TREES_PER_FUNCTION}


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
    noise_std : float
        Observation noise (the log's, as the noise model of the GP sees it).
    classes : list of str
        The model class each function was drawn from (``len == n_functions``).
    failed : dict
        Class -> error text for classes that could not be drawn (their share then
        goes to the classes that could).
    """

    frame: pd.DataFrame
    values: np.ndarray
    optimum: np.ndarray
    argmin: np.ndarray
    n_logged: int
    noise_std: float = 0.0
    classes: list = field(default_factory=list)
    failed: dict = field(default_factory=dict)


def _draw(trials, frame, sampler, n, seed, rng, make, quick):
    """``n`` functions of class ``sampler`` on ``frame``; returns (values, noise_std)."""
    used = trials.used[trials.params].reset_index(drop=True)
    if sampler in GP_STANDIN_CLASSES:
        return _draw_gp_variant(trials, used, frame, sampler, n, seed, rng, make, quick)
    model = make(sampler, seed=task_seed(seed, "standin-model", sampler), quick=quick)
    if not callable(getattr(model, "sample_y", None)):
        raise ValueError(f"surrogate '{sampler}' has no sample_y; joint posterior draws "
                         "are needed for simulated campaigns")
    enc = getattr(model, "input_encoding", "onehot")
    model.fit(trials.space.encode(used, enc), trials.y)
    per = int(_DRAWS_PER_FUNCTION.get(sampler, 1))
    values = np.asarray(model.sample_y(trials.space.encode(frame, enc), n * per, rng),
                        dtype=float).reshape(n, per, len(frame)).mean(axis=1)
    if not np.all(np.isfinite(values)):
        raise ValueError(f"surrogate '{sampler}' returned non-finite posterior draws")
    noise = getattr(model, "noise_std_", None)
    noise = float(noise) if noise is not None and np.isfinite(noise) else None
    return values, noise


def _draw_gp_variant(trials, used, frame, sampler, n, seed, rng, make, quick):
    """The opt-in GP constructions of :mod:`._gp_standins`: the project GP fitted to
    the log (as the ``gp`` class), then hyperparameter-marginalized or sum-kernel draws."""
    model = make("gp", seed=task_seed(seed, "standin-model", sampler), quick=quick)
    X = trials.space.encode(used, "onehot")
    y = np.asarray(trials.y, dtype=float)
    model.fit(X, y)
    Xc = trials.space.encode(frame, "onehot")
    if sampler == "gp_hyper":
        values = hyper_draws(model, X, y, Xc, n, rng, make,
                             task_seed(seed, "standin-model", sampler))
    elif sampler == "gp_trend":
        values = trend_draws(X, y, Xc, n, rng, make,
                             task_seed(seed, "standin-model", sampler))
    elif sampler == "gp_sum":
        values = sum_kernel_draws(model, X, y, Xc, n, rng)
    else:
        values = two_component_draws(model, X, y, Xc, n, rng,
                                     task_seed(seed, "standin-model", sampler))
    if not np.all(np.isfinite(values)):
        raise ValueError(f"stand-in class '{sampler}' returned non-finite draws")
    return values, float(model.noise_std_)


def posterior_standins(trials, n_functions: int, n_extra: int, seed: int, *,
                       make: Callable = make_surrogate, sampler: str = "gp",
                       quick: bool = False) -> StandIns:
    """Draw ``n_functions`` stand-in objectives from the ``sampler`` surrogate's posterior.

    The sampler is fitted on every successful logged trial; functions are drawn jointly
    with its ``sample_y`` on ``n_extra`` uniform samples of ``trials.space``.

    Raises
    ------
    ValueError
        When the sampler has no ``sample_y`` (independent draws would not be functions).
    """
    rng = np.random.default_rng(task_seed(seed, "standins"))
    # fresh space samples only: a set that is mostly logged settings lets a setting
    # win by revisiting what the campaigns already found
    frame = trials.space.sample(int(n_extra), rng).reset_index(drop=True)
    values, noise = _draw(trials, frame, sampler, int(n_functions), seed, rng, make, quick)
    return StandIns(frame, values, values.min(axis=1), values.argmin(axis=1), 0,
                    noise or 0.0, [sampler] * int(n_functions), {})


def mixed_standins(trials, n_functions: int, n_extra: int, seed: int, *,
                   make: Callable = make_surrogate,
                   classes: Sequence[str] = STANDIN_CLASSES, quick: bool = False,
                   extra_frame: pd.DataFrame | None = None,
                   noise_from: str = "gp") -> StandIns:
    """``n_functions`` stand-ins in equal shares from each model class in ``classes``.

    The candidate set is ``n_extra`` uniform samples of the space followed by the rows of
    ``extra_frame`` (for example grid-search designs, so a grid baseline can run on the
    same functions).  A class that fails is recorded in ``failed`` and its share drawn
    from the classes that worked; when none works, ``ValueError``.  The observation
    noise is ``noise_from``'s fitted noise level when that class worked, else the first
    finite noise level of another class, else 0.
    """
    rng = np.random.default_rng(task_seed(seed, "standins"))
    frame = trials.space.sample(int(n_extra), rng).reset_index(drop=True)
    if extra_frame is not None and len(extra_frame):
        frame = pd.concat([frame, extra_frame[frame.columns]], ignore_index=True)
    classes = list(dict.fromkeys(classes))
    n = int(n_functions)
    noises, failed = {}, {}
    # one random stream per class, so a class's draws do not depend on the others
    streams = {c: np.random.default_rng(task_seed(seed, "standins", c)) for c in classes}
    shares = {c: n // len(classes) + (i < n % len(classes)) for i, c in enumerate(classes)}
    values, labels = [], []
    pending = list(classes)
    while pending:
        c = pending.pop(0)
        if shares[c] <= 0:
            continue
        try:
            v, noise = _draw(trials, frame, c, shares[c], seed, streams[c], make, quick)
        except Exception as exc:  # one class failing must not sink the simulated runs
            failed[c] = f"{type(exc).__name__}: {exc}".splitlines()[0][:300]
            rest = [k for k in classes if k not in failed]
            if not rest:
                break
            for i in range(shares[c]):   # hand the share on to the classes that work
                shares[rest[i % len(rest)]] += 1
                if rest[i % len(rest)] not in pending:
                    pending.append(rest[i % len(rest)])
            shares[c] = 0
            continue
        values.append(v)
        labels += [c] * len(v)
        noises[c] = noise
        shares[c] = 0
    if not values:
        raise ValueError("no stand-in class could be drawn: " +
                         "; ".join(f"{c}: {e}" for c, e in failed.items()))
    values = np.vstack(values)
    noise = noises.get(noise_from)
    if noise is None:
        noise = next((v for v in noises.values() if v is not None), 0.0)
    return StandIns(frame, values, values.min(axis=1), values.argmin(axis=1), 0,
                    float(noise), labels, failed)
