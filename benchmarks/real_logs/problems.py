"""Real black boxes: models tuned on datasets bundled with scikit-learn, and a
reaction-engineering simulator.

Each problem maps a point of the unit cube to the logged settings (in the user's units)
and evaluates it with a seed: for the tuned models the seed shuffles the
cross-validation split, so repeated settings give different values exactly as in a
real tuning log (that is the evaluation noise); the simulator adds a measurement error.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

__all__ = ["Problem", "PROBLEMS"]


@dataclass
class Problem:
    name: str
    description: str
    params: list[tuple[str, float, float, bool]]   # name, low, high, integer
    objective: str
    direction: str
    evaluate: Callable[[dict, int], float]
    lower_bound: float | None = None
    upper_bound: float | None = None

    def settings(self, u: np.ndarray) -> dict:
        out = {}
        for (name, lo, hi, integer), ui in zip(self.params, u):
            v = lo + float(ui) * (hi - lo)
            out[name] = int(round(v)) if integer else round(v, 4)
        return out


def _cv_score(model, X, y, seed: int, scoring: str, folds: int = 3) -> float:
    from sklearn.model_selection import KFold, StratifiedKFold, cross_val_score
    cls = StratifiedKFold if scoring == "accuracy" else KFold
    cv = cls(folds, shuffle=True, random_state=seed % (2 ** 31))
    return float(np.mean(cross_val_score(model, X, y, cv=cv, scoring=scoring)))


def _diabetes_svr(s: dict, seed: int) -> float:
    from sklearn.datasets import load_diabetes
    from sklearn.preprocessing import StandardScaler
    from sklearn.svm import SVR
    X, y = load_diabetes(return_X_y=True)
    X = StandardScaler().fit_transform(X)
    y = (y - y.mean()) / y.std()
    m = SVR(C=10 ** s["log10_C"], gamma=10 ** s["log10_gamma"],
            epsilon=10 ** s["log10_epsilon"])
    return math.sqrt(-_cv_score(m, X, y, seed, "neg_mean_squared_error"))


def _cancer_svc(s: dict, seed: int) -> float:
    from sklearn.datasets import load_breast_cancer
    from sklearn.preprocessing import StandardScaler
    from sklearn.svm import SVC
    X, y = load_breast_cancer(return_X_y=True)
    X = StandardScaler().fit_transform(X)
    m = SVC(C=10 ** s["log10_C"], gamma=10 ** s["log10_gamma"])
    return 1.0 - _cv_score(m, X, y, seed, "accuracy")


def _wine_forest(s: dict, seed: int) -> float:
    from sklearn.datasets import load_wine
    from sklearn.ensemble import RandomForestClassifier
    X, y = load_wine(return_X_y=True)
    m = RandomForestClassifier(n_estimators=8, max_depth=s["max_depth"],
                               min_samples_leaf=s["min_samples_leaf"],
                               max_features=s["max_features"], random_state=seed % 9973)
    return 1.0 - _cv_score(m, X, y, seed, "accuracy")


def _digits_svc(s: dict, seed: int) -> float:
    from sklearn.datasets import load_digits
    from sklearn.svm import SVC
    X, y = load_digits(return_X_y=True)
    X, y = X[:500] / 16.0, y[:500]
    m = SVC(C=10 ** s["log10_C"], gamma=10 ** s["log10_gamma"])
    return 1.0 - _cv_score(m, X, y, seed, "accuracy")


# Series reaction A -> B -> C in a CSTR at steady state, first order in each step
# (Fogler, Elements of Chemical Reaction Engineering, 5th ed. 2016, §8.5, series
# reactions in a CSTR: C_B/C_A0 = tau k1 / ((1 + tau k1)(1 + tau k2))), with Arrhenius
# rate constants k_i = k_i(T_ref) exp(-E_i/R (1/T - 1/T_ref)) (Fogler §3.3).  The
# activation energies and reference rates are our own choices; the desired step has the
# lower activation energy, so there is an interior optimum in temperature.
_R = 8.314
_E1, _E2 = 60e3, 95e3
_K1, _K2, _TREF = 0.10, 0.02, 350.0     # 1/min at T_ref


def _cstr_yield(s: dict, seed: int) -> float:
    T, tau = s["temperature_K"], 10 ** s["log10_tau_min"]
    k1 = _K1 * math.exp(-_E1 / _R * (1 / T - 1 / _TREF))
    k2 = _K2 * math.exp(-_E2 / _R * (1 / T - 1 / _TREF))
    y = tau * k1 / ((1 + tau * k1) * (1 + tau * k2))
    rng = np.random.default_rng(seed)
    # Assay error: 3% relative plus 0.01 absolute; the assay reads 0 below zero and
    # saturates at 1 (a bounded, clipped measurement).
    meas = y * (1 + 0.03 * rng.standard_normal()) + 0.01 * rng.standard_normal()
    return float(min(1.0, max(0.0, meas)))


PROBLEMS: dict[str, Problem] = {p.name: p for p in [
    Problem("diabetes_svr", "support-vector regression on scikit-learn's diabetes data; "
            "3-fold CV RMSE (standardized target), split shuffled by the trial seed",
            [("log10_C", -1.0, 3.0, False), ("log10_gamma", -4.0, 0.0, False),
             ("log10_epsilon", -3.0, 0.0, False)], "cv_rmse", "minimize", _diabetes_svr,
            lower_bound=0.0),
    Problem("cancer_svc", "RBF support-vector classifier on scikit-learn's breast-cancer "
            "data; 3-fold stratified CV error rate (ceiling 0.373 = minority share)",
            [("log10_C", -2.0, 3.0, False), ("log10_gamma", -4.0, 1.0, False)],
            "cv_error", "minimize", _cancer_svc, lower_bound=0.0, upper_bound=1.0),
    Problem("wine_forest", "8-tree random forest on scikit-learn's wine data; 3-fold "
            "stratified CV error rate",
            [("max_depth", 1, 8, True), ("min_samples_leaf", 1, 30, True),
             ("max_features", 0.05, 1.0, False)], "cv_error", "minimize", _wine_forest,
            lower_bound=0.0, upper_bound=1.0),
    Problem("digits_svc", "RBF support-vector classifier on the first 500 of "
            "scikit-learn's 8x8 digits; 3-fold stratified CV error rate",
            [("log10_C", -2.0, 3.0, False), ("log10_gamma", -4.0, 1.0, False)],
            "cv_error", "minimize", _digits_svc, lower_bound=0.0, upper_bound=1.0),
    Problem("cstr_yield", "steady-state CSTR, series reaction A->B->C with Arrhenius "
            "kinetics (Fogler 2016 §8.5); measured yield of B, 3% + 0.01 assay error, "
            "clipped to [0, 1]",
            [("temperature_K", 300.0, 420.0, False), ("log10_tau_min", -1.0, 3.0, False)],
            "yield_B", "maximize", _cstr_yield, lower_bound=0.0, upper_bound=1.0),
]}
