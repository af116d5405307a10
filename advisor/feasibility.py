"""Where the process breaks: which model of trial failure to trust, and what it says.

Logged failures are rarely random: a recipe that contaminates, a learning rate that
diverges, a setting that trips an interlock.  Bayesian optimization with unknown
constraints models the probability that a trial succeeds and weights the acquisition by
it ([GSA2014], [GKX2014]).  This module fits candidate classifiers of success/failure
on every logged trial, scores them under the assessment's validation scheme, picks one,
and reads where failures cluster.

Candidates (all scikit-learn, on the encoded settings mapped to the unit cube):

=============  ==========================================================================
``constant``   the training failure rate, Laplace-smoothed ``(k + 1) / (n + 2)``: the
               "knowing nothing" reference
``logistic``   L2-regularized logistic regression (``C = 1``)
``forest``     random forest classifier, 100 trees, at least 3 trials per leaf
               (Breiman 2001); probability = mean of the trees' leaf frequencies
``gp``         Gaussian-process classifier, Matérn-5/2 kernel with one length scale per
               feature, Laplace approximation ([RW2006] Alg. 3.1-3.2), as [GSA2014] model
               the constraint
=============  ==========================================================================

Probabilities are clipped to ``[1e-4, 1 - 1e-4]`` (our choice: one confidently wrong
held-out trial must not make a model's log loss infinite).  A fold whose training rows
hold only one class predicts the smoothed constant rate.

Scores per model, on the pooled held-out trials (the same splitter the regression
ranking uses, built on all rows, failed ones included): mean log loss (nats per trial,
``sklearn.metrics.log_loss``), Brier score (``sklearn.metrics.brier_score_loss``),
and the reliability error: over five equal-count bins of the predicted failure
probability, the count-weighted mean of ``|mean predicted - observed failure share|``
(expected calibration error, Naeini, Cooper & Hauskrecht 2015).

Choice rule (as for the surrogates): the chosen model has the lowest mean held-out log
loss (strictly proper, [GR2007]; ties within 1e-12 go to the simpler model, ``constant``
< ``logistic`` < ``forest`` < ``gp``).  Each model's log-loss difference to the chosen
one gets a 95% fold-stratified bootstrap interval; ``evidence`` says whether the chosen
model beats the constant rate (the interval of the constant's difference excludes
zero) or only matches it, in which case its map and weights are shown with that caveat
and P(success) stays close to the logged failure rate anyway.

Skipped, with a note, when the log has fewer than ``MIN_EACH`` (5) failed or successful
trials with complete settings: too few to tell a failure region from chance.

Where failures cluster: permutation importance of each parameter (a one-hot block is
permuted as one; Breiman 2001 Sec. 10; Fisher, Rudin & Dominici 2019 Eq. 3.3) as the
increase in held-out log loss, over the validation folds; and the chosen classifier's
partial dependence (Friedman 2001, Sec. 8.2) of the failure probability on the one or
two most important parameters, averaged over the logged settings.

Weighting an acquisition by P(success) (:func:`weight_acquisition`): expected and
probability of improvement are multiplied by P(success) ([GSA2014] Eq. 4, [GKX2014]
Sec. 3).  A confidence bound or a Thompson draw is not an improvement, so we weight the
optimistic improvement it implies over the incumbent, ``max(incumbent - value, 0)``,
by P(success) (our choice, in the same spirit).  Weighting alone still sends picks into a
region of near-certain failure when the model expects a large improvement there (a 5%
chance of a large gain outweighs a sure small one), so, as in the probabilistic-
constraint formulation of [GSA2014] (Sec. 2: a constraint must hold with probability
at least 1 - delta; recalled from memory), candidates whose P(success) is below
``MIN_SUCCESS`` (0.5: likelier to fail than to succeed) are excluded; when no candidate
reaches it, the weighted values are used as they are and the report warns.

References
----------
.. [GSA2014] Gelbart, M. A., Snoek, J. & Adams, R. P. (2014). Bayesian optimization
   with unknown constraints. UAI, 250-259.
.. [GKX2014] Gardner, J. R., Kusner, M. J., Xu, Z., Weinberger, K. Q. & Cunningham,
   J. P. (2014). Bayesian optimization with inequality constraints. ICML, 937-945.
.. [RW2006] Rasmussen, C. E. & Williams, C. K. I. (2006). Gaussian Processes for
   Machine Learning. MIT Press.
.. [GR2007] Gneiting, T. & Raftery, A. E. (2007). Strictly proper scoring rules,
   prediction, and estimation. JASA 102, 359-378.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
from sklearn.ensemble import RandomForestClassifier
from sklearn.exceptions import ConvergenceWarning
from sklearn.gaussian_process import GaussianProcessClassifier
from sklearn.gaussian_process.kernels import ConstantKernel, Matern
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import brier_score_loss, log_loss

from .batching import MIN_SUCCESS, weight_by_success as weight_acquisition
from .execution import task_seed
from .scoring import stratified_bootstrap_index
from .validation import choose_scheme

__all__ = ["assess_feasibility", "FeasibilityModel", "CLASSIFIERS", "MIN_EACH",
           "make_classifier", "unit_cube", "proposals_below",
           "LOW_SUCCESS", "MIN_SUCCESS", "weight_acquisition", "reliability_error"]

#: Candidate classifiers, simplest first (the order breaks ties).
CLASSIFIERS = ("constant", "logistic", "forest", "gp")
#: Fewest failed and fewest successful trials needed to model failure at all.
MIN_EACH = 5
#: A proposal whose predicted probability of success is below this is warned about.
LOW_SUCCESS = 0.8
_CLIP = 1e-4
_N_BOOT = 1000


class _ConstantRate:
    """Laplace-smoothed training failure rate."""

    def fit(self, X, fail):
        fail = np.asarray(fail, dtype=float)
        self.rate_ = (fail.sum() + 1.0) / (len(fail) + 2.0)
        return self

    def predict_fail(self, X):
        return np.full(len(X), self.rate_)


class _SklearnClassifier:
    """A scikit-learn classifier of failure (label 1) with a constant-rate fallback."""

    def __init__(self, kind: str, seed: int, d: int, kernel=None):
        self.kind, self.seed, self.d, self.kernel = kind, seed, d, kernel

    def _make(self):
        if self.kind == "logistic":
            return LogisticRegression(C=1.0, max_iter=2000)
        if self.kind == "forest":
            return RandomForestClassifier(n_estimators=100, min_samples_leaf=3,
                                          random_state=self.seed, n_jobs=1)
        if self.kernel is not None:  # hyperparameters held fixed: Laplace fit only
            return GaussianProcessClassifier(self.kernel, optimizer=None,
                                             random_state=self.seed)
        kernel = ConstantKernel(1.0, (1e-2, 1e2)) * Matern(
            length_scale=np.full(max(self.d, 1), 0.5), length_scale_bounds=(1e-2, 1e2),
            nu=2.5)
        return GaussianProcessClassifier(kernel, n_restarts_optimizer=0,
                                         random_state=self.seed)

    def fit(self, X, fail):
        fail = np.asarray(fail, dtype=int)
        self.fallback_ = _ConstantRate().fit(X, fail)
        self.model_ = None
        if fail.min() != fail.max():
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", ConvergenceWarning)
                self.model_ = self._make().fit(X, fail)
        return self

    def predict_fail(self, X):
        if self.model_ is None:
            return self.fallback_.predict_fail(X)
        col = list(self.model_.classes_).index(1)
        return self.model_.predict_proba(X)[:, col]


def _make(kind: str, seed: int, d: int, kernel=None):
    return (_ConstantRate() if kind == "constant"
            else _SklearnClassifier(kind, seed, d, kernel))


def make_classifier(kind: str, seed: int, d: int, kernel=None):
    """An unfitted classifier of failure of family ``kind`` (one of :data:`CLASSIFIERS`)
    on ``d`` unit-cube features: ``fit(X, fail) -> self``, ``predict_fail(X)``.  A fit
    on one class only predicts the smoothed constant rate.  ``kernel`` (``gp`` only)
    holds the GP classifier's kernel fixed (no marginal-likelihood search)."""
    if kind not in CLASSIFIERS:
        raise ValueError(f"unknown classifier {kind!r}; use one of {CLASSIFIERS}")
    return _make(kind, seed, d, kernel)


class FeasibilityModel:
    """The chosen classifier fitted on every trial: P(success) of any setting."""

    def __init__(self, kind: str, space, encoding_bounds, seed: int = 0):
        self.kind, self.space, self.seed = kind, space, seed
        self._bounds = encoding_bounds

    def fit_frame(self, frame: pd.DataFrame, fail: np.ndarray):
        X = _unit(self.space.encode(frame, "onehot"), self._bounds)
        self.X_, self.fail_ = X, np.asarray(fail, dtype=int)
        self.model_ = _make(self.kind, self.seed, X.shape[1]).fit(X, fail)
        return self

    def gp_kernel(self):
        """A GP classifier's kernel fitted on the trials this model was fitted on: the
        chosen model's own when it is ``gp``, else a fresh fit (marginal likelihood,
        Laplace); ``None`` when the trials hold one class only."""
        if self.fitted_kernel is not None:
            return self.fitted_kernel
        clf = _make("gp", self.seed, self.X_.shape[1]).fit(self.X_, self.fail_)
        return getattr(clf.model_, "kernel_", None)

    @property
    def fitted_kernel(self):
        """The GP classifier's fitted kernel (``None`` for other families or when the
        fit saw one class only)."""
        inner = getattr(self.model_, "model_", None)
        return getattr(inner, "kernel_", None) if self.kind == "gp" else None

    @property
    def encoding_bounds(self) -> np.ndarray:
        """The one-hot encoded bounds that map settings to the unit cube."""
        return self._bounds

    def success_probability(self, frame: pd.DataFrame) -> np.ndarray:
        X = _unit(self.space.encode(frame, "onehot"), self._bounds)
        return 1.0 - np.clip(self.model_.predict_fail(X), _CLIP, 1 - _CLIP)

    def success_probability_encoded(self, X_onehot: np.ndarray) -> np.ndarray:
        """P(success) of settings already encoded one-hot (raw encoded units)."""
        X = _unit(np.asarray(X_onehot, dtype=float), self._bounds)
        return 1.0 - np.clip(self.model_.predict_fail(X), _CLIP, 1 - _CLIP)


def unit_cube(X, bounds) -> np.ndarray:
    """One-hot encoded settings mapped to the unit cube of ``bounds`` (d, 2)."""
    return _unit(np.asarray(X, dtype=float), np.asarray(bounds, dtype=float))


def _unit(X, bounds):
    lo, hi = bounds[:, 0], bounds[:, 1]
    span = np.where(hi - lo > 1e-12, hi - lo, 1.0)
    return (X - lo) / span


def proposals_below(p_success, threshold: float = LOW_SUCCESS) -> list[int]:
    """1-based numbers of the proposals whose P(success) is below ``threshold`` (the
    ones the report and the terminal warn about)."""
    return [i + 1 for i, v in enumerate(np.asarray(p_success, dtype=float))
            if not v >= threshold]


def reliability_error(fail, p_fail, n_bins: int = 5) -> float:
    """Count-weighted mean |mean predicted - observed| over equal-count bins."""
    fail = np.asarray(fail, dtype=float)
    p_fail = np.asarray(p_fail, dtype=float)
    order = np.argsort(p_fail, kind="stable")
    err = 0.0
    for chunk in np.array_split(order, min(n_bins, len(order))):
        if len(chunk):
            err += len(chunk) * abs(p_fail[chunk].mean() - fail[chunk].mean())
    return float(err / len(order))


def _blocks(space) -> list[np.ndarray]:
    blocks, j = [], 0
    for p in space:
        width = len(p.levels) if p.kind == "categorical" else 1
        blocks.append(np.arange(j, j + width))
        j += width
    return blocks


def _fold_task(kind, seed, d, X, fail, train, test, blocks, n_repeats):
    model = _make(kind, seed, d).fit(X[train], fail[train])
    p = np.clip(model.predict_fail(X[test]), _CLIP, 1 - _CLIP)
    rng = np.random.default_rng(seed)
    base = _point_log_loss(fail[test], p).mean()
    imp = []
    for b in blocks:
        vals = []
        for _ in range(n_repeats):
            Xp = X[test].copy()
            Xp[:, b] = Xp[rng.permutation(len(test))][:, b]
            pp = np.clip(model.predict_fail(Xp), _CLIP, 1 - _CLIP)
            vals.append(_point_log_loss(fail[test], pp).mean() - base)
        imp.append(float(np.mean(vals)))
    return p, imp


def _point_log_loss(fail, p_fail):
    return -(fail * np.log(p_fail) + (1 - fail) * np.log(1 - p_fail))


def assess_feasibility(trials, *, scheme: str = "auto", seed: int = 0,
                       quick: bool = False, executor=None) -> dict | None:
    """Fit, score and choose a model of trial failure; ``None`` when the log has no
    failed trial (nothing to model).

    Returns a plain dict (the JSON ``feasibility`` section, README) and, under the key
    ``_model``, the chosen :class:`FeasibilityModel` fitted on every trial (dropped
    from the JSON).

    Runs with one BLAS thread in this process, as every task of
    :class:`advisor.execution.Executor` does: the classifiers' matrices are small, and
    beside one other busy process on a 2-core machine the default thread count made
    four quick assessments take 176 s instead of 17 s (measured 2026-12-03).
    """
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1, user_api="blas"):
        return _assess_feasibility(trials, scheme=scheme, seed=seed, quick=quick,
                                   executor=executor)


def _assess_feasibility(trials, *, scheme, seed, quick, executor):
    frame = trials.frame
    fail_all = (~np.asarray(trials.ok, dtype=bool)).astype(int)
    if fail_all.sum() == 0:
        return None
    space = trials.space
    X_raw = space.encode(frame, "onehot")
    complete = np.all(np.isfinite(X_raw), axis=1)
    X_raw, fail = X_raw[complete], fail_all[complete]
    sub = frame.loc[complete].reset_index(drop=True)
    n_fail, n_ok = int(fail.sum()), int(len(fail) - fail.sum())
    out = {"trials": int(len(fail)), "failed": n_fail, "succeeded": n_ok,
           "rule": (f"modelled when at least {MIN_EACH} failed and {MIN_EACH} successful "
                    "trials have complete settings"),
           "skipped": None, "classifiers": [], "chosen": None, "parameters": [],
           "map": None, "low_success_threshold": LOW_SUCCESS,
           "excluded_incomplete": int((~complete).sum())}
    if n_fail < MIN_EACH or n_ok < MIN_EACH:
        out["skipped"] = (f"{n_fail} failed and {n_ok} successful trials with complete "
                          f"settings; at least {MIN_EACH} of each are needed to tell a "
                          "failure region from chance")
        return out
    bounds = space.encoded_bounds("onehot")
    X = _unit(X_raw, bounds)
    order = (pd.to_numeric(sub[trials.order], errors="coerce").to_numpy(float)
             if trials.order else None)
    groups = (sub[trials.campaign].astype(str).to_numpy(dtype=object)
              if trials.campaign else np.array(["all"] * len(sub), dtype=object))
    try:
        sc = choose_scheme(scheme, order=order, groups=groups if trials.campaign else None,
                           n_rows=len(sub), seed=seed, quick=quick)
    except Exception:  # a scheme that needs what the log lacks: fall back to k-fold
        sc = choose_scheme("kfold", n_rows=len(sub), seed=seed, quick=quick)
    folds = [(tr, te) for tr, te in sc.splitter.split(X, fail, groups) if len(te)]
    blocks = _blocks(space)
    n_repeats = 3 if quick else 10
    tasks = [(k, task_seed(seed, "feasibility", k, f), X.shape[1], X, fail, tr, te,
              blocks, n_repeats)
             for k in CLASSIFIERS for f, (tr, te) in enumerate(folds)]
    if executor is not None:
        results = executor.map(_fold_task, tasks, label="failure models")
    else:
        results = [_fold_task(*t) for t in tasks]
    tested = np.concatenate([te for _, te in folds])
    fold_of = np.concatenate([np.full(len(te), f) for f, (_, te) in enumerate(folds)])
    y_t = fail[tested]
    probs, importance = {}, {}
    i = 0
    for k in CLASSIFIERS:
        res = results[i:i + len(folds)]
        i += len(folds)
        probs[k] = np.concatenate([r[0] for r in res])
        importance[k] = np.array([r[1] for r in res])  # folds × parameters
    rng = np.random.default_rng(task_seed(seed, "feasibility", "bootstrap"))
    idx = stratified_bootstrap_index(fold_of, _N_BOOT, rng)
    ll_pts = {k: _point_log_loss(y_t, probs[k]) for k in CLASSIFIERS}
    leader = min(CLASSIFIERS, key=lambda k: (round(float(ll_pts[k].mean()), 12),
                                             CLASSIFIERS.index(k)))
    rows = []
    for k in CLASSIFIERS:
        d = ll_pts[k] - ll_pts[leader]
        boot = d[idx].mean(axis=1)
        lo, hi = np.quantile(boot, [0.025, 0.975])
        rows.append({"classifier": k,
                     "log_loss": float(log_loss(y_t, probs[k], labels=[0, 1])),
                     "brier": float(brier_score_loss(y_t, probs[k])),
                     "reliability_error": reliability_error(y_t, probs[k]),
                     "mean_predicted_failure": float(probs[k].mean()),
                     "log_loss_diff": float(d.mean()), "log_loss_diff_low": float(lo),
                     "log_loss_diff_high": float(hi),
                     "tied_with_leader": bool(k == leader or lo <= 0.0 <= hi)})
    chosen = leader
    const = next(r for r in rows if r["classifier"] == "constant")
    beats_constant = bool(chosen != "constant" and const["log_loss_diff_low"] > 0)
    order_rank = sorted(rows, key=lambda r: (r["classifier"] != chosen, r["log_loss"]))
    for rank, r in enumerate(order_rank, 1):
        r["rank"] = rank
    out["classifiers"] = order_rank
    out["observed_failure_share"] = float(y_t.mean())
    out["validation"] = {"scheme": sc.name, "description": sc.splitter.describe(),
                         "n_folds": len(folds), "tested_trials": int(len(tested))}
    out["chosen"] = chosen
    out["evidence"] = ("beats the constant failure rate" if beats_constant else
                       "the constant failure rate" if chosen == "constant" else
                       "not distinguishable from the constant failure rate")
    out["beats_constant"] = beats_constant
    out["reason"] = (f"{chosen}: lowest held-out log loss "
                     f"({next(r for r in rows if r['classifier'] == chosen)['log_loss']:.4g}"
                     f" nats per trial vs {const['log_loss']:.4g} for the constant rate); "
                     + ("its advantage over the constant rate is beyond the 95% bootstrap "
                        "interval" if beats_constant else
                        "no model beats the constant rate" if chosen == "constant" else
                        "its advantage over the constant rate is within the 95% bootstrap "
                        "interval, so read its map as a hint"))
    imp = importance[chosen]
    params = []
    for j, p in enumerate(space):
        v = imp[:, j]
        params.append({"name": p.name, "importance": float(v.mean()),
                       "importance_fold_sd": float(v.std(ddof=1)) if len(v) > 1 else None})
    params.sort(key=lambda r: -r["importance"])
    out["parameters"] = params
    out["importance_model"] = chosen
    model = FeasibilityModel(chosen, space, bounds, seed=task_seed(seed, "feasibility",
                                                                   "final"))
    model.fit_frame(sub, fail)
    out["_model"] = model
    if chosen != "constant":
        top = [r["name"] for r in params[:2] if r["importance"] > 0]
        out["map"] = _failure_map(model, sub, top, seed) if top else None
    return out


def _failure_map(model: FeasibilityModel, frame: pd.DataFrame, names: list[str],
                 seed: int, n_grid: int = 25, n_rows: int = 150) -> dict:
    """Partial dependence of P(failure) on one or two parameters (Friedman 2001)."""
    space = model.space
    rng = np.random.default_rng(task_seed(seed, "feasibility", "map"))
    base = frame.iloc[rng.permutation(len(frame))[:n_rows]].reset_index(drop=True)
    axes = []
    for name in names:
        p = space[name]
        if p.kind == "categorical":
            axes.append((name, list(p.levels)))
        elif p.log:
            axes.append((name, list(np.geomspace(p.low, p.high, n_grid))))
        else:
            vals = np.linspace(p.low, p.high, n_grid)
            if p.kind == "integer":
                vals = np.unique(np.round(vals))
            axes.append((name, [float(v) for v in vals]))
    grids = np.meshgrid(*[np.arange(len(v)) for _, v in axes], indexing="ij")
    flat = [g.ravel() for g in grids]
    # every grid cell x every base row in one prediction (one call per cell was the
    # slowest step of a run: 625 forest predictions)
    n_cells, n_base = len(flat[0]), len(base)
    big = base.iloc[np.tile(np.arange(n_base), n_cells)].reset_index(drop=True)
    for (name, vals), g in zip(axes, flat):
        col = np.asarray(vals, dtype=object)[np.repeat(g, n_base)]
        big[name] = col if isinstance(vals[0], str) else col.astype(float)
    pf = (1.0 - model.success_probability(big)).reshape(n_cells, n_base).mean(axis=1)
    shape = tuple(len(v) for _, v in axes)
    return {"parameters": [n for n, _ in axes],
            "values": [[v if isinstance(v, str) else float(v) for v in vals]
                       for _, vals in axes],
            "failure_probability": pf.reshape(shape).tolist(),
            "method": "partial dependence over up to 150 logged settings"}
