"""Best-so-far curves, normalized regret and their summaries (see ``_campaigns``)."""

from __future__ import annotations

import math

import numpy as np

def _regret_curve(y_seq: np.ndarray, lo: float, hi: float) -> np.ndarray:
    best = np.minimum.accumulate(np.asarray(y_seq, dtype=float))
    span = hi - lo
    return (best - lo) / span if span > 0 else np.zeros_like(best)


def _best_k_threshold(y: np.ndarray) -> float:
    """The ceil(5 %)-th lowest value: reaching it means finding the pool's best 5 %."""
    k = max(1, math.ceil(0.05 * len(y)))
    return float(np.sort(y)[k - 1])


def _trials_to(y_seq: np.ndarray, threshold: float) -> tuple[int, bool]:
    hit = np.flatnonzero(np.minimum.accumulate(y_seq) <= threshold)
    return (int(hit[0]) + 1, False) if hit.size else (len(y_seq) + 1, True)


def _stats(values) -> dict:
    v = np.asarray(values, dtype=float)
    if v.size == 0:
        return {"median": None, "q25": None, "q75": None, "mean": None, "sd": None, "n": 0}
    q25, med, q75 = np.percentile(v, [25, 50, 75])
    return {"median": float(med), "q25": float(q25), "q75": float(q75),
            "mean": float(v.mean()), "sd": float(v.std(ddof=1)) if v.size > 1 else 0.0,
            "n": int(v.size)}


def _band(curves: list[np.ndarray]) -> dict:
    """Pointwise median and quartiles; shorter curves are held at their last value."""
    if not curves:
        return {"median": [], "q25": [], "q75": []}
    T = max(len(c) for c in curves)
    M = np.array([np.concatenate([c, np.full(T - len(c), c[-1])]) for c in curves])
    q25, med, q75 = np.percentile(M, [25, 50, 75], axis=0)
    return {"median": [float(x) for x in med], "q25": [float(x) for x in q25],
            "q75": [float(x) for x in q75]}


def _summarize(runs: list[dict]) -> dict:
    """runs: dicts with 'curve' (ndarray), 'auc', 'ttb', 'censored'."""
    ttb = _stats([r["ttb"] for r in runs])
    ttb["censored"] = int(sum(r["censored"] for r in runs))
    return {"runs_count": len(runs), "auc": _stats([r["auc"] for r in runs]),
            "trials_to_best5": ttb, "curve": _band([r["curve"] for r in runs])}


def _score_sequence(y_seq, unit) -> dict:
    curve = _regret_curve(y_seq, unit["lo"], unit["hi"])
    ttb, cens = _trials_to(np.asarray(y_seq, float), unit["threshold"])
    return {"curve": curve, "auc": float(curve.mean()), "ttb": ttb, "censored": cens}
