"""JSON and CSV outputs, written atomically.

Every output is written to a temporary file in the destination folder and renamed into
place (``os.replace`` is atomic on one file system), so an interrupted run never leaves
a half-written file that looks new.
"""

from __future__ import annotations

import json
import math
import os
import tempfile
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import pandas as pd

from ..objective_shape import objective_shape
from ..scoring import METRIC_KEYS
from ..surrogates import describe_surrogate

__all__ = ["assessment_to_dict", "write_json", "write_scores_csv", "atomic_path",
           "plain", "SCHEMA_VERSION"]

SCHEMA_VERSION = 1


def plain(obj):
    """Convert numpy/pandas scalars and containers to JSON-ready Python (NaN → None)."""
    if isinstance(obj, dict):
        return {str(k): plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [plain(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [plain(v) for v in obj.tolist()]
    if isinstance(obj, (np.bool_, bool)):
        return bool(obj)
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, (np.floating, float)):
        f = float(obj)
        return None if not math.isfinite(f) else f
    if obj is pd.NA or obj is None:
        return None
    return obj


def assessment_to_dict(a) -> dict:
    """The JSON payload (documented in the README; keys are a stable contract)."""
    t = a.trials
    ranking = []
    for _, row in a.ranking.iterrows():
        n = row["surrogate"]
        entry = {
            "surrogate": n, "rank": int(row["rank"]), "status": row["status"],
            "description": describe_surrogate(n),
            "metrics": {k: a.metrics.get(n, {}).get(k) for k in
                        (*METRIC_KEYS, "fit_seconds", "predict_seconds")},
            "intervals": a.intervals.get(n, {}),
            "reasons": a.reasons.get(n, []),
            "noise_std": a.noise["fitted"].get(n),
            "info": a.model_info.get(n, {}),
        }
        if row["status"] == "ok":
            entry["comparison"] = {k: row[k] for k in ("crps_diff", "crps_diff_low",
                                                       "crps_diff_high", "p_best",
                                                       "tied_with_leader")}
            # Additive (issue 13): the model confidence set that decided the tie.
            entry["comparison"].update(
                in_mcs=bool(row.get("in_mcs", row["tied_with_leader"])),
                mcs_pvalue=_num(row.get("mcs_pvalue")), mcs_level=0.05)
            entry["metrics_fold_spread"] = {
                k: a.metrics.get(n, {}).get(k) for m in ("spearman", "kendall",
                                                         "top_quarter_spearman",
                                                         "top_hit_rate")
                for k in (f"{m}_fold_sd", f"{m}_folds")}
            entry["guards"] = {"coverage": row["guard_coverage"], "order": row["guard_order"],
                               "coverage_wide": bool(row.get("coverage_wide", False))}
            entry["variance_scale"] = row["variance_scale"]
            rc = a.recalibration.get(n)
            if rc:
                entry["recalibration"] = {k: rc[k] for k in
                                          ("scale", "before", "after_scale", "after_isotonic")}
                entry["recalibration"]["fitted_on"] = rc.get("fitted_on", "other folds")
        else:
            entry["failures"] = a.failures.get(n, [])
        ranking.append(entry)
    out = {
        "schema_version": SCHEMA_VERSION,
        "ranking": ranking,
        "recommendation": a.recommendation,
        "input": {
            "path": t.source, "sha256": t.sha256, "rows_read": t.rows_read,
            "rows_used": t.n_used, "rows_failed": len(t.failures),
            "parameters": t.params, "objective": t.objective, "direction": t.direction,
            "campaign": t.campaign, "order": t.order, "status": t.status,
            # fitted sd of the per-campaign offset (campaign_gp, largest training fold);
            # None when that model did not run
            "between_campaign_sd": a.model_info.get("campaign_gp", {}).get(
                "between_campaign_sd"),
        },
        "space": t.space.to_dict(),
        "notes": list(t.notes) + list(getattr(t.space, "notes", ())),
        "campaigns": t.campaign_summary(),
        "failed_trials": t.failures,
        "noise": a.noise,
        "validation": a.validation,
        "ranking_rule": a.ranking_rule,
        "backtest": a.backtest,
        "planning": a.planning,
        "feasibility": (None if getattr(a, "feasibility", None) is None else
                        {k: v for k, v in a.feasibility.items() if not k.startswith("_")}),
        "seed": a.seed,
        "quick": a.quick,
        "command": a.command,
        "versions": a.versions,
        "created": a.created,
        "timing": a.timing,
    }
    # Plateaus and bounded objectives: noted in the data section, models flagged.
    shape = objective_shape(t.y_raw, predictions=a.predictions, sign=t.sign,
                            objective=t.objective)
    out["notes"] = out["notes"] + shape["notes"]
    out["objective_shape"] = shape
    return plain(out)


@contextmanager
def atomic_path(dest: Path):
    """Yield a temporary path beside ``dest``; rename it onto ``dest`` on success."""
    dest = Path(dest)
    fd, tmp = tempfile.mkstemp(prefix=f".{dest.name}.", suffix=".tmp", dir=dest.parent)
    try:
        # mkstemp makes the file private (0600) and a rename keeps the mode: give it the
        # mode any new file gets under the user's umask, so colleagues can read it.
        mask = os.umask(0)
        os.umask(mask)
        os.fchmod(fd, 0o666 & ~mask)
    finally:
        os.close(fd)
    try:
        yield Path(tmp)
        os.replace(tmp, dest)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise


def write_json(payload: dict, dest: Path) -> Path:
    with atomic_path(dest) as tmp:
        tmp.write_text(json.dumps(payload, indent=2, allow_nan=False) + "\n", encoding="utf-8")
    return Path(dest)


def write_scores_csv(a, dest: Path) -> Path:
    """One row per surrogate: rank, status and every score with its interval."""
    rows = []
    for _, r in a.ranking.iterrows():
        n = r["surrogate"]
        row = {"rank": int(r["rank"]), "surrogate": n, "status": r["status"]}
        for k in (*METRIC_KEYS, "fit_seconds", "predict_seconds"):
            row[k] = a.metrics.get(n, {}).get(k)
            iv = a.intervals.get(n, {}).get(k)
            if iv:
                row[f"{k}_low"], row[f"{k}_high"] = iv
        row["variance_scale"] = r.get("variance_scale")
        row["p_best"] = r.get("p_best")
        row["tied_with_leader"] = r.get("tied_with_leader")
        rows.append(row)
    with atomic_path(dest) as tmp:
        pd.DataFrame(rows).to_csv(tmp, index=False)
    return Path(dest)


def _num(v):
    """A float for JSON, None for missing/NaN."""
    try:
        v = float(v)
    except (TypeError, ValueError):
        return None
    return v if v == v else None
