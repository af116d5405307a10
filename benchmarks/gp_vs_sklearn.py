"""Fit time and held-out NLL: our Matérn-5/2 GP against scikit-learn's GaussianProcessRegressor.

Data: 500 trials of the Hartmann 6-D function (Dixon & Szegő 1978; constants as
tabulated by Surjanovic & Bingham's Virtual Library of Simulation Experiments) on the
unit cube at uniform random settings, plus Gaussian noise of standard deviation 0.05
(our choice, about 13 % of the function's standard deviation there).  5-fold CV
(scikit-learn ``KFold``, shuffled, fixed seed).

Reference: ``GaussianProcessRegressor(ConstantKernel() * Matern(nu=2.5,
length_scale=ones(6)) + WhiteKernel(), n_restarts_optimizer=2, normalize_y=True)`` on
inputs standardized per column (the same scaling our model applies internally).

Both run with one BLAS thread (our model's default; the reference is wrapped in
``threadpool_limits(1)``), because on a shared machine multi-threaded BLAS timings are
dominated by contention.  The models alternate within each fold, so load changes hit
both alike.

Held-out NLL is the mean over points of ``-log N(y | mean, std^2)`` with ``std`` the
predictive std of a new observation.  Fit time is wall-clock seconds per fold.

    python benchmarks/gp_vs_sklearn.py            # writes benchmarks/results/gp_vs_sklearn.json
"""

from __future__ import annotations

import json
import platform
import time
import warnings
from pathlib import Path

import numpy as np
from scipy.stats import norm
from sklearn.exceptions import ConvergenceWarning
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import ConstantKernel, Matern, WhiteKernel
from sklearn.model_selection import KFold
from threadpoolctl import threadpool_limits

from advisor.surrogates.gp import MaternGP

OUT = Path(__file__).resolve().parent / "results" / "gp_vs_sklearn.json"

# Hartmann-6 constants (Dixon & Szegő 1978), as tabulated in the Virtual Library of
# Simulation Experiments (Surjanovic & Bingham).
_ALPHA = np.array([1.0, 1.2, 3.0, 3.2])
_A = np.array([[10, 3, 17, 3.5, 1.7, 8], [0.05, 10, 17, 0.1, 8, 14],
               [3, 3.5, 1.7, 10, 17, 8], [17, 8, 0.05, 10, 0.1, 14]], dtype=float)
_P = 1e-4 * np.array([[1312, 1696, 5569, 124, 8283, 5886], [2329, 4135, 8307, 3736, 1004, 9991],
                      [2348, 1451, 3522, 2883, 3047, 6650], [4047, 8828, 8732, 5743, 1091, 381]],
                     dtype=float)


def hartmann6(X):
    inner = ((X[:, None, :] - _P[None]) ** 2 * _A[None]).sum(-1)
    return -(_ALPHA * np.exp(-inner)).sum(-1)


def make_data(n=500, noise=0.05, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.uniform(size=(n, 6))
    return X, hartmann6(X) + noise * rng.standard_normal(n)


def _nll(y, mean, std):
    return float(-norm.logpdf(y, mean, std).mean())


class _SklearnGP:
    """The reference, with per-column input standardization as our model does."""

    def __init__(self, seed):
        self.seed = seed

    def fit(self, X, y):
        self.mu_, self.sd_ = X.mean(0), X.std(0)
        kernel = (ConstantKernel(1.0) * Matern(length_scale=np.ones(X.shape[1]), nu=2.5)
                  + WhiteKernel())
        self.gp_ = GaussianProcessRegressor(kernel, n_restarts_optimizer=2, normalize_y=True,
                                            random_state=self.seed)
        with warnings.catch_warnings(), threadpool_limits(1, user_api="blas"):
            warnings.simplefilter("ignore", ConvergenceWarning)
            self.gp_.fit((X - self.mu_) / self.sd_, y)
        return self

    @property
    def log_marginal_likelihood_(self):
        """In y's raw units (sklearn's value is for the normalized targets)."""
        gp = self.gp_
        return float(gp.log_marginal_likelihood_value_
                     - len(gp.y_train_) * np.log(gp._y_train_std))

    def predict(self, X):
        with threadpool_limits(1, user_api="blas"):
            return self.gp_.predict((X - self.mu_) / self.sd_, return_std=True)


def run(n=500, folds=5, seed=0):
    X, y = make_data(n, seed=seed)
    models = {"MaternGP (quick)": lambda s: MaternGP(seed=s, quick=True),
              "MaternGP (thorough)": lambda s: MaternGP(seed=s, quick=False),
              "sklearn GPR (2 restarts)": lambda s: _SklearnGP(seed=s)}
    rows = {name: {"fit_seconds": [], "nll": [], "train_lml": []} for name in models}
    for k, (tr, te) in enumerate(KFold(folds, shuffle=True, random_state=seed).split(X)):
        for name, make in models.items():
            t0 = time.perf_counter()
            model = make(k).fit(X[tr], y[tr])
            rows[name]["fit_seconds"].append(time.perf_counter() - t0)
            mean, std = model.predict(X[te])
            rows[name]["nll"].append(_nll(y[te], mean, std))
            rows[name]["train_lml"].append(model.log_marginal_likelihood_)
    summary = {name: {"mean_fit_seconds": float(np.mean(r["fit_seconds"])),
                      "mean_nll": float(np.mean(r["nll"])),
                      "fit_seconds": r["fit_seconds"], "nll": r["nll"],
                      "train_log_marginal_likelihood": r["train_lml"]}
               for name, r in rows.items()}
    return summary


def main():
    summary = run()
    print(f"{'model':28s} {'fit s/fold':>10s} {'held-out NLL':>13s}")
    for name, r in summary.items():
        print(f"{name:28s} {r['mean_fit_seconds']:10.3f} {r['mean_nll']:13.5f}")
    ref = np.array(summary["sklearn GPR (2 restarts)"]["nll"])
    for name in ("MaternGP (quick)", "MaternGP (thorough)"):
        diff = np.array(summary[name]["nll"]) - ref
        lml = (np.array(summary[name]["train_log_marginal_likelihood"])
               - np.array(summary["sklearn GPR (2 restarts)"]["train_log_marginal_likelihood"]))
        summary[name]["nll_minus_sklearn_per_fold"] = diff.tolist()
        print(f"{name}: held-out NLL minus sklearn per fold: max {diff.max():+.1e}, "
              f"mean {diff.mean():+.1e}; training log ML minus sklearn: min {lml.min():+.1e}")
    OUT.parent.mkdir(parents=True, exist_ok=True)
    OUT.write_text(json.dumps({"data": "hartmann6 + N(0, 0.05^2), n=500, d=6, 5-fold CV",
                               "blas_threads": 1,
                               "python": platform.python_version(),
                               "results": summary}, indent=2))
    print(f"wrote {OUT}")


if __name__ == "__main__":
    main()
