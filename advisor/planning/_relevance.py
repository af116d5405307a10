"""Parameter relevance: Sobol indices of the surrogate mean, held-out permutation importance,
length scales, and the freeze rule.

See :mod:`advisor.planning` for the references."""

from __future__ import annotations

import math
import warnings
from typing import Callable

import numpy as np
from scipy import stats
from sklearn.base import clone

from ..errors import UsageError
from ..execution import Executor, task_seed
from ..space import ParameterSpace
from ..surrogates import make_surrogate

from ._common import (PERMUTATION_FREEZE, RELEVANCE_CAUTION, TOTAL_EFFECT_FREEZE,
                      _INTERVAL_LEVEL, _best_row, _check_trials, _feature_blocks, _fit,
                      _fit_all, _fit_model, _fnum, _plain, _predict_model, _uses_groups)


def _sobol_design(space: ParameterSpace, encoding: str):
    """Input distributions for :func:`scipy.stats.sobol_indices` and the map from a
    design matrix ``Z`` (d × n, one row per parameter) to the surrogate's encoding.

    Continuous parameters are uniform on their range (log10 range for log scales);
    integer parameters are uniform over their whole values (``randint``), or uniform in
    log10 space then rounded for log scales; categorical parameters are uniform over
    their level codes (``randint``) and become one-hot blocks or codes inside the map.
    These are our choices: they make the indices describe the whole bounded space with
    every setting equally likely, which is what a campaign searching the space sees.
    """
    dists, mappers = [], []
    for p in space:
        if p.kind == "categorical":
            n_lev = len(p.levels)
            dists.append(stats.randint(0, n_lev))
            if encoding == "onehot":
                mappers.append(lambda z, n_lev=n_lev: (
                    np.clip(np.rint(z), 0, n_lev - 1)[:, None] == np.arange(n_lev)
                ).astype(float))
            else:
                mappers.append(lambda z, n_lev=n_lev: np.clip(np.rint(z), 0, n_lev - 1)[:, None])
            continue
        lo, hi = float(p.low), float(p.high)
        if p.kind == "integer":
            ilo, ihi = math.ceil(lo), math.floor(hi)
            if p.log and ihi > ilo:
                dists.append(stats.uniform(math.log10(ilo), math.log10(ihi) - math.log10(ilo)))
                mappers.append(lambda z, ilo=ilo, ihi=ihi: np.log10(
                    np.clip(np.rint(10.0 ** z), ilo, ihi))[:, None])
            else:
                dists.append(stats.randint(ilo, ihi + 1))
                enc = (lambda v: np.log10(v)) if p.log else (lambda v: v)
                mappers.append(lambda z, ilo=ilo, ihi=ihi, enc=enc:
                               enc(np.clip(np.rint(z), ilo, ihi))[:, None])
            continue
        elo, ehi = (math.log10(lo), math.log10(hi)) if p.log else (lo, hi)
        if ehi > elo:
            dists.append(stats.uniform(elo, ehi - elo))
            mappers.append(lambda z, elo=elo, ehi=ehi: np.clip(z, elo, ehi)[:, None])
        else:
            # A constant parameter: a one-point distribution (scipy's uniform needs a
            # positive width), mapped back to its single value.
            dists.append(stats.randint(0, 1))
            mappers.append(lambda z, elo=elo: np.full((len(z), 1), elo))

    def to_encoded(Z):
        Z = np.asarray(Z, dtype=float)
        return np.hstack([m(Z[i]) for i, m in enumerate(mappers)])

    return dists, to_encoded


def _saltelli_2010(f_A, f_B, f_AB):
    """First-order and total indices, [SAL2010] Table 2 (b) and (f).

    ``f_A``, ``f_B``: (s, n); ``f_AB``: (d, s, n), all centred by the same mean.
    Hand-written (scipy's copy is private) because the seeded bootstrap below must call
    the same estimator on resampled rows.

        S_i  = mean(f_B (f_AB^(i) - f_A)) / V
        ST_i = mean((f_A - f_AB^(i))^2) / (2 V),   V = var([f_A, f_B])
    """
    var = np.var([f_A, f_B], axis=(0, -1))
    with np.errstate(divide="ignore", invalid="ignore"):
        s = np.mean(f_B * (f_AB - f_A), axis=-1) / var
        st = 0.5 * np.mean((f_A - f_AB) ** 2, axis=-1) / var
    return s.T, st.T


def _sobol_indices(predict_mean: Callable[[np.ndarray], np.ndarray], space: ParameterSpace,
                   encoding: str, *, n_base: int, seed: int, n_resamples: int = 999,
                   level: float = _INTERVAL_LEVEL) -> dict:
    """Sobol indices of ``predict_mean`` (encoded X → mean) over the whole space.

    Point estimates come from :func:`scipy.stats.sobol_indices` ([SAL2010] design and
    estimators, ``n_base * (d + 2)`` evaluations).  The intervals are BCa bootstrap
    intervals over the ``n_base`` rows of the design, exactly as ``SobolResult.bootstrap``
    builds them, but through :func:`scipy.stats.bootstrap` with our own seeded
    generator: ``SobolResult.bootstrap`` takes no seed, and the tool must be
    reproducible.  The centred evaluations are taken from scipy through its public
    ``method`` hook.

    Returns ``{"first_order", "total", "first_interval" (d, 2), "total_interval" (d, 2),
    "variance"}`` (arrays).
    """
    if n_base < 2 or n_base & (n_base - 1):
        raise UsageError(f"n_base={n_base} must be a power of 2 (Sobol' balance)",
                         fix="use e.g. 512, 1024 or 2048")
    dists, to_encoded = _sobol_design(space, encoding)
    captured = {}

    def method(f_A, f_B, f_AB):
        captured.update(f_A=f_A, f_B=f_B, f_AB=f_AB)
        return _saltelli_2010(f_A, f_B, f_AB)

    def func(Z):
        return np.asarray(predict_mean(to_encoded(Z)), dtype=float).ravel()

    res = stats.sobol_indices(func=func, n=n_base, dists=dists, method=method,
                              rng=np.random.default_rng(seed))
    s1 = np.atleast_1d(np.asarray(res.first_order, dtype=float))
    st = np.atleast_1d(np.asarray(res.total_order, dtype=float))
    f_A, f_B, f_AB = captured["f_A"], captured["f_B"], captured["f_AB"]
    variance = float(np.var([f_A, f_B]))
    d = len(space)
    if not variance > 0:
        zeros = np.zeros((d, 2))
        return {"first_order": s1, "total": st, "first_interval": zeros,
                "total_interval": zeros, "variance": variance}

    fa, fb, fab = f_A[0], f_B[0], f_AB[:, 0, :]

    def statistic(idx, axis=-1):
        # Vectorized over resamples (idx is (..., n)): the BCa jackknife alone would
        # otherwise make n_base separate calls.  Same estimator as _saltelli_2010.
        a, b, ab = fa[idx], fb[idx], fab[:, idx]
        var = np.var(np.concatenate([a, b], axis=-1), axis=-1)
        with np.errstate(divide="ignore", invalid="ignore"):
            s = np.mean(b * (ab - a), axis=-1) / var
            t = 0.5 * np.mean((a - ab) ** 2, axis=-1) / var
        return np.concatenate([s, t], axis=0)

    with warnings.catch_warnings():
        # A parameter with exactly zero effect gives a degenerate bootstrap distribution
        # (BCa is then undefined); handled below.
        warnings.simplefilter("ignore")
        boot = stats.bootstrap((np.arange(n_base),), statistic, method="BCa",
                               n_resamples=n_resamples, confidence_level=level,
                               vectorized=True, batch=max(1, 2**18 // (n_base * (d + 2))),
                               rng=np.random.default_rng(task_seed(seed, "sobol-bootstrap")))
    lo = np.asarray(boot.confidence_interval.low, dtype=float)
    hi = np.asarray(boot.confidence_interval.high, dtype=float)
    dist = np.asarray(boot.bootstrap_distribution, dtype=float)
    alpha = (1 - level) / 2
    bad = ~(np.isfinite(lo) & np.isfinite(hi))
    if bad.any():  # percentile interval where BCa is undefined
        lo[bad] = np.quantile(dist[bad], alpha, axis=-1)
        hi[bad] = np.quantile(dist[bad], 1 - alpha, axis=-1)
    est = np.concatenate([s1, st])
    lo, hi = np.minimum(lo, est), np.maximum(hi, est)
    return {"first_order": s1, "total": st,
            "first_interval": np.column_stack([lo[:d], hi[:d]]),
            "total_interval": np.column_stack([lo[d:], hi[d:]]), "variance": variance}


def _sobol_point(predict_mean: Callable[[np.ndarray], np.ndarray], space: ParameterSpace,
                 encoding: str, *, n_base: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Point estimates only (first-order, total) from :func:`scipy.stats.sobol_indices`
    with its default method, the [SAL2010] Table 2 estimators (b) and (f) (the latter is
    Jansen's 1999 estimator); no bootstrap.  NaN where the mean is flat (0 / 0)."""
    dists, to_encoded = _sobol_design(space, encoding)
    with np.errstate(divide="ignore", invalid="ignore"):
        res = stats.sobol_indices(
            func=lambda Z: np.asarray(predict_mean(to_encoded(Z)), dtype=float).ravel(),
            n=n_base, dists=dists, rng=np.random.default_rng(seed))
    return (np.atleast_1d(np.asarray(res.first_order, dtype=float)),
            np.atleast_1d(np.asarray(res.total_order, dtype=float)))


def _half_sample_refit(make, name, seed, quick, X, y, space, encoding, n_base,
                       warm=None, groups=None):
    """One refit of the surrogate on a half-sample and the Sobol indices of its mean,
    each on its own fresh design (so the spread over refits carries the Monte-Carlo
    error as well as the model's).  ``warm``: an unfitted model whose optimizer starts
    from the full-data fit (``warm_started()``), used instead of ``make`` when given.
    ``groups``: the rows' campaigns, for a model with ``uses_groups`` (the mean is then
    read without a campaign: the population mean, as for the full fit).
    Returns ``(first_order, total)``, shapes (d,)."""
    if warm is None:
        model = _fit(make, name, task_seed(seed, "fit"), quick, X, y, groups)
    else:
        model = _fit_model(clone(warm).set_params(seed=task_seed(seed, "fit")), X, y,
                           groups)
    return _sobol_point(lambda Xe: model.predict(Xe)[0], space, encoding, n_base=n_base,
                        seed=task_seed(seed, "design"))


def _model_uncertainty(make, name, seed, quick, X, y, space, encoding, *, n_refits,
                       n_base, level, executor, warm=None, groups=None):
    """Sobol indices of the surrogate refitted on ``n_refits`` random half-samples.

    Which resampling, and why (measured, see ``benchmarks/relevance_refit_spread.py``):
    the model's uncertainty about an index is the spread of the index over data sets
    the process could have given.  Refits on bootstrap resamples (drawing n rows with
    replacement) overstate it for a GP: duplicated rows read as noise-free repeats, the
    fitted noise and length scales shrink and the mean wiggles; on a 4-parameter test
    function (n = 60) the bootstrap spread of the total index was 1.5-13 times its
    spread over truly independent data sets, the half-sample spread 0.8-2.2 times.  Posterior function draws of one fitted model would
    keep its hyperparameters fixed, which is where most of the instability lies on a
    small log.  Half-samples without replacement avoid both: the delete-d jackknife
    with d = n/2 ([SW1989]; its histogram [WU1990] rescales ``theta_r - theta_n`` by
    ``sqrt(r / (n - r))``, which is 1 at r = n/2, so the half-sample values spread like
    the full-sample estimate itself for smooth statistics; for a GP on half the data
    they spread somewhat more, which errs toward not freezing).  The interval is the
    central ``level`` percentile range of the refits' indices.

    Warm starts (``warm``, from the full-data fit's ``warm_started()`` when the model
    offers it, as the GPs do): each refit's hyperparameter optimizer starts from the
    full-data optimum with no random restarts, instead of the model's own starts.  It
    still runs to convergence on the half-sample, so the refits keep their spread; it
    made the quick 500-trial assessment's 20 refits several times cheaper, and the
    coverage check of these intervals (``tests/test_planning.py``) still passes.

    Returns ``{"first": (B, d), "total": (B, d), "subsample_size", "refits",
    "refits_used"}``; refits that fail or whose mean is flat are dropped.
    """
    tasks = _refit_tasks(make, name, seed, quick, X, y, space, encoding,
                         n_refits=n_refits, n_base=n_base, warm=warm, groups=groups)
    results = (executor or Executor()).map(_safe_refit, tasks, label="relevance refits")
    return _refit_summary(results, len(y), len(space), n_refits)


def _refit_tasks(make, name, seed, quick, X, y, space, encoding, *, n_refits, n_base,
                 warm=None, groups=None) -> list[tuple]:
    """The :func:`_safe_refit` tasks of :func:`_model_uncertainty` (``groups``: every
    row's campaign or None; each task gets its half-sample's)."""
    n = len(y)
    m = max(2, n // 2)
    rng = np.random.default_rng(task_seed(seed, "relevance", "half-samples"))
    subsets = [np.sort(rng.permutation(n)[:m]) for _ in range(n_refits)]
    return [(make, name, task_seed(seed, "relevance", "refit", b), quick, X[idx], y[idx],
             space, encoding, n_base, warm, None if groups is None else groups[idx])
            for b, idx in enumerate(subsets)]


def _refit_summary(results, n: int, d: int, n_refits: int) -> dict:
    """:func:`_model_uncertainty`'s result from its tasks' results."""
    m = max(2, n // 2)
    ok = [r for r in results if r is not None
          and np.all(np.isfinite(r[0])) and np.all(np.isfinite(r[1]))]
    first = np.array([r[0] for r in ok]).reshape(-1, d)
    total = np.array([r[1] for r in ok]).reshape(-1, d)
    return {"first": first, "total": total, "subsample_size": int(m),
            "refits": int(n_refits), "refits_used": len(ok)}


def _safe_refit(*args):
    try:
        return _half_sample_refit(*args)
    except Exception:  # one failed refit is dropped and counted, never fatal
        return None


def _percentile_interval(values, point, mc_interval, level):
    """Central ``level`` percentile range of ``values`` (refits × d), widened to hold the
    point estimate and the Monte-Carlo interval (never narrower than before)."""
    alpha = (1 - level) / 2
    lo = np.quantile(values, alpha, axis=0)
    hi = np.quantile(values, 1 - alpha, axis=0)
    lo = np.minimum(np.minimum(lo, point), mc_interval[:, 0])
    hi = np.maximum(np.maximum(hi, point), mc_interval[:, 1])
    return np.column_stack([lo, hi])


#: Fewest successful half-sample refits for the model-uncertainty interval; with fewer
#: the freeze rule has no interval to decide on and flags nothing.
_MIN_REFITS = 10


def _permutation_fold(make, name, seed, quick, X, y, train, test, blocks, n_repeats,
                      groups=None):
    """Held-out permutation importance of each parameter on one fold ([BRE2001] Sec. 10,
    on a held-out fold instead of out-of-bag rows; [FRD2019] Eq. 3.3 as a difference).

    Hand-written rather than ``sklearn.inspection.permutation_importance``: a one-hot
    categorical must be permuted as a whole block (scikit-learn permutes single columns)
    and the surrogate protocol returns ``(mean, std)``, not an estimator's ``predict``.
    ``groups`` (every row's campaign, or None): a model with ``uses_groups`` is fitted
    with the training rows' campaigns and predicts the held-out rows with their own
    (the folds are random, so those campaigns have training rows and their offsets are
    learned; a permuted row keeps its campaign, only its settings move).
    Returns the mean increase in held-out MSE per parameter (n_params,).
    """
    g_train, g_test = (None, None) if groups is None else (groups[train], groups[test])
    model = _fit(make, name, task_seed(seed, "fit"), quick, X[train], y[train], g_train)
    Xt, yt = X[test], y[test]
    base = float(np.mean((_predict_model(model, Xt, g_test)[0] - yt) ** 2))
    rng = np.random.default_rng(task_seed(seed, "permute"))
    out = np.zeros(len(blocks))
    for i, cols in enumerate(blocks):
        inc = []
        for _ in range(n_repeats):
            Xp = Xt.copy()
            Xp[:, cols] = Xt[rng.permutation(len(test))][:, cols]
            inc.append(float(np.mean((_predict_model(model, Xp, g_test)[0] - yt) ** 2))
                       - base)
        out[i] = np.mean(inc)
    return out


def _length_scales(model, blocks) -> list[float | None]:
    ls = getattr(model, "length_scales_", None)
    if ls is None:
        return [None] * len(blocks)
    ls = np.atleast_1d(np.asarray(ls, dtype=float))
    n_features = sum(len(b) for b in blocks)
    if ls.size == 1:
        ls = np.full(n_features, float(ls[0]))
    if ls.size != n_features:
        return [None] * len(blocks)
    # The shortest length scale in a one-hot block is the level contrast the GP reads
    # as most relevant ([RW2006] Sec. 5.1: relevance ~ 1 / length scale).
    return [_fnum(np.min(ls[b])) for b in blocks]


def _relative(scales, space, encoding, blocks) -> list[float | None]:
    """Length scale over the parameter's encoded range, comparable across parameters
    (a value well above 1 means the GP sees the parameter as nearly irrelevant)."""
    bounds = space.encoded_bounds(encoding)
    out = []
    for s, b in zip(scales, blocks):
        width = float(np.max(bounds[b, 1] - bounds[b, 0]))
        out.append(None if s is None or not width > 0 else s / width)
    return out


def parameter_relevance(trials, surrogate_name: str, *, seed: int, quick: bool = False,
                        make: Callable = make_surrogate, n_base: int | None = None,
                        n_folds: int | None = None, n_repeats: int | None = None,
                        n_refits: int | None = None,
                        executor: Executor | None = None, fitted=None) -> dict:
    """How much each parameter matters, as the fitted surrogate reads the logs.

    1. The surrogate is fitted on all successful trials; first-order ``S_i`` and total
       ``ST_i`` Sobol indices [SOB2001] of its predictive *mean* are estimated over the
       whole space with the [SAL2010] design and estimators (``scipy.stats.sobol_indices``,
       ``n_base * (d + 2)`` predictions), every setting equally likely (uniform, log10
       uniform on log scales, discrete uniform over integers and levels).  Their 95%
       intervals carry the model's uncertainty: the surrogate is refitted on
       ``n_refits`` random half-samples of the trials (delete-n/2 jackknife [SW1989],
       [WU1990]; why half-samples rather than bootstrap resamples or posterior draws:
       :func:`_model_uncertainty`), the indices of each refit are estimated on a fresh
       design of ``n_base / 2`` rows, and the interval is the central 95% of the refits'
       values, widened to hold the point estimate and its Monte-Carlo (BCa bootstrap
       over design rows) interval, which is kept as ``total_interval_monte_carlo``.
       A model with ``uses_groups`` (the campaign GP) is fitted, here and in every refit
       and fold below, with each trial's campaign, as cross-validation fits it, and the
       indices are those of its mean for a campaign not in the log (no labels: for the
       campaign GP the population mean, the campaigns' offsets and slopes averaged
       out).  Fitted without the campaigns it pools them, and the offsets between
       them become noise and blur the mean (on the moulding sample log the total
       indices then lay 0.025 from the data sheet's on average, 0.003 with them;
       ``benchmarks/planning_groups.py``).
    2. Cross-check: permutation importance on held-out folds ([BRE2001], [FRD2019]):
       the increase in held-out mean squared error when one parameter's column(s) are
       permuted among the held-out rows (a one-hot block as a whole), as a share of
       the objective's variance; mean over ``n_folds`` shuffled folds with a 95%
       Student-t interval across folds (our choice).  A model with ``uses_groups``
       predicts the held-out trials with their own campaigns (seen in training, the
       folds being random).
    3. For a model with ``length_scales_`` (the GP), its fitted ARD length scale per
       parameter ([RW2006] Sec. 5.1; raw encoded units, the shortest of a one-hot
       block) and the same divided by the parameter's encoded range.

    A parameter is flagged ``freeze`` when the upper end of its ``ST`` interval (the
    refit interval above) is below
    ``TOTAL_EFFECT_FREEZE`` (0.05) *and* the upper end of its permutation interval is
    below ``PERMUTATION_FREEZE`` (0.10, the same effect on the MSE scale; formerly the
    lower end was compared with 0.01: not significantly above 1% of the
    objective's variance); its
    ``freeze_value`` is its value at the best successful trial.  When the surrogate's
    mean is flat (zero variance), or fewer than 10 refits succeed, nothing is flagged:
    there is no evidence either way.

    Parameters
    ----------
    trials : TrialTable
    surrogate_name : str
    seed : int
    quick : bool
        Smaller design (``n_base`` 512 instead of 2048, 3 folds instead of 5, 5
        permutation repeats instead of 10, 499 bootstrap resamples instead of 999, 20
        half-sample refits instead of 40).
    make : callable
        ``make(name, seed=..., quick=...)`` → unfitted surrogate.
    n_base : int, optional
        Rows of each Sobol design matrix; a power of 2.
    n_folds, n_repeats : int, optional
    n_refits : int, optional
        Half-sample refits behind the Sobol intervals.
    executor : Executor, optional
        Runs the permutation folds and the refits.
    fitted : (model, encoding), optional
        The surrogate already fitted on every successful trial with seed
        ``task_seed(seed, "relevance", "all")`` (what this function would fit); None
        fits it here.

    Returns
    -------
    dict
        ``{"surrogate", "parameters": [{"name", "first_order", "first_order_interval",
        "total", "total_interval", "total_interval_monte_carlo", "permutation_importance",
        "permutation_interval", "length_scale", "length_scale_relative", "freeze",
        "freeze_value", "evidence"}], "model_mean_variance", "model_uncertainty",
        "n_base", "n_folds", "thresholds", "method", "caution"}``.
    """
    _check_trials(trials)
    n_base = n_base or (512 if quick else 2048)
    n_folds = n_folds or (3 if quick else 5)
    n_repeats = n_repeats or (5 if quick else 10)
    n_refits = n_refits or (20 if quick else 40)
    space = trials.space
    y = trials.y
    # ``fitted``: this fit, made elsewhere (the assessment runs it in a worker beside the
    # learning curve's fits, advisor.planning._joint); the same seed and data
    model, encoding = fitted if fitted is not None else _fit_all(
        make, surrogate_name, task_seed(seed, "relevance", "all"), quick, trials)
    X = space.encode(trials.used, encoding)
    blocks = _feature_blocks(space, encoding)

    sob = _sobol_indices(lambda Xe: model.predict(Xe)[0], space, encoding, n_base=n_base,
                         seed=task_seed(seed, "sobol"), n_resamples=499 if quick else 999)

    warm_fn = getattr(model, "warm_started", None)
    # The permutation folds and the half-sample refits are independent: one task grid
    # (the folds, fitted afresh and so the dearer tasks, first), so a worker never
    # waits at a barrier between them.  Each task and its seed are as before.
    # Campaign labels only for a model that takes them; a model without is called as
    # before, fit(X, y) and predict(X).
    groups = trials.groups if _uses_groups(model) else None
    perm_tasks = _permutation_tasks(make, surrogate_name, seed, quick, X, y, blocks,
                                    n_folds, n_repeats, groups)
    refit_tasks = _refit_tasks(make, surrogate_name, seed, quick, X, y, space, encoding,
                               n_refits=n_refits, n_base=max(64, n_base // 2),
                               warm=warm_fn() if callable(warm_fn) else None,
                               groups=groups)
    done = (executor or Executor()).map(
        _relevance_task, [("permutation", *t) for t in perm_tasks]
        + [("refit", *t) for t in refit_tasks], label="relevance")
    refits = _refit_summary(done[len(perm_tasks):], len(y), len(space), n_refits)
    enough = refits["refits_used"] >= _MIN_REFITS
    mc_total, mc_first = sob["total_interval"], sob["first_interval"]
    if enough:
        sob["total_interval"] = _percentile_interval(refits["total"], sob["total"],
                                                     mc_total, _INTERVAL_LEVEL)
        sob["first_interval"] = _percentile_interval(refits["first"], sob["first_order"],
                                                     mc_first, _INTERVAL_LEVEL)

    perm, perm_lo, perm_hi = _permutation_summary(done[:len(perm_tasks)], y)
    scales = _length_scales(model, blocks)
    rel_scales = _relative(scales, space, encoding, blocks)
    best = _best_row(trials)
    flat = not sob["variance"] > 1e-12 * max(1.0, float(np.var(y)))

    rows = []
    for i, p in enumerate(space):
        t_hi = float(sob["total_interval"][i, 1])
        # Positive evidence that the effect is small, for both measures: each upper
        # bound below its margin (issue 13; formerly only "not significantly above").
        freeze = bool((not flat) and enough and t_hi < TOTAL_EFFECT_FREEZE
                      and perm_hi[i] < PERMUTATION_FREEZE)
        rows.append({
            "name": p.name,
            "first_order": _fnum(sob["first_order"][i]),
            "first_order_interval": [_fnum(v) for v in sob["first_interval"][i]],
            "total": _fnum(sob["total"][i]),
            "total_interval": [_fnum(v) for v in sob["total_interval"][i]],
            "total_interval_monte_carlo": [_fnum(v) for v in mc_total[i]],
            "permutation_importance": _fnum(perm[i]),
            "permutation_interval": [_fnum(perm_lo[i]), _fnum(perm_hi[i])],
            "length_scale": scales[i],
            "length_scale_relative": rel_scales[i],
            "freeze": freeze,
            "freeze_value": _plain(best[p.name]) if freeze else None,
            "evidence": _evidence(sob, perm, perm_lo, perm_hi, scales, i, freeze, flat,
                                  enough),
        })
    return {
        "surrogate": surrogate_name,
        "parameters": rows,
        "model_mean_variance": _fnum(sob["variance"]),
        "model_uncertainty": {
            "method": "half-sample refits",
            "refits": refits["refits"], "refits_used": refits["refits_used"],
            "subsample_size": refits["subsample_size"],
            "design_rows_per_refit": max(64, n_base // 2),
            "enough_refits": enough},
        "n_base": int(n_base),
        "n_folds": int(n_folds),
        "thresholds": {"total_upper_below": TOTAL_EFFECT_FREEZE,
                       "permutation_lower_at_most": PERMUTATION_FREEZE,
                       "permutation_upper_below": PERMUTATION_FREEZE,
                       "interval_level": _INTERVAL_LEVEL},
        "method": (
            f"Sobol' first-order and total indices of the {surrogate_name} surrogate's "
            f"mean over the whole space (Saltelli et al. 2010 estimators, {n_base} base "
            f"rows, every setting equally likely); 95% intervals from {n_refits} refits "
            f"of the model on random halves of the trials ({refits['refits_used']} "
            "succeeded), so they carry the model's uncertainty as well as the Monte-"
            "Carlo error (never narrower than the BCa bootstrap interval over design "
            "rows); "
            f"cross-checked by held-out permutation importance ({n_folds} folds, "
            f"{n_repeats} permutations each; increase in held-out MSE as a share of the "
            "objective's variance, 95% t-interval over folds)"
            + ("; and the GP's fitted length scales" if any(s is not None for s in scales)
               else "")
            + f". A parameter is a candidate to freeze when the upper end of its total-"
            f"index interval is below {TOTAL_EFFECT_FREEZE} and the upper end of its "
            f"permutation-importance interval is below {PERMUTATION_FREEZE} of the "
            "variance (positive evidence of a small effect on both scales)"
            + ("." if enough else f"; fewer than {_MIN_REFITS} refits succeeded, so no "
               "parameter is judged.")),
        "caution": RELEVANCE_CAUTION,
    }


def _permutation_tasks(make, name, seed, quick, X, y, blocks, n_folds,
                       n_repeats, groups=None) -> list[tuple]:
    """The :func:`_permutation_fold` tasks of :func:`_permutation_importance`."""
    from sklearn.model_selection import KFold

    n_folds = max(2, min(n_folds, len(y) // 2))
    folds = list(KFold(n_folds, shuffle=True,
                       random_state=task_seed(seed, "relevance-folds") % (2**31)).split(X))
    return [(make, name, task_seed(seed, "relevance", "fold", k), quick, X, y, tr, te,
             blocks, n_repeats, groups) for k, (tr, te) in enumerate(folds)]


def _permutation_summary(per_fold, y):
    """Mean and 95% t-interval over folds of the per-fold importances, as shares of the
    objective's variance."""
    per_fold = np.array(per_fold) / max(float(np.var(y)), 1e-300)
    n_folds = len(per_fold)
    mean = per_fold.mean(axis=0)
    half = (stats.t.ppf(0.5 + _INTERVAL_LEVEL / 2, n_folds - 1)
            * per_fold.std(axis=0, ddof=1) / math.sqrt(n_folds))
    return mean, mean - half, mean + half


def _relevance_task(kind: str, *args):
    """One task of :func:`parameter_relevance`'s single task grid: a permutation fold
    or a half-sample refit (top-level, so worker processes can run it)."""
    return _permutation_fold(*args) if kind == "permutation" else _safe_refit(*args)


def _evidence(sob, perm, perm_lo, perm_hi, scales, i, freeze, flat, enough=True) -> str:
    t, (t_lo, t_hi) = sob["total"][i], sob["total_interval"][i]
    text = (f"total effect {t:.3f} (95% interval {t_lo:.3f} to {t_hi:.3f}), first-order "
            f"{sob['first_order'][i]:.3f}; held-out permutation importance {perm[i]:.3f} "
            f"of the variance (95% interval {perm_lo[i]:.3f} to {perm_hi[i]:.3f})")
    if scales[i] is not None:
        text += f"; GP length scale {scales[i]:.3g} (encoded units)"
    if flat:
        return text + "; the model's mean is flat, so no parameter can be judged"
    if not enough:
        return text + ("; too few refits succeeded to bound the model's uncertainty, so "
                       "no parameter is judged")
    if freeze:
        return text + ("; negligible by both measures: a candidate to freeze at its value "
                       "in the best logged trial")
    reasons = []
    if not t_hi < TOTAL_EFFECT_FREEZE:
        reasons.append(f"total-effect interval reaches {TOTAL_EFFECT_FREEZE} or more")
    if not perm_hi[i] < PERMUTATION_FREEZE:
        reasons.append(f"permutation-importance interval reaches {PERMUTATION_FREEZE} "
                       "or more")
    return text + "; keep tuning: " + " and ".join(reasons)


