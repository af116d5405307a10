"""The next-campaign plan: which parameters matter, where to start, how many trials help,
and how long model fitting will take.

Four questions a team settles before a campaign, each answered from the logged trials
and a chosen surrogate:

* :func:`parameter_relevance` -- first-order and total Sobol indices of the surrogate's
  mean, cross-checked by held-out permutation importance and (for a GP) the fitted
  length scales; parameters with a negligible total effect are flagged as candidates to
  freeze at their best logged value.
* :func:`propose_batch` -- the first ``K`` settings of the next campaign, chosen by the
  surrogate and an acquisition setting from all logged trials, with predicted mean and
  90% interval, as a table with the log's own columns.
* :func:`learning_curve` -- held-out CRPS and NLL against the number of training trials,
  and a plain-words reading of whether more trials still help.
* :func:`cost_projection` -- measured fit and predict seconds against the number of
  trials, a fitted power-law exponent, and the projected time per iteration at the next
  campaign's size.

Everything works in minimization form internally (``TrialTable.y``); values shown to
the user (proposal means and intervals) are turned back into the user's units and
direction with ``TrialTable.sign``.

References
----------
.. [SAL2010] Saltelli, A., Annoni, P., Azzini, I., Campolongo, F., Ratto, M. &
   Tarantola, S. (2010). Variance based sensitivity analysis of model output. Design
   and estimator for the total sensitivity index. Computer Physics Communications 181,
   259-270 (Table 2, estimators (b) and (f); Sec. 5, the A/B design).
.. [SOB2001] Sobol', I. M. (2001). Global sensitivity indices for nonlinear mathematical
   models and their Monte Carlo estimates. Mathematics and Computers in Simulation 55,
   271-280.
.. [BRE2001] Breiman, L. (2001). Random forests. Machine Learning 45, 5-32 (Sec. 10,
   variable importance by permuting a variable in the out-of-bag data).
.. [FRD2019] Fisher, A., Rudin, C. & Dominici, F. (2019). All models are wrong, but many
   are useful: learning a variable's importance by studying an entire class of
   prediction models simultaneously. JMLR 20(177) (model reliance, Eq. 3.3).
.. [GLC2010] Ginsbourger, D., Le Riche, R. & Carraro, L. (2010). Kriging is
   well-suited to parallelize optimization. In Computational Intelligence in Expensive
   Optimization Problems, Springer, 131-162 (Sec. 4.2, the kriging believer).
.. [GRWG2005] Gneiting, T., Raftery, A. E., Westveld, A. H. & Goldman, T. (2005).
   Calibrated probabilistic forecasting using ensemble model output statistics and
   minimum CRPS estimation. Monthly Weather Review 133, 1098-1118 (Eq. 5).
.. [RW2006] Rasmussen, C. E. & Williams, C. K. I. (2006). Gaussian Processes for
   Machine Learning. MIT Press (Sec. 5.1, automatic relevance determination).
"""

from __future__ import annotations

import math
import time
import warnings
from typing import Callable, Mapping, Sequence

import numpy as np
import pandas as pd
from scipy import stats

from .acquisition import AcquisitionSetting, acquisition_values, parse_settings, select_batch
from .errors import UsageError
from .execution import Executor, task_seed
from .scoring import gaussian_crps, gaussian_nll
from .space import ParameterSpace
from .surrogates import make_surrogate

__all__ = ["parameter_relevance", "propose_batch", "learning_curve", "cost_projection",
           "CAUTION", "RELEVANCE_CAUTION", "TOTAL_EFFECT_FREEZE", "PERMUTATION_FREEZE",
           "scaling_exponent"]

#: Shown beside every proposal, in every output that carries proposals.
CAUTION = (
    "These settings are statistical suggestions computed from past trials, not "
    "instructions. Try them only within validated safe operating limits and under the "
    "site's procedures, local codes and licensed practice. The tool knows nothing of "
    "constraints, hazards or limits it was not given, and it does not judge whether a "
    "setting is safe.")

#: Shown beside the parameter-relevance table.
RELEVANCE_CAUTION = (
    "A small effect is small only in the region the logged trials cover and as the "
    "surrogate reads it there; outside that region, or after a change of material, "
    "equipment or other parameters, a frozen parameter may matter again. Freezing is a "
    "suggestion to review with the people who know the process.")

#: Freeze rule, part 1: the upper end of the bootstrap interval of the total Sobol index
#: must lie below this (common practice in screening: 0.05 of the output variance).
TOTAL_EFFECT_FREEZE = 0.05
#: Freeze rule, part 2: the lower end of the permutation-importance interval (increase
#: in held-out MSE as a share of the objective's variance) must not exceed this: the
#: importance is not significantly above a negligible 1% of the variance.  Our choice:
#: "not significantly above zero" alone flags nothing once the folds agree that a
#: parameter's importance is tiny but positive (measured: 2e-4 of the variance for a
#: parameter with no effect at all, which a GP still uses slightly to fit noise).
PERMUTATION_FREEZE = 0.01

#: Central confidence level of the bootstrap and permutation intervals.
_INTERVAL_LEVEL = 0.95
#: Two-sided 90% predictive interval of a proposal: mean +- this many std.
_Z90 = float(stats.norm.ppf(0.95))


# ======================================================================================
# Shared small helpers
# ======================================================================================
def _encoding(model) -> str:
    return getattr(model, "input_encoding", "onehot")


def _check_trials(trials):
    if trials.n_used < 2:
        raise UsageError(f"only {trials.n_used} successful trials; planning needs at least 2",
                         fix="add successful trials to the log")


def _plain(value):
    """A numpy scalar as a plain Python value (for JSON)."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def _fnum(value) -> float | None:
    v = float(value)
    return v if math.isfinite(v) else None


def _feature_blocks(space: ParameterSpace, encoding: str) -> list[np.ndarray]:
    """Encoded column indices of each parameter (a one-hot block for a categorical)."""
    blocks, j = [], 0
    for p in space:
        width = len(p.levels) if (p.kind == "categorical" and encoding == "onehot") else 1
        blocks.append(np.arange(j, j + width))
        j += width
    return blocks


def _best_row(trials) -> pd.Series:
    return trials.used.iloc[int(np.argmin(trials.y))]


def _fit(make, name, seed, quick, X, y):
    return make(name, seed=seed, quick=quick).fit(X, y)


def _fit_all(make, name, seed, quick, trials):
    """A surrogate fitted on every successful trial, and the encoding it asked for."""
    model = make(name, seed=seed, quick=quick)
    encoding = _encoding(model)
    model.fit(trials.space.encode(trials.used, encoding), trials.y)
    return model, encoding


# ======================================================================================
# 1. Parameter relevance
# ======================================================================================
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


def _permutation_fold(make, name, seed, quick, X, y, train, test, blocks, n_repeats):
    """Held-out permutation importance of each parameter on one fold ([BRE2001] Sec. 10,
    on a held-out fold instead of out-of-bag rows; [FRD2019] Eq. 3.3 as a difference).

    Hand-written rather than ``sklearn.inspection.permutation_importance``: a one-hot
    categorical must be permuted as a whole block (scikit-learn permutes single columns)
    and the surrogate protocol returns ``(mean, std)``, not an estimator's ``predict``.
    Returns the mean increase in held-out MSE per parameter (n_params,).
    """
    model = _fit(make, name, task_seed(seed, "fit"), quick, X[train], y[train])
    Xt, yt = X[test], y[test]
    base = float(np.mean((model.predict(Xt)[0] - yt) ** 2))
    rng = np.random.default_rng(task_seed(seed, "permute"))
    out = np.zeros(len(blocks))
    for i, cols in enumerate(blocks):
        inc = []
        for _ in range(n_repeats):
            Xp = Xt.copy()
            Xp[:, cols] = Xt[rng.permutation(len(test))][:, cols]
            inc.append(float(np.mean((model.predict(Xp)[0] - yt) ** 2)) - base)
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
                        executor: Executor | None = None) -> dict:
    """How much each parameter matters, as the fitted surrogate reads the logs.

    1. The surrogate is fitted on all successful trials; first-order ``S_i`` and total
       ``ST_i`` Sobol indices [SOB2001] of its predictive *mean* are estimated over the
       whole space with the [SAL2010] design and estimators (``scipy.stats.sobol_indices``,
       ``n_base * (d + 2)`` predictions), every setting equally likely (uniform, log10
       uniform on log scales, discrete uniform over integers and levels), with 95% BCa
       bootstrap intervals.
    2. Cross-check: permutation importance on held-out folds ([BRE2001], [FRD2019]):
       the increase in held-out mean squared error when one parameter's column(s) are
       permuted among the held-out rows (a one-hot block as a whole), as a share of
       the objective's variance; mean over ``n_folds`` shuffled folds with a 95%
       Student-t interval across folds (our choice).
    3. For a model with ``length_scales_`` (the GP), its fitted ARD length scale per
       parameter ([RW2006] Sec. 5.1; raw encoded units, the shortest of a one-hot
       block) and the same divided by the parameter's encoded range.

    A parameter is flagged ``freeze`` when the upper end of its ``ST`` interval is below
    ``TOTAL_EFFECT_FREEZE`` (0.05) *and* the lower end of its permutation interval is
    not above ``PERMUTATION_FREEZE`` (0.01: not significantly above 1% of the
    objective's variance); its
    ``freeze_value`` is its value at the best successful trial.  When the surrogate's
    mean is flat (zero variance) nothing is flagged: there is no evidence either way.

    Parameters
    ----------
    trials : TrialTable
    surrogate_name : str
    seed : int
    quick : bool
        Smaller design (``n_base`` 512 instead of 2048, 3 folds instead of 5, 5
        permutation repeats instead of 10, 499 bootstrap resamples instead of 999).
    make : callable
        ``make(name, seed=..., quick=...)`` → unfitted surrogate.
    n_base : int, optional
        Rows of each Sobol design matrix; a power of 2.
    n_folds, n_repeats : int, optional
    executor : Executor, optional
        Runs the permutation folds.

    Returns
    -------
    dict
        ``{"surrogate", "parameters": [{"name", "first_order", "first_order_interval",
        "total", "total_interval", "permutation_importance", "permutation_interval",
        "length_scale", "length_scale_relative", "freeze", "freeze_value", "evidence"}],
        "model_mean_variance",
        "n_base", "n_folds", "thresholds", "method", "caution"}``.
    """
    _check_trials(trials)
    n_base = n_base or (512 if quick else 2048)
    n_folds = n_folds or (3 if quick else 5)
    n_repeats = n_repeats or (5 if quick else 10)
    space = trials.space
    y = trials.y
    model, encoding = _fit_all(make, surrogate_name, task_seed(seed, "relevance", "all"),
                               quick, trials)
    X = space.encode(trials.used, encoding)
    blocks = _feature_blocks(space, encoding)

    sob = _sobol_indices(lambda Xe: model.predict(Xe)[0], space, encoding, n_base=n_base,
                         seed=task_seed(seed, "sobol"), n_resamples=499 if quick else 999)

    perm, perm_lo, perm_hi = _permutation_importance(
        make, surrogate_name, seed, quick, X, y, blocks, n_folds, n_repeats, executor)
    scales = _length_scales(model, blocks)
    rel_scales = _relative(scales, space, encoding, blocks)
    best = _best_row(trials)
    flat = not sob["variance"] > 1e-12 * max(1.0, float(np.var(y)))

    rows = []
    for i, p in enumerate(space):
        t_hi = float(sob["total_interval"][i, 1])
        freeze = bool((not flat) and t_hi < TOTAL_EFFECT_FREEZE
                      and not perm_lo[i] > PERMUTATION_FREEZE)
        rows.append({
            "name": p.name,
            "first_order": _fnum(sob["first_order"][i]),
            "first_order_interval": [_fnum(v) for v in sob["first_interval"][i]],
            "total": _fnum(sob["total"][i]),
            "total_interval": [_fnum(v) for v in sob["total_interval"][i]],
            "permutation_importance": _fnum(perm[i]),
            "permutation_interval": [_fnum(perm_lo[i]), _fnum(perm_hi[i])],
            "length_scale": scales[i],
            "length_scale_relative": rel_scales[i],
            "freeze": freeze,
            "freeze_value": _plain(best[p.name]) if freeze else None,
            "evidence": _evidence(sob, perm, perm_lo, perm_hi, scales, i, freeze, flat),
        })
    return {
        "surrogate": surrogate_name,
        "parameters": rows,
        "model_mean_variance": _fnum(sob["variance"]),
        "n_base": int(n_base),
        "n_folds": int(n_folds),
        "thresholds": {"total_upper_below": TOTAL_EFFECT_FREEZE,
                       "permutation_lower_at_most": PERMUTATION_FREEZE,
                       "interval_level": _INTERVAL_LEVEL},
        "method": (
            f"Sobol' first-order and total indices of the {surrogate_name} surrogate's "
            f"mean over the whole space (Saltelli et al. 2010 estimators, {n_base} base "
            f"rows, every setting equally likely), 95% BCa bootstrap intervals; "
            f"cross-checked by held-out permutation importance ({n_folds} folds, "
            f"{n_repeats} permutations each; increase in held-out MSE as a share of the "
            "objective's variance, 95% t-interval over folds)"
            + ("; and the GP's fitted length scales" if any(s is not None for s in scales)
               else "")
            + f". A parameter is a candidate to freeze when the upper end of its total-"
            f"index interval is below {TOTAL_EFFECT_FREEZE} and the lower end of its "
            f"permutation-importance interval is at most {PERMUTATION_FREEZE} of the "
            "variance."),
        "caution": RELEVANCE_CAUTION,
    }


def _permutation_importance(make, name, seed, quick, X, y, blocks, n_folds, n_repeats,
                            executor):
    from sklearn.model_selection import KFold

    n_folds = max(2, min(n_folds, len(y) // 2))
    folds = list(KFold(n_folds, shuffle=True,
                       random_state=task_seed(seed, "relevance-folds") % (2**31)).split(X))
    tasks = [(make, name, task_seed(seed, "relevance", "fold", k), quick, X, y, tr, te,
              blocks, n_repeats) for k, (tr, te) in enumerate(folds)]
    ex = executor or Executor()
    per_fold = np.array(ex.map(_permutation_fold, tasks, label="relevance"))
    per_fold = per_fold / max(float(np.var(y)), 1e-300)
    mean = per_fold.mean(axis=0)
    half = (stats.t.ppf(0.5 + _INTERVAL_LEVEL / 2, n_folds - 1)
            * per_fold.std(axis=0, ddof=1) / math.sqrt(n_folds))
    return mean, mean - half, mean + half


def _evidence(sob, perm, perm_lo, perm_hi, scales, i, freeze, flat) -> str:
    t, (t_lo, t_hi) = sob["total"][i], sob["total_interval"][i]
    text = (f"total effect {t:.3f} (95% interval {t_lo:.3f} to {t_hi:.3f}), first-order "
            f"{sob['first_order'][i]:.3f}; held-out permutation importance {perm[i]:.3f} "
            f"of the variance (95% interval {perm_lo[i]:.3f} to {perm_hi[i]:.3f})")
    if scales[i] is not None:
        text += f"; GP length scale {scales[i]:.3g} (encoded units)"
    if flat:
        return text + "; the model's mean is flat, so no parameter can be judged"
    if freeze:
        return text + ("; negligible by both measures: a candidate to freeze at its value "
                       "in the best logged trial")
    reasons = []
    if not t_hi < TOTAL_EFFECT_FREEZE:
        reasons.append(f"total-effect interval reaches {TOTAL_EFFECT_FREEZE} or more")
    if perm_lo[i] > PERMUTATION_FREEZE:
        reasons.append(f"permutation importance significantly above {PERMUTATION_FREEZE} "
                       "of the variance")
    return text + "; keep tuning: " + " and ".join(reasons)


# ======================================================================================
# 2. First batch of the next campaign
# ======================================================================================
def _check_frozen(space: ParameterSpace, frozen: Mapping | None) -> dict:
    frozen = dict(frozen or {})
    for name, value in frozen.items():
        if name not in space.names:
            raise UsageError(f"cannot freeze unknown parameter '{name}'; parameters are: "
                             + ", ".join(space.names), fix="use one of the listed names")
        p = space[name]
        if p.kind == "categorical":
            if str(value) not in p.levels:
                raise UsageError(f"frozen value {value!r} of '{name}' is not one of its "
                                 "levels: " + ", ".join(p.levels), fix="pick a listed level")
            frozen[name] = str(value)
            continue
        v = float(value)
        if not p.low <= v <= p.high:
            raise UsageError(f"frozen value {v} of '{name}' is outside its range "
                             f"{p.low}..{p.high}", fix="pick a value inside the range")
        if p.kind == "integer" and v != round(v):
            raise UsageError(f"frozen value {v} of integer parameter '{name}' is not whole",
                             fix="pick a whole number")
        frozen[name] = int(round(v)) if p.kind == "integer" else v
    return frozen


def _round_continuous(space: ParameterSpace, frame: pd.DataFrame) -> pd.DataFrame:
    """Round continuous settings to about 1e-4 of their range (4 significant digits on
    log scales), so proposals read like settings a person types, not float noise (our
    choice), then clip back inside the bounds."""
    frame = frame.copy()
    for p in space:
        if p.kind != "continuous" or p.high <= p.low:
            continue
        x = frame[p.name].to_numpy(dtype=float)
        if p.log:
            mag = np.floor(np.log10(np.abs(x)))
            x = np.round(x / 10.0 ** (mag - 3)) * 10.0 ** (mag - 3)
        else:
            decimals = max(0, int(math.ceil(-math.log10((p.high - p.low) * 1e-4))))
            x = np.round(x, decimals)
        frame[p.name] = np.clip(x, p.low, p.high)
    return frame


def _snap(space: ParameterSpace, frame: pd.DataFrame, frozen: dict) -> pd.DataFrame:
    """Settings inside the space: levels, whole numbers, bounds, frozen values."""
    frame = space.decode(space.encode(frame, "ordinal"), "ordinal")
    frame = _round_continuous(space, frame)
    for name, value in frozen.items():
        frame[name] = [value] * len(frame)
    return frame


def _setting_keys(space: ParameterSpace, frame: pd.DataFrame) -> list[tuple]:
    """Hashable identity of each setting: ordinal encoding scaled to [0, 1], rounded to
    1e-6 of each range (two settings closer than that are the same trial)."""
    X = space.encode(frame, "ordinal")
    b = space.encoded_bounds("ordinal")
    width = np.where(b[:, 1] > b[:, 0], b[:, 1] - b[:, 0], 1.0)
    Z = np.round((X - b[:, 0]) / width, 6) + 0.0  # + 0.0 folds -0.0 into 0.0
    return [tuple(row) for row in Z]


def _candidate_pool(trials, frozen: dict, n_pool: int, rng: np.random.Generator,
                    n_best: int = 5, spread: float = 0.1) -> pd.DataFrame:
    """Random settings plus perturbations of the best logged trials (our scheme).

    Half the pool is drawn uniformly from the space (``ParameterSpace.sample``); the
    other half perturbs the ``n_best`` best successful trials: numeric settings move by
    a normal step of ``spread`` times the (log10) range, a categorical setting is
    redrawn with probability 0.2.  Everything is then snapped into the space.
    """
    space = trials.space
    n_rand = n_pool - n_pool // 2
    parts = [space.sample(n_rand, rng)]
    best = trials.used.iloc[np.argsort(trials.y, kind="stable")[:n_best]]
    if len(best):
        X = space.encode(best, "ordinal")
        b = space.encoded_bounds("ordinal")
        reps = int(math.ceil((n_pool // 2) / len(best)))
        Xp = np.repeat(X, reps, axis=0)[: n_pool // 2]
        for j, p in enumerate(space):
            if p.kind == "categorical":
                redraw = rng.random(len(Xp)) < 0.2
                Xp[redraw, j] = rng.integers(0, len(p.levels), int(redraw.sum()))
            else:
                Xp[:, j] += rng.normal(0.0, spread * (b[j, 1] - b[j, 0]), len(Xp))
        parts.append(space.decode(np.clip(Xp, b[:, 0], b[:, 1]), "ordinal"))
    pool = pd.concat(parts, ignore_index=True)
    return _snap(space, pool, frozen)


def _distinct_new(space, pool: pd.DataFrame, logged: pd.DataFrame) -> pd.DataFrame:
    seen = set(_setting_keys(space, logged))
    keep = []
    for i, key in enumerate(_setting_keys(space, pool)):
        if key not in seen:
            seen.add(key)
            keep.append(i)
    return pool.iloc[keep].reset_index(drop=True)


def _as_setting(setting) -> AcquisitionSetting:
    """An :class:`AcquisitionSetting` from itself, its text form (``"ei:xi=0.01"``) or
    its ``to_dict`` form."""
    if isinstance(setting, AcquisitionSetting):
        return setting
    if isinstance(setting, Mapping):
        return AcquisitionSetting.from_dict(dict(setting))
    parsed = parse_settings(str(setting))
    if len(parsed) != 1:
        raise UsageError(f"'{setting}' names {len(parsed)} acquisition settings; a batch "
                         "is proposed with exactly one", fix="give one setting, e.g. ei:xi=0.01")
    return parsed[0]


def propose_batch(trials, surrogate_name: str, setting, k: int, *, seed: int,
                  quick: bool = False, frozen: Mapping | None = None,
                  make: Callable = make_surrogate, n_pool: int | None = None,
                  campaign_label: str = "next") -> pd.DataFrame:
    """The first ``k`` settings of the next campaign.

    The surrogate is fitted on every successful logged trial (warm start).  A candidate
    pool (random settings plus perturbations of the best logged trials, all snapped to
    levels, whole numbers, bounds and frozen values; logged settings and duplicates
    removed) is scored by the acquisition setting, and the batch is picked by the
    *kriging believer* ([GLC2010] Sec. 4.2) through
    :func:`advisor.acquisition.select_batch`: take the best candidate, add it to the
    training data with the model's predicted mean as if observed, refit, and pick again,
    ``k`` times.  Following the paper: the fantasy value is the predictive mean.  Our
    choices: a finite candidate pool instead of a continuous inner optimizer (robust for
    integer and categorical spaces; no point is ever off a level or a whole number),
    and each refit gets its own seed from :func:`task_seed`.

    Predicted mean and 90% interval (mean +- 1.645 std of a new observation, noise
    included) come from the model fitted on the logged trials only, converted to the
    user's units and direction.

    Parameters
    ----------
    trials : TrialTable
    surrogate_name : str
    setting : AcquisitionSetting, str or dict
        Anything with ``name`` and ``params`` (e.g. ``ei`` with ``xi``, ``ucb`` with
        ``beta``).
    k : int
        Batch size (at least 1).
    seed : int
    quick : bool
        Pool of 1000 candidates instead of 2000 (joint Thompson draws over the pool
        cost O(pool^3), so the pool stays modest).
    frozen : dict, optional
        ``{parameter: value}`` held fixed in every proposal.
    make : callable
    n_pool : int, optional
        Candidate-pool size.
    campaign_label : str
        Value written to the campaign column.

    Returns
    -------
    DataFrame
        The log's columns (without the internal ``_line``) in the log's order -- the
        parameters filled, the objective and status empty, campaign ``campaign_label``,
        order 1..k, other columns empty -- followed by ``predicted_mean``,
        ``predicted_low_90``, ``predicted_high_90`` and ``acquisition``.  Fewer than
        ``k`` rows (with a warning) when the space holds fewer new distinct settings.
    """
    _check_trials(trials)
    if int(k) < 1:
        raise UsageError(f"k={k}: the batch needs at least one proposal", fix="pass k >= 1")
    k = int(k)
    setting = _as_setting(setting)
    space = trials.space
    frozen = _check_frozen(space, frozen)
    rng = np.random.default_rng(task_seed(seed, "propose", "pool"))
    pool = _candidate_pool(trials, frozen, n_pool or (1000 if quick else 2000), rng)
    pool = _distinct_new(space, pool, trials.used)
    if len(pool) < k:
        warnings.warn(f"only {len(pool)} new distinct settings found for a batch of {k}",
                      RuntimeWarning, stacklevel=2)
        k = len(pool)

    model, encoding = _fit_all(make, surrogate_name, task_seed(seed, "propose", "fit", 0),
                               quick, trials)
    X_pool = space.encode(pool, encoding)
    X_train, y_train = space.encode(trials.used, encoding), trials.y.copy()
    y_best = float(np.min(trials.y))
    y_scale = float(np.std(trials.y)) or 1.0
    refits = iter(range(1, k))

    def refit(X_aug, y_aug):
        return _fit(make, surrogate_name, task_seed(seed, "propose", "fit", next(refits)),
                    quick, X_aug, y_aug)

    acq_rng = np.random.default_rng(task_seed(seed, "propose", "acquisition"))
    chosen = [int(i) for i in select_batch(
        model, setting, X_pool, y_best, q=k, rng=acq_rng, method="kriging_believer",
        y_scale=y_scale, X_train=X_train, y_train=y_train, refit=refit).indices] if k else []
    # Reported utility: under the warm-start model (no fantasies), so the column reads
    # the same for every row; for Thompson and random it is one more draw.
    acq_values = (acquisition_values(model, setting, X_pool[chosen], y_best,
                                     np.random.default_rng(task_seed(seed, "propose", "value")),
                                     y_scale)[0] if chosen else np.zeros(0))
    picked = pool.iloc[chosen].reset_index(drop=True)
    mean, std = (model.predict(X_pool[chosen]) if chosen
                 else (np.zeros(0), np.zeros(0)))
    return _proposal_frame(trials, picked, np.asarray(mean, float), np.asarray(std, float),
                           acq_values, campaign_label)


def _proposal_frame(trials, picked, mean, std, acq_values, campaign_label) -> pd.DataFrame:
    k = len(picked)
    sign = trials.sign
    lo_raw = sign * (mean - _Z90 * std)
    hi_raw = sign * (mean + _Z90 * std)
    data = {}
    for col in [c for c in trials.frame.columns if c != "_line"]:
        if col in trials.space.names:
            data[col] = picked[col].to_numpy()
        elif col == trials.objective:  # None, not NaN: empty in CSV, null in JSON
            data[col] = [None] * k
        elif col == trials.campaign:
            data[col] = [campaign_label] * k
        elif col == trials.order:
            data[col] = np.arange(1, k + 1)
        else:  # status and any other column: left for the team to fill in
            data[col] = [None] * k
    data["predicted_mean"] = sign * mean
    data["predicted_low_90"] = np.minimum(lo_raw, hi_raw)
    data["predicted_high_90"] = np.maximum(lo_raw, hi_raw)
    data["acquisition"] = np.asarray(acq_values, dtype=float)
    return pd.DataFrame(data)


# ======================================================================================
# 3. Learning curve
# ======================================================================================
_MIN_TRAIN = 4


def _learning_task(make, name, seed, quick, X, y, train, test):
    """Fit on ``train`` rows, score Gaussian CRPS ([GRWG2005] Eq. 5) and NLL on ``test``."""
    try:
        model = _fit(make, name, seed, quick, X[train], y[train])
        mean, std = model.predict(X[test])
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
    training trials.

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
    _check_trials(trials)
    repeats = int(repeats or (3 if quick else 10))
    n = trials.n_used
    n_test = max(1, int(round(test_share * n)))
    n_train_all = n - n_test
    if n_train_all < _MIN_TRAIN:
        raise UsageError(f"{n} successful trials leave {n_train_all} for training; a "
                         f"learning curve needs at least {_MIN_TRAIN}", fix="add trials")
    sizes = sorted({max(_MIN_TRAIN, min(n_train_all, int(round(f * n_train_all))))
                    for f in fractions})
    encoding = _encoding(make(surrogate_name, seed=0, quick=quick))
    X, y = trials.features(encoding), trials.y
    tasks = []
    for r in range(repeats):
        perm = np.random.default_rng(task_seed(seed, "learning", "split", r)).permutation(n)
        test, train = perm[:n_test], perm[n_test:]
        for m in sizes:
            tasks.append((make, surrogate_name, task_seed(seed, "learning", "fit", r, m),
                          quick, X, y, train[:m], test))
    out = np.array((executor or Executor()).map(_learning_task, tasks, label="learning curve"),
                   dtype=float).reshape(repeats, len(sizes), 2)
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
    improving, flat_n, reading = _read_curve(sizes, crps)
    return {"surrogate": surrogate_name, "repeats": repeats, "test_size": n_test,
            "points": points, "still_improving": improving, "flat_from_n": flat_n,
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


def _read_curve(sizes, crps) -> tuple[bool | None, int | None, str]:
    if len(sizes) < 2:
        return None, None, "too few training sizes to read a trend"
    start = max(0, len(sizes) - 3)
    d = crps[:, start] - crps[:, -1]
    d = d[np.isfinite(d)]
    if len(d) < 2:
        return None, None, "too few successful repeats to read a trend"
    se = float(np.std(d, ddof=1)) / math.sqrt(len(d))
    t_crit = float(stats.t.ppf(0.95, len(d) - 1))
    improving = bool(np.mean(d) > 0 and np.mean(d) > t_crit * se)
    if improving:
        return True, None, (f"still improving: held-out CRPS fell by {np.mean(d):.3g} "
                            f"from {sizes[start]} to {sizes[-1]} training trials, more than "
                            "the spread over repeats; more trials help")
    means = np.nanmean(crps, axis=0)
    spread = float(np.nanstd(crps[:, -1], ddof=1))
    flat_n = next(int(m) for m, v in zip(sizes, means) if v <= means[-1] + spread)
    return False, flat_n, (f"flat beyond ~{flat_n} trials: from {sizes[start]} to "
                           f"{sizes[-1]} training trials held-out CRPS changed by "
                           f"{-np.mean(d):.3g}, within the spread over repeats")


# ======================================================================================
# 4. Cost projection
# ======================================================================================
def scaling_exponent(sizes, seconds) -> float | None:
    """Least-squares slope ``b`` of ``log t = a + b log n`` (a power law ``t = c n^b``).

    None when fewer than two positive, finite points or fewer than two distinct sizes.
    """
    n = np.asarray(sizes, dtype=float)
    t = np.asarray(seconds, dtype=float)
    ok = np.isfinite(n) & np.isfinite(t) & (n > 0) & (t > 0)
    if ok.sum() < 2 or len(np.unique(n[ok])) < 2:
        return None
    slope, _ = np.polyfit(np.log(n[ok]), np.log(t[ok]), 1)
    return float(slope)


def _power_law_at(sizes, seconds, target) -> float | None:
    n = np.asarray(sizes, dtype=float)
    t = np.asarray(seconds, dtype=float)
    ok = np.isfinite(t) & (t > 0)
    if ok.sum() < 2 or len(np.unique(n[ok])) < 2:
        return float(t[ok][-1]) if ok.any() else None
    slope, icpt = np.polyfit(np.log(n[ok]), np.log(t[ok]), 1)
    return float(math.exp(icpt + slope * math.log(target)))


def _resampled(X, y, m, rng, bounds):
    """``m`` rows: a subsample when ``m <= n``, else all rows plus bootstrap copies with
    a tiny jitter (1e-3 of each encoded range, 1e-3 of the objective's std) so that no
    two rows coincide (a GP's kernel matrix would be singular)."""
    n = len(y)
    if m <= n:
        idx = rng.choice(n, m, replace=False)
        return X[idx], y[idx]
    extra = rng.integers(0, n, m - n)
    width = bounds[:, 1] - bounds[:, 0]
    Xe = X[extra] + rng.normal(0, 1e-3, (m - n, X.shape[1])) * width
    ye = y[extra] + rng.normal(0, 1e-3 * (np.std(y) or 1.0), m - n)
    return np.vstack([X, np.clip(Xe, bounds[:, 0], bounds[:, 1])]), np.append(y, ye)


def _time_surrogate(make, name, seed, quick, space, X, y, sizes, repeats, n_predict,
                    encoding, clock):
    rng = np.random.default_rng(task_seed(seed, "cost", name, "data"))
    bounds = space.encoded_bounds(encoding)
    X_pred = space.encode(space.sample(n_predict, rng), encoding)
    fit_s, pred_s = [], []
    # One untimed warm-up fit at the smallest size: first calls pay one-time costs
    # (lazy imports, library initialization, page faults) that would inflate the
    # smallest size's time and flatten the fitted exponent.
    Xw, yw = _resampled(X, y, sizes[0], np.random.default_rng(task_seed(seed, "cost", "warm")),
                        bounds)
    make(name, seed=task_seed(seed, "cost", name, "warm"), quick=quick).fit(Xw, yw)
    for m in sizes:
        Xm, ym = _resampled(X, y, m, np.random.default_rng(task_seed(seed, "cost", m)),
                            bounds)
        best_fit = best_pred = math.inf
        for r in range(repeats):
            model = make(name, seed=task_seed(seed, "cost", name, m, r), quick=quick)
            t0 = clock()
            model.fit(Xm, ym)
            t1 = clock()
            model.predict(X_pred)
            t2 = clock()
            # The minimum over repeats is the least disturbed by other work on the
            # machine (common practice, as the timeit documentation advises).
            best_fit, best_pred = min(best_fit, t1 - t0), min(best_pred, t2 - t1)
        fit_s.append(best_fit)
        pred_s.append(best_pred)
    return fit_s, pred_s


def cost_projection(trials, surrogate_names: Sequence[str], *, seed: int,
                    quick: bool = False, budget: int, max_fit_seconds: float | None = None,
                    sizes: Sequence[int] | None = None, n_predict: int = 1000,
                    repeats: int | None = None, make: Callable = make_surrogate,
                    clock: Callable[[], float] = time.perf_counter) -> dict:
    """Measured fit and predict time against the number of trials, and its projection.

    For each surrogate, fit on the log resampled to a few sizes (default ``n/4``,
    ``n/2``, ``n``, and outside quick mode also ``min(n + budget, 2n)`` by bootstrap
    rows with tiny jitter) and predict at ``n_predict`` random settings (one
    acquisition sweep); the minimum over ``repeats`` runs is kept.  A power law
    ``t = c n^b`` is fitted by least squares on log-log axes (:func:`scaling_exponent`),
    and the time per iteration (one refit plus one prediction sweep) is projected at
    the next campaign's size ``n + budget``.  Timings always run serially in this
    process: parallel workers share cores and would distort them.

    ``clock`` is the wall clock by default (what a team waits for); pass
    ``time.process_time`` to measure this process's CPU time instead, which other work
    on a shared machine disturbs less (but which adds up the threads of a
    multithreaded fit).

    Every timing-derived value (the ``*_seconds*`` fields, including the exponents
    ``fit_seconds_exponent`` and ``predict_seconds_exponent``) differs between runs;
    ``over_max_fit_seconds`` is timing-derived too whenever ``max_fit_seconds`` is given.

    Returns
    -------
    dict
        ``{"logged_trials", "budget", "projected_size", "predict_points",
        "max_fit_seconds", "method", "surrogates": {name: {"sizes", "fit_seconds",
        "predict_seconds", "fit_seconds_exponent", "predict_seconds_exponent",
        "projected_size", "projected_seconds_per_iteration", "over_max_fit_seconds", "error"}}}``.
    """
    _check_trials(trials)
    if int(budget) < 0:
        raise UsageError(f"budget={budget} must be zero or more trials", fix="pass budget >= 0")
    n = trials.n_used
    target = n + int(budget)
    if sizes is None:
        sizes = {max(_MIN_TRAIN, n // 4), max(_MIN_TRAIN, n // 2), n}
        if not quick and target > n:
            sizes.add(min(target, 2 * n))
    sizes = sorted({int(m) for m in sizes if int(m) >= 2})
    repeats = int(repeats or (1 if quick else 3))
    out = {}
    for name in surrogate_names:
        encoding = _encoding(make(name, seed=0, quick=quick))
        X, y = trials.features(encoding), trials.y
        entry = {"sizes": sizes, "projected_size": target, "error": None}
        try:
            fit_s, pred_s = _time_surrogate(make, name, seed, quick, trials.space, X, y,
                                            sizes, repeats, n_predict, encoding, clock)
        except Exception as exc:  # one model's failure never stops the others
            entry.update(fit_seconds=None, predict_seconds=None, fit_seconds_exponent=None,
                         predict_seconds_exponent=None, projected_seconds_per_iteration=None,
                         over_max_fit_seconds=False, error=f"{type(exc).__name__}: {exc}")
            out[name] = entry
            continue
        fit_t = _power_law_at(sizes, fit_s, target)
        pred_t = _power_law_at(sizes, pred_s, target)
        per_iter = None if fit_t is None or pred_t is None else fit_t + pred_t
        entry.update(
            fit_seconds=[float(v) for v in fit_s], predict_seconds=[float(v) for v in pred_s],
            fit_seconds_exponent=scaling_exponent(sizes, fit_s),
            predict_seconds_exponent=scaling_exponent(sizes, pred_s),
            projected_seconds_per_iteration=per_iter,
            over_max_fit_seconds=bool(max_fit_seconds is not None and per_iter is not None
                            and per_iter > float(max_fit_seconds)))
        out[name] = entry
    return {"logged_trials": n, "budget": int(budget), "projected_size": target,
            "predict_points": int(n_predict), "max_fit_seconds": max_fit_seconds,
            "clock": "cpu" if clock is time.process_time else "wall",
            "method": (f"fit and predict ({n_predict} points) timed at sizes "
                       f"{', '.join(map(str, sizes))} (minimum of {repeats} run(s), "
                       "serial); power law fitted by least squares on log-log axes; "
                       f"projected at {target} trials (logged + budget); larger sizes "
                       "than the log by bootstrap rows with tiny jitter"),
            "surrogates": out}
