"""Cross-validation: the (surrogate × fold) task grid, its worker task, and the pooling
and scoring of each model's held-out predictions."""

from __future__ import annotations

import time
import traceback

import numpy as np

from ..errors import UsageError
from ..scoring import score_predictions
from ..execution import task_seed
from ..surrogates import _builtin_encoding, check_predictions, make_surrogate


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
        if not (isinstance(pred, (tuple, list)) and len(pred) == 2):
            raise ValueError(f"predict returned {type(pred).__name__}, not the pair "
                             "(mean, std): the model gives no predictive uncertainty")
        mean, std = check_predictions(pred[0], pred[1], len(test))
        if hasattr(model, "predict_dist") and not grouped:
            # a non-Gaussian predictive distribution: per-point scores at variance scale 1
            dist = model.predict_dist(X[test])
            out.update(nll_pt=np.asarray(dist.nll(y[test]), dtype=float),
                       crps_pt=np.asarray(dist.crps(y[test]), dtype=float),
                       pit=np.asarray(dist.cdf(y[test]), dtype=float))
        noise = getattr(model, "noise_std_", None)
        out.update(mean=mean, std=std, fit_seconds=t1 - t0, predict_seconds=t2 - t1,
                   noise_std=None if noise is None else float(noise),
                   info=dict(getattr(model, "info_", {}) or {}))
    except Exception as exc:  # one model failing on one fold must not sink the run
        out["error"] = f"{type(exc).__name__}: {exc}".splitlines()[0][:300]
        out["traceback"] = traceback.format_exc(limit=6)
    return out



def _encoding_of(name: str) -> str:
    known = _builtin_encoding(name)
    if known is not None:
        return known
    try:
        model = make_surrogate(name, seed=0, quick=True)
    except UsageError:
        raise
    except Exception:
        return "onehot"
    enc = getattr(model, "input_encoding", "onehot")
    return enc if enc in ("onehot", "ordinal") else "onehot"



def _other_schemes(primary: str, trials) -> list[str]:
    out = []
    if primary != "campaign" and trials.campaign and trials.n_campaigns >= 3:
        out.append("campaign")
    if primary != "forward" and trials.order:
        out.append("forward")
    if primary != "kfold":
        out.append("kfold")
    return out


def _all_folds(tasks) -> list[dict]:
    return [_fit_predict_task(*t) for t in tasks]


def _isolated_folds(tasks, time_limit: float) -> list[dict]:
    """One user model's folds in a killable process; on a time-out or a crash, every
    fold is recorded as failed with the reason."""
    from ..execution import IsolatedFailure, run_isolated

    try:
        return run_isolated(_all_folds, (tasks,), time_limit)
    except IsolatedFailure as exc:
        return [{"surrogate": t[0], "fold": t[1], "test": np.asarray(t[6]),
                 "error": f"user model stopped: {exc}",
                 "fit_seconds": np.nan, "predict_seconds": np.nan, "noise_std": None,
                 "info": {}} for t in tasks]


def _cross_validate(executor, names, encodings, X_enc, y, groups, folds, seed, quick,
                    tag: str | None = None, time_limit: float | None = None) -> dict:
    """Run the (surrogate × fold) grid on ``folds`` and pool each model's predictions."""
    tasks = []
    for n in names:
        for f, (train, test) in enumerate(folds):
            ident = ("cv", n, f) if tag is None else ("cv", tag, n, f)
            tasks.append((n, f, X_enc[encodings[n]], y, groups, train, test,
                          task_seed(seed, *ident), quick, {}))
    label = "cross-validation" + ("" if tag is None else f" ({tag})")
    if time_limit is None:
        results = executor.map(_fit_predict_task, tasks, label=label)
    else:
        # A user's model runs all its folds in a process of its own, killed after the
        # time limit, so a hang or a crash costs at most that (execution.run_isolated).
        own = [t for t in tasks if ":" not in t[0]]
        users = [n for n in names if ":" in n]
        grouped = [([t for t in tasks if t[0] == n], time_limit) for n in users]
        got = executor.map(_fit_predict_task, own, label=label) if own else []
        got += [r for rs in executor.map(_isolated_folds, grouped, label=label + ", user models")
                for r in rs] if grouped else []
        by_key = {(r["surrogate"], r["fold"]): r for r in got}
        results = [by_key[(t[0], t[1])] for t in tasks]
    tested = np.unique(np.concatenate([t for _, t in folds]))
    fold_of = np.full(len(y), -1)
    for f, (_, test) in enumerate(folds):
        fold_of[test] = f
    preds, failures, fit_s, pred_s, noise, info = {}, {}, {}, {}, {}, {}
    pred_rows, fold_rows = [], []
    for n in names:
        res = [r for r in results if r["surrogate"] == n]
        errs = [{"fold": r["fold"], "error": r["error"]} for r in res if r["error"]]
        fit_s[n] = _nanmean([r["fit_seconds"] for r in res])
        pred_s[n] = _nanmean([r["predict_seconds"] for r in res])
        nz = [r["noise_std"] for r in res if r["noise_std"] is not None]
        noise[n] = float(np.mean(nz)) if nz else None
        info[n] = _merge_info([r for r in res if r["info"]])
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
        if all("nll_pt" in r for r in res):
            for key in ("nll_pt", "crps_pt", "pit"):
                arr = np.full(len(y), np.nan)
                for r in res:
                    arr[r["test"]] = r[key]
                preds[n][key] = arr[tested]
    return {"preds": preds, "failures": failures, "fit_s": fit_s, "pred_s": pred_s,
            "noise": noise, "info": info, "tested": tested, "fold_of": fold_of,
            "pred_rows": pred_rows, "fold_rows": fold_rows}


def _ranking_blocks(trials, tested, folds) -> np.ndarray:
    """Resampling blocks of the held-out points for the ranking's ties.

    Campaign × fold cells when the log names campaigns (errors are correlated within a
    campaign and within a fold).  With one campaign, each fold is cut into four runs of
    consecutive held-out trials (by row), so the sign-flip test has 4 × folds blocks:
    neighbouring trials stay together, but the test can still reach 5% (with four
    blocks its smallest p-value would be 2/2^4).  Our choice; stated in the README.
    """
    folds = np.asarray(folds)
    if trials.campaign and trials.n_campaigns >= 2:
        camp = np.unique(np.asarray(trials.groups)[tested].astype(str), return_inverse=True)[1]
        return camp * (int(folds.max()) + 1) + folds
    out = np.zeros(len(folds), dtype=int)
    for f in np.unique(folds):
        rows = np.flatnonzero(folds == f)
        out[rows] = f * 4 + (np.arange(len(rows)) * 4) // max(len(rows), 1)
    return out


def _score_pooled(p: dict, folds=None) -> dict:
    """Scores of pooled predictions; for a non-Gaussian model (``nll_pt`` present) the
    NLL (Jacobian included), CRPS (by quadrature) and central-interval coverage (from
    the PIT: ``|F(y) - 1/2| <= level/2``) come from its own distribution, the rest from
    its mean and sd."""
    out = score_predictions(p["y"], p["mean"], p["std"], folds=folds)
    if "nll_pt" in p:
        out["nll"] = float(np.mean(p["nll_pt"]))
        out["crps"] = float(np.mean(p["crps_pt"]))
        for key in [k for k in out if k.startswith("coverage_")]:
            level = int(key.split("_")[1]) / 100.0
            out[key] = float(np.mean(np.abs(p["pit"] - 0.5) <= level / 2))
    return out


def _nanmean(values) -> float:
    arr = np.asarray(values, dtype=float)
    return float(np.nanmean(arr)) if np.isfinite(arr).any() else float("nan")


def _merge_info(res: list[dict]) -> dict:
    """A model's facts for the report: those of its largest training fold, with the
    approximation or mode listed over all folds when they differ (the exact GP may give
    way to its approximation on the later, larger folds)."""
    if not res:
        return {}
    biggest = max(res, key=lambda r: r["info"].get("n_train", 0) or 0)
    out = dict(biggest["info"])
    for key in ("approximation", "mode"):
        seen = list(dict.fromkeys(str(r["info"][key]) for r in res if key in r["info"]))
        if len(seen) > 1:
            out[key] = " / ".join(seen) + " (by fold)"
    # a sampler's convergence diagnostic counts over all folds, not the largest alone
    flags = [bool(r["info"]["converged"]) for r in res if "converged" in r["info"]]
    if flags:
        out["converged_folds"] = f"{sum(flags)} of {len(flags)}"
        if not all(flags):
            # the fold count's warning, unless the largest fold did not converge and
            # said why itself (e.g. the BNN's split-R-hat)
            if out.get("converged", True) or not out.get("warning"):
                out["warning"] = (f"sampler not converged on {len(flags) - sum(flags)} "
                                  f"of {len(flags)} folds; treat the uncertainty with care")
            out["converged"] = False
    return out
