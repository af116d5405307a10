"""The orchestrator: build the task grid, run it, rank, and return an :class:`Assessment`.

Data flow::

    TrialTable ──encode per model──► (surrogate × fold) tasks ──Executor──► held-out
    predictions ──► scores, intervals, recalibration ──► ranking ──► backtest of the
    leading models' acquisition settings ──► recommendation ──► next-campaign plan

Each task fits one surrogate on one fold's training rows and predicts its test rows.  A
task that raises, or returns unusable predictions, is recorded with its error and the
model is ranked last; it never stops the run.  Every task's seed comes from the run
seed and the task's identity (:func:`advisor.execution.task_seed`), so serial, local
parallel and cluster runs give the same numbers.
"""

from __future__ import annotations

import datetime as _dt
import inspect
import platform
import sys
import time
import traceback
from dataclasses import dataclass, field
from typing import Callable, Sequence

import numpy as np
import pandas as pd

from . import __version__
from .errors import UsageError
from .execution import Executor, task_seed
from .logs import TrialTable
from .ranking import rank_surrogates
from .recalibration import cross_fitted_recalibration
from .scoring import (METRIC_KEYS, bootstrap_intervals, score_predictions,
                      stratified_bootstrap_index)
from .surrogates import check_predictions, describe_surrogate, make_surrogate, surrogate_names
from .validation import choose_scheme

__all__ = ["assess", "Assessment", "DEFAULT_ACQUISITION"]

#: Used until the backtest has chosen: EI with a small xi is the most common default in
#: practice (Lizotte 2008 found xi = 0.01 a robust choice).
DEFAULT_ACQUISITION = {"name": "ei", "params": {"xi": 0.01}}


@dataclass
class Assessment:
    """Everything an assessment found; the report and the JSON read only this."""

    trials: TrialTable
    seed: int
    quick: bool
    surrogates: list[str]
    validation: dict
    predictions: pd.DataFrame
    fold_metrics: pd.DataFrame
    metrics: dict
    intervals: dict
    failures: dict
    recalibration: dict
    ranking: pd.DataFrame
    recommendation: dict
    reasons: dict
    noise: dict
    model_info: dict
    backtest: dict | None = None
    planning: dict | None = None
    proposals: pd.DataFrame | None = None
    timing: dict = field(default_factory=dict)
    versions: dict = field(default_factory=dict)
    command: str | None = None
    created: str = ""
    ranking_rule: str = ""

    def to_dict(self) -> dict:
        from .report.export import assessment_to_dict
        return assessment_to_dict(self)


def _package_versions() -> dict:
    out = {"advisor": __version__, "python": platform.python_version()}
    for mod in ("numpy", "scipy", "sklearn", "pandas", "torch", "joblib"):
        m = sys.modules.get(mod)
        if m is None:
            try:
                m = __import__(mod)
            except ImportError:
                continue
        out["scikit-learn" if mod == "sklearn" else mod] = getattr(m, "__version__", "?")
    return out


def _fit_predict_task(name: str, fold: int, X, y, groups, train, test, seed: int,
                      quick: bool, options: dict) -> dict:
    """Fit one surrogate on one fold; top-level so that worker processes can run it."""
    out = {"surrogate": name, "fold": fold, "test": np.asarray(test), "error": None,
           "fit_seconds": np.nan, "predict_seconds": np.nan, "noise_std": None, "info": {}}
    try:
        model = make_surrogate(name, seed=seed, quick=quick, **options)
        grouped = bool(getattr(model, "uses_groups", False))
        t0 = time.perf_counter()
        if grouped:
            model.fit(X[train], y[train], groups=groups[train])
        else:
            model.fit(X[train], y[train])
        t1 = time.perf_counter()
        pred = (model.predict(X[test], groups=groups[test]) if grouped
                else model.predict(X[test]))
        t2 = time.perf_counter()
        mean, std = check_predictions(pred[0], pred[1], len(test))
        noise = getattr(model, "noise_std_", None)
        out.update(mean=mean, std=std, fit_seconds=t1 - t0, predict_seconds=t2 - t1,
                   noise_std=None if noise is None else float(noise),
                   info=dict(getattr(model, "info_", {}) or {}))
    except Exception as exc:  # one model failing on one fold must not sink the run
        out["error"] = f"{type(exc).__name__}: {exc}".splitlines()[0][:300]
        out["traceback"] = traceback.format_exc(limit=6)
    return out


def _encoding_of(name: str) -> str:
    try:
        model = make_surrogate(name, seed=0, quick=True)
    except UsageError:
        raise
    except Exception:
        return "onehot"
    enc = getattr(model, "input_encoding", "onehot")
    return enc if enc in ("onehot", "ordinal") else "onehot"


def assess(trials: TrialTable, seed: int = 0, quick: bool = False,
           surrogates: Sequence[str] | None = None, validation: str = "auto",
           jobs: int = 1, scheduler: str | None = None,
           acquisitions=None, budget: int | None = None, batch: int = 1,
           propose: int = 0, max_fit_seconds: float | None = None,
           backtest: bool = True, plan: bool = True,
           progress: Callable[[int, int, str], None] | None = None,
           command: str | None = None) -> Assessment:
    """Cross-validate every candidate surrogate on ``trials`` and recommend one.

    Parameters
    ----------
    trials : TrialTable
        From :func:`advisor.load_trials`.
    seed : int
        Run seed; every random choice derives from it.
    quick : bool
        Quick budget: fewer restarts, epochs, bootstrap replicates and backtest steps.
    surrogates : sequence of str, optional
        Names from :func:`advisor.surrogate_names` and/or ``module:Class`` specs;
        default all built-in candidates.
    validation : {"auto", "kfold", "forward", "campaign"}
    jobs, scheduler :
        Local worker processes, or a Dask scheduler address (see :class:`Executor`).
    acquisitions : list of settings or str, optional
        Acquisition settings to backtest (default grid when None).
    budget, batch : int
        Next campaign's trial budget (default from the logs) and batch size.
    propose : int
        Number of first-batch settings to propose (0 = none).
    max_fit_seconds : float, optional
        Flag surrogates whose projected time per iteration exceeds this.
    backtest, plan : bool
        Run the acquisition backtest and the next-campaign plan (when available).

    Returns
    -------
    Assessment
    """
    t_start = time.perf_counter()
    names = list(surrogates) if surrogates else surrogate_names()
    if len(set(names)) != len(names):
        raise UsageError("a surrogate is named twice", fix="name each surrogate once")
    for n in names:
        if ":" not in n and n not in surrogate_names():
            raise UsageError(f"unknown surrogate '{n}'; known: " + ", ".join(surrogate_names()),
                             fix="pick listed names or give module:Class")
    encodings = {n: _encoding_of(n) for n in names}
    executor = Executor(jobs=jobs, scheduler=scheduler, progress=progress)

    y = trials.y
    groups = trials.groups
    scheme = choose_scheme(validation, order=trials.order_values if trials.order else None,
                           groups=groups if trials.campaign else None,
                           n_rows=trials.n_used, seed=seed, quick=quick)
    X_enc = {enc: trials.features(enc) for enc in set(encodings.values())}
    folds = list(scheme.splitter.split(X_enc[next(iter(X_enc))], y, groups))
    tasks = []
    for n in names:
        for f, (train, test) in enumerate(folds):
            tasks.append((n, f, X_enc[encodings[n]], y, groups, train, test,
                          task_seed(seed, "cv", n, f), quick, {}))
    t_cv = time.perf_counter()
    results = executor.map(_fit_predict_task, tasks, label="cross-validation")
    t_cv = time.perf_counter() - t_cv

    tested = np.unique(np.concatenate([t for _, t in folds]))
    fold_of = np.full(len(y), -1)
    for f, (_, test) in enumerate(folds):
        fold_of[test] = f
    preds, failures, fit_s, pred_s, noise, info = {}, {}, {}, {}, {}, {}
    pred_rows, fold_rows = [], []
    for n in names:
        res = [r for r in results if r["surrogate"] == n]
        errs = [{"fold": r["fold"], "error": r["error"]} for r in res if r["error"]]
        fit_s[n] = float(np.nanmean([r["fit_seconds"] for r in res])) if any(
            np.isfinite(r["fit_seconds"]) for r in res) else float("nan")
        pred_s[n] = float(np.nanmean([r["predict_seconds"] for r in res])) if any(
            np.isfinite(r["predict_seconds"]) for r in res) else float("nan")
        nz = [r["noise_std"] for r in res if r["noise_std"] is not None]
        noise[n] = float(np.mean(nz)) if nz else None
        info[n] = next((r["info"] for r in res if r["info"]), {})
        if errs:
            failures[n] = errs
            continue
        mean = np.full(len(y), np.nan)
        std = np.full(len(y), np.nan)
        for r in res:
            mean[r["test"]] = r["mean"]
            std[r["test"]] = r["std"]
            for i, row in enumerate(r["test"]):
                pred_rows.append((n, r["fold"], int(row), y[row], r["mean"][i], r["std"][i]))
            if len(r["test"]) >= 3:
                fold_rows.append({"surrogate": n, "fold": r["fold"], "n": len(r["test"]),
                                  **score_predictions(y[r["test"]], r["mean"], r["std"])})
        preds[n] = {"y": y[tested], "mean": mean[tested], "std": std[tested],
                    "fold": fold_of[tested]}

    rng = np.random.default_rng(task_seed(seed, "intervals"))
    boot_idx = stratified_bootstrap_index(fold_of[tested], 200 if quick else 500, rng)
    metrics, intervals, recal = {}, {}, {}
    for n, p in preds.items():
        metrics[n] = score_predictions(p["y"], p["mean"], p["std"])
        intervals[n] = bootstrap_intervals(p["y"], p["mean"], p["std"], boot_idx)
        recal[n] = cross_fitted_recalibration(p["y"], p["mean"], p["std"], p["fold"])
    for n in names:
        metrics.setdefault(n, {k: float("nan") for k in METRIC_KEYS})
        metrics[n]["fit_seconds"] = fit_s[n]
        metrics[n]["predict_seconds"] = pred_s[n]

    rank_kwargs = dict(scales={n: recal[n]["scale"] for n in recal},
                       scaled_coverage={n: recal[n]["after_scale"]["coverage_90"] for n in recal},
                       seed=task_seed(seed, "ranking"))
    fail_text = {n: [e["error"] for e in v] for n, v in failures.items()}
    ranking = rank_surrogates(preds, fail_text, fit_s, **rank_kwargs)

    backtest_out = None
    # (the acquisition backtest and the next-campaign plan hook in here)

    rec = _recommendation(ranking, backtest_out)
    table = ranking.table
    noise_out = {"replicates": _replicate_noise(trials), "fitted": noise}
    a = Assessment(
        trials=trials, seed=seed, quick=quick, surrogates=names,
        validation={"scheme": scheme.name, "description": scheme.splitter.describe(),
                    "reason": scheme.reason, "n_folds": len(folds),
                    "tested_trials": int(len(tested)), "trials": int(len(y))},
        predictions=pd.DataFrame(pred_rows, columns=["surrogate", "fold", "row", "y",
                                                     "mean", "std"]),
        fold_metrics=pd.DataFrame(fold_rows), metrics=metrics, intervals=intervals,
        failures=failures, recalibration=recal, ranking=table, recommendation=rec,
        reasons=ranking.reasons, noise=noise_out, model_info=info, backtest=backtest_out,
        versions=_package_versions(), command=command,
        created=_dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        ranking_rule=ranking.method)
    a.timing = {"cross_validation_seconds": t_cv,
                "total_seconds": time.perf_counter() - t_start}
    return a


def _recommendation(ranking, backtest_out) -> dict:
    table = ranking.table
    leader = ranking.leader
    if leader is None:
        return {"surrogate": None, "acquisition": dict(DEFAULT_ACQUISITION),
                "acquisition_source": "default", "variance_scale": 1.0,
                "confidence": "none", "statement": ranking.statement,
                "runner_up": None, "reasons": [ranking.statement]}
    row = table.set_index("surrogate").loc[leader]
    ok = table[table["status"] == "ok"]
    runner = ok["surrogate"].iloc[1] if len(ok) > 1 else None
    acq = dict(DEFAULT_ACQUISITION)
    source = "default"
    reasons = list(ranking.reasons.get(leader, []))
    if backtest_out and backtest_out.get("choice"):
        acq = backtest_out["choice"]["acquisition"]
        source = "backtest"
        reasons += backtest_out["choice"].get("reasons", [])
    else:
        reasons.append("acquisition setting is a default (expected improvement, xi = 0.01): "
                       "the acquisition backtest did not run")
    return {"surrogate": leader, "acquisition": acq, "acquisition_source": source,
            "variance_scale": float(row["variance_scale"]),
            "confidence": ranking.confidence, "statement": ranking.statement,
            "runner_up": runner, "reasons": reasons}


def _replicate_noise(trials: TrialTable):
    fn = getattr(trials, "replicate_noise", None)
    if fn is None:
        return None
    try:
        return fn()
    except Exception:  # a summary for the report; never worth failing the run over
        return None
