"""Plateaus, ceilings and bounded objectives: detect them in a log and flag the models
whose predictive distributions cannot represent them.

Why it matters.  Every built-in surrogate predicts a Gaussian.  A log where many trials
sit at one value (a classifier's error rate at its ceiling when it predicts the majority
class, a yield clipped at zero by the assay, a sensor at full scale) has a point mass
that no Gaussian holds, and an objective confined to [0, 1] or to non-negative values
gets predictive mass where no measurement can fall.  On such logs the two proper scores
disagree more often (NLL punishes the narrow intervals a model needs on the plateau,
CRPS hardly does; Gneiting & Raftery 2007, §4.2 and §7 on the two scores' sensitivity),
so the report says so rather than let one score decide silently.

The thresholds are common practice, not from a source: a value held by at least 10% of
the trials (and at least 5 of them) at the highest or lowest value logged, or by 25%
anywhere (ties are common on discrete measurements), is a plateau; a bounded objective is "near" a bound
when 10% of the trials lie within 5% of the observed range of it; a model is flagged when
its held-out predictive distributions put on average more than 5% of their probability
beyond a bound the data respect.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.stats import norm

__all__ = ["objective_shape", "PLATEAU_SHARE", "OUTSIDE_MASS"]

PLATEAU_SHARE = 0.10
PLATEAU_MIN_TRIALS = 5
INNER_PLATEAU_SHARE = 0.25
NEAR_SHARE = 0.10
NEAR_WIDTH = 0.05
OUTSIDE_MASS = 0.05


def _implied_bounds(y: np.ndarray) -> tuple[float | None, float | None, str]:
    """Bounds the measurements themselves suggest: [0, 1] for a rate or fraction, [0, ∞)
    for a non-negative quantity; none otherwise."""
    if y.min() >= 0.0 and y.max() <= 1.0:
        return 0.0, 1.0, "every value lies in [0, 1] (a rate, fraction or yield)"
    if y.min() >= 0.0:
        return 0.0, None, "every value is non-negative"
    return None, None, ""


def objective_shape(y_raw, *, predictions: pd.DataFrame | None = None,
                    sign: float = 1.0, objective: str = "objective") -> dict:
    """Describe the objective's shape and flag models that cannot represent it.

    Parameters
    ----------
    y_raw : array of float
        The objective of the successful trials, in the user's units and direction.
    predictions : DataFrame, optional
        Held-out predictions with columns ``surrogate``, ``y``, ``mean``, ``std`` in
        minimization form (``Assessment.predictions``).
    sign : float
        +1 when minimizing, -1 when maximizing (minimization form = sign * raw).

    Returns
    -------
    dict with ``plateau`` (or None), ``bounds`` (or None), ``near_bounds``,
    ``model_flags`` ({surrogate: {"mass_outside_bounds", "plateau_nll",
    "other_nll", "flag"}}) and ``notes`` (plain sentences for the data section).
    """
    y = np.asarray(y_raw, dtype=float)
    y = y[np.isfinite(y)]
    out = {"plateau": None, "bounds": None, "near_bounds": [], "model_flags": {},
           "notes": []}
    if len(y) < PLATEAU_MIN_TRIALS:
        return out
    span = float(y.max() - y.min())
    tol = 1e-9 * max(span, abs(float(y.max())), 1e-300)
    values, counts = np.unique(np.round(y / tol) * tol if tol > 0 else y, return_counts=True)
    k = int(np.argmax(counts))
    share = counts[k] / len(y)
    v = float(values[k])
    where = ("the highest value logged" if np.isclose(v, y.max(), atol=tol)
             else "the lowest value logged" if np.isclose(v, y.min(), atol=tol)
             else "inside the logged range")
    # Inside the range, ties are common on discrete measurements (an error rate over a
    # few hundred rows), so a plateau there needs a larger share.
    need = PLATEAU_SHARE if where != "inside the logged range" else INNER_PLATEAU_SHARE
    if counts[k] >= PLATEAU_MIN_TRIALS and share >= need and span > 0:
        out["plateau"] = {"value": v, "trials": int(counts[k]), "share": float(share),
                          "position": where}
        out["notes"].append(
            f"plateau: {counts[k]} of {len(y)} trials ({share:.0%}) have {objective} = "
            f"{v:.6g}, {where} (a ceiling, floor or saturated measurement); a Gaussian "
            "predictive distribution cannot put a point mass there, so NLL and CRPS may "
            "disagree about the best model")
    lo, hi, why = _implied_bounds(y)
    if why:
        out["bounds"] = {"low": lo, "high": hi, "reason": why}
        width = NEAR_WIDTH * max(span, 1e-12)
        for name, b in (("low", lo), ("high", hi)):
            if b is None:
                continue
            near = float(np.mean(np.abs(y - b) <= width))
            if near >= NEAR_SHARE:
                out["near_bounds"].append({"bound": name, "value": b, "share": near})
                out["notes"].append(
                    f"bounded objective: {why}, and {near:.0%} of the trials lie within "
                    f"{width:.3g} of {b:g}; models predicting a Gaussian put probability "
                    "beyond the bound there")
    has_pred = predictions is not None and len(predictions) > 0
    if has_pred and (out["bounds"] is not None or out["plateau"] is not None):
        out["model_flags"] = _flag_models(predictions, sign, out)
        flagged = [n for n, f in out["model_flags"].items() if f["flag"]]
        if flagged:
            out["notes"].append(
                "cannot represent the bounded objective: " + ", ".join(
                    f"{n} ({out['model_flags'][n]['mass_outside_bounds']:.0%} of its "
                    "held-out predictive probability beyond the bounds)" for n in flagged))
    return out


def _flag_models(pred: pd.DataFrame, sign: float, shape: dict) -> dict:
    flags = {}
    lo = hi = None
    if shape["bounds"] is not None:
        lo, hi = shape["bounds"]["low"], shape["bounds"]["high"]
    plateau = shape["plateau"]["value"] if shape["plateau"] else None
    for name, g in pred.groupby("surrogate", sort=False):
        mean = sign * g["mean"].to_numpy(float)      # back to the user's units
        std = g["std"].to_numpy(float)
        y = sign * g["y"].to_numpy(float)
        ok = np.isfinite(mean) & np.isfinite(std) & (std > 0)
        if not ok.any():
            continue
        mean, std, y = mean[ok], std[ok], y[ok]
        outside = np.zeros(len(mean))
        if lo is not None:
            outside += norm.cdf((lo - mean) / std)
        if hi is not None:
            outside += norm.sf((hi - mean) / std)
        entry = {"mass_outside_bounds": float(np.mean(outside)) if lo is not None or
                 hi is not None else None, "plateau_nll": None, "other_nll": None}
        if plateau is not None:
            nll = -norm.logpdf(y, mean, std)
            on = np.isclose(y, plateau, rtol=1e-9, atol=1e-12)
            if on.any():
                entry["plateau_nll"] = float(np.mean(nll[on]))
            if (~on).any():
                entry["other_nll"] = float(np.mean(nll[~on]))
        entry["flag"] = bool(entry["mass_outside_bounds"] is not None
                             and entry["mass_outside_bounds"] > OUTSIDE_MASS)
        flags[str(name)] = entry
    return flags
