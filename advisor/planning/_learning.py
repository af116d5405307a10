"""Learning curve: held-out CRPS and NLL against the number of training trials.

See :mod:`advisor.planning` for the references."""

from __future__ import annotations

import math
import warnings
from typing import Callable, Sequence

import numpy as np
from scipy import stats

from ..errors import UsageError
from ..execution import Executor, task_seed
from ..scoring import gaussian_crps, gaussian_nll
from ..surrogates import make_surrogate

from ._common import _check_trials, _encoding, _fit, _fnum, _predict_model, _uses_groups


_MIN_TRAIN = 4


def _learning_task(make, name, seed, quick, X, y, train, test, groups=None):
    """Fit on ``train`` rows, score Gaussian CRPS ([GRWG2005] Eq. 5) and NLL on ``test``.

    ``groups`` (every row's campaign, or None): a model with ``uses_groups`` is fitted
    with the training rows' campaigns and predicts the test rows with their own, as
    cross-validation does."""
    try:
        g_train, g_test = (None, None) if groups is None else (groups[train], groups[test])
        model = _fit(make, name, seed, quick, X[train], y[train], g_train)
        mean, std = _predict_model(model, X[test], g_test)
        crps = float(np.mean(gaussian_crps(y[test], mean, std)))
        nll = float(np.mean(gaussian_nll(y[test], mean, std)))
    except Exception:  # a failed fit is recorded as missing, never fatal (our choice)
        return float("nan"), float("nan")
    return crps, nll


def learning_curve(trials, surrogate_name: str, *, seed: int, quick: bool = False,
                   fractions: Sequence[float] = (0.2, 0.35, 0.5, 0.7, 0.85, 1.0),
                   repeats: int | None = None, test_share: float = 0.2,
                   executor: Executor | None = None, make: Callable = make_surrogate) -> dict:
    """Held-out CRPS and NLL against the number of training trials.

    Each repeat draws a random split into a test part (``test_share`` of the trials)
    and a training part, and a random order of the training part; the model is fitted
    on the first ``fraction`` of that order for each fraction (nested subsets, so the
    curve within a repeat is not blurred by different draws) and scored on the same
    test part: mean Gaussian CRPS ([GRWG2005] Eq. 5, units of the objective) and NLL.
    Our choices: random (not campaign-aware) splits, nested subsets, at least 4
    training trials.  A model with ``uses_groups`` (the campaign GP) is told each
    trial's campaign, in training and in the test part; with random splits a test
    trial's campaign nearly always has training trials, so the curve measures how
    well more trials of the logged campaigns are predicted, not a new campaign.

    Reading rule (our choice): over the last two segments (third-last to last size),
    the per-repeat decrease of CRPS is paired across repeats; the curve is *still
    improving* when that decrease is significantly positive by a one-sided paired
    t-test at 5%.  Otherwise it is *flat* beyond the smallest size whose mean CRPS lies
    within one between-repeat standard deviation of the final mean.

    Returns
    -------
    dict
        ``{"surrogate", "repeats", "test_size", "points": [{"fraction", "n_train",
        "crps_mean", "crps_sd", "nll_mean", "nll_sd", "crps", "nll"}],
        "still_improving", "flat_from_n", "reading", "rule", "failed_fits"}``;
        ``crps``/``nll`` are per-repeat values (None for a failed fit).
    """
    tasks, ctx = _curve_tasks(trials, surrogate_name, seed=seed, quick=quick,
                              fractions=fractions, repeats=repeats, test_share=test_share,
                              make=make)
    results = (executor or Executor()).map(_learning_task, tasks, label="learning curve")
    return _curve_result(ctx, results)


def _curve_tasks(trials, surrogate_name, *, seed, quick,
                 fractions=(0.2, 0.35, 0.5, 0.7, 0.85, 1.0), repeats=None,
                 test_share=0.2, make=make_surrogate):
    """The learning curve's fit tasks (arguments of :func:`_learning_task`) and what
    :func:`_curve_result` needs to read their results: split from
    :func:`learning_curve` so that the assessment can run them in one task grid with
    the relevance's full-data fit (``advisor.planning._joint``)."""
    _check_trials(trials)
    repeats = int(repeats or (5 if quick else 10))  # >= 5: the t-test has >= 4 df
    n = trials.n_used
    n_test = max(1, int(round(test_share * n)))
    n_train_all = n - n_test
    if n_train_all < _MIN_TRAIN:
        raise UsageError(f"{n} successful trials leave {n_train_all} for training; a "
                         f"learning curve needs at least {_MIN_TRAIN}", fix="add trials")
    sizes = sorted({max(_MIN_TRAIN, min(n_train_all, int(round(f * n_train_all))))
                    for f in fractions})
    probe = make(surrogate_name, seed=0, quick=quick)
    encoding = _encoding(probe)
    X, y = trials.features(encoding), trials.y
    groups = trials.groups if _uses_groups(probe) else None
    tasks = []
    for r in range(repeats):
        perm = np.random.default_rng(task_seed(seed, "learning", "split", r)).permutation(n)
        test, train = perm[:n_test], perm[n_test:]
        for m in sizes:
            tasks.append((make, surrogate_name, task_seed(seed, "learning", "fit", r, m),
                          quick, X, y, train[:m], test, groups))
    ctx = {"surrogate": surrogate_name, "repeats": repeats, "sizes": sizes,
           "n_test": n_test, "n_train_all": n_train_all}
    return tasks, ctx


def _curve_result(ctx, results) -> dict:
    """The learning curve (see :func:`learning_curve`) from its tasks' results."""
    repeats, sizes, n_test = ctx["repeats"], ctx["sizes"], ctx["n_test"]
    n_train_all, surrogate_name = ctx["n_train_all"], ctx["surrogate"]
    out = np.array(results, dtype=float).reshape(repeats, len(sizes), 2)
    crps, nll = out[..., 0], out[..., 1]
    points = []
    for j, m in enumerate(sizes):
        points.append({
            "fraction": m / n_train_all, "n_train": int(m),
            "crps_mean": _nanstat(np.nanmean, crps[:, j]),
            "crps_sd": _nanstat(lambda v: np.nanstd(v, ddof=1), crps[:, j]),
            "nll_mean": _nanstat(np.nanmean, nll[:, j]),
            "nll_sd": _nanstat(lambda v: np.nanstd(v, ddof=1), nll[:, j]),
            "crps": [_fnum(v) for v in crps[:, j]], "nll": [_fnum(v) for v in nll[:, j]],
        })
    improving, flat_n, reading, test = _read_curve(sizes, crps)
    return {"surrogate": surrogate_name, "repeats": repeats, "test_size": n_test,
            "points": points, "still_improving": improving, "flat_from_n": flat_n,
            "trend_test": test,
            "reading": reading,
            "rule": ("still improving when the CRPS decrease over the last two segments, "
                     "paired across repeats, is significant by a one-sided t-test at 5%; "
                     "otherwise flat beyond the smallest training size whose mean CRPS is "
                     "within one between-repeat standard deviation of the final mean"),
            "failed_fits": int(np.isnan(crps).sum())}


def _nanstat(fn, v) -> float | None:
    v = np.asarray(v, dtype=float)
    if np.sum(np.isfinite(v)) < (2 if fn is not np.nanmean else 1):
        return None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return _fnum(fn(v))


def _read_curve(sizes, crps) -> tuple[bool | None, int | None, str, dict | None]:
    """Still improving / flat, from a one-sided paired t-test of the CRPS decrease
    (Student 1908) over the last sizes; the test's t, degrees of freedom and p-value are
    returned so the reading shows what it rests on."""
    if len(sizes) < 2:
        return None, None, "too few training sizes to read a trend", None
    start = max(0, len(sizes) - 3)
    d = crps[:, start] - crps[:, -1]
    d = d[np.isfinite(d)]
    if len(d) < 2:
        return None, None, "too few successful repeats to read a trend", None
    se = float(np.std(d, ddof=1)) / math.sqrt(len(d))
    t_crit = float(stats.t.ppf(0.95, len(d) - 1))
    improving = bool(np.mean(d) > 0 and np.mean(d) > t_crit * se)
    df = len(d) - 1
    t = float(np.mean(d) / se) if se > 0 else (np.inf if np.mean(d) > 0 else 0.0)
    test = {"t": _fnum(t), "df": int(df), "p_one_sided": _fnum(float(stats.t.sf(t, df))),
            "from_n": int(sizes[start]), "to_n": int(sizes[-1])}
    tag = f" (paired t = {t:.2f}, {df} df, one-sided p = {float(stats.t.sf(t, df)):.3f})"
    if improving:
        return True, None, (f"still improving: held-out CRPS fell by {np.mean(d):.3g} "
                            f"from {sizes[start]} to {sizes[-1]} training trials, more than "
                            "the spread over repeats; more trials help" + tag), test
    means = np.nanmean(crps, axis=0)
    spread = float(np.nanstd(crps[:, -1], ddof=1))
    flat_n = next(int(m) for m, v in zip(sizes, means) if v <= means[-1] + spread)
    return False, flat_n, (f"flat beyond ~{flat_n} trials: from {sizes[start]} to "
                           f"{sizes[-1]} training trials held-out CRPS changed by "
                           f"{-np.mean(d):.3g}, within the spread over repeats" + tag), test


