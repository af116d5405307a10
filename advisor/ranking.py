"""The ranking rule: which surrogate to recommend, how sure we are, and why.

The rule, in order (also in the README):

1. **Working models first.**  A model that failed or returned unusable predictions on
   any fold is ranked after every working model (fewest failed folds first), with its
   error as the reason.
2. **Guard rails.**  A working model must (a) cover: its held-out 90% interval covers
   between 80% and 97% of the held-out trials, either as it is or after the variance
   scale fitted on the other folds (the recommendation then says to scale); and (b)
   order: the Spearman correlation of its predicted means with the held-out objective,
   taken within each fold and averaged, is positive with a 95% bootstrap interval above
   zero.  Models that fail a guard rail
   are ranked after those that pass.
3. **Primary score.**  Among the models passing the guard rails, the leader is the one
   with the lowest mean held-out CRPS (a strictly proper score, Gneiting & Raftery
   2007; in the objective's units, of the version — raw or scaled — that is
   recommended).
4. **Ties.**  Every model is compared with the leader on the same held-out points by a
   paired bootstrap of the per-point CRPS difference (resampling points within folds,
   2,000 replicates, percentile 95% interval).  A model whose interval contains zero is
   *tied* with the leader.  The bootstrap also gives each model's probability of being
   best (share of replicates in which its mean CRPS is lowest).
5. **Tie-breakers.**  Within the group tied with the leader, the acquisition backtest
   decides when it has run for all of them (Foldager, Jordahn, Hansen & Andersen 2023:
   calibration tracks optimization regret across model types but not within one);
   otherwise mean CRPS keeps its order.  Cost is the last tie-breaker (equal scores),
   and a tied model that fits at least three times faster than the one ranked above it
   is named as the cheaper alternative.  Measured seconds never reorder models on their
   own: timings vary between runs and machines, and the ranking must be reproducible.
   Models not tied follow in order of mean CRPS.

The confidence words come from the leader's margin: *high* when no model is tied with
it and its probability of being best is at least 0.9; *moderate* when no model is tied
or its probability of being best is at least 0.6; *low* otherwise.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats

from .scoring import gaussian_crps, stratified_bootstrap_index

__all__ = ["rank_surrogates", "Ranking", "COVERAGE_GUARD", "N_BOOTSTRAP"]

COVERAGE_GUARD = (0.80, 0.97)
N_BOOTSTRAP = 2000


@dataclass
class Ranking:
    table: pd.DataFrame
    leader: str | None
    confidence: str
    statement: str
    reasons: dict[str, list[str]] = field(default_factory=dict)
    method: str = ""
    #: Timing-based notes ("tied and fits 5x faster"), kept apart from ``reasons`` because
    #: they vary between runs; exported under a key containing "seconds".
    cheaper_by_fit_seconds: list[str] = field(default_factory=list)


def _spearman_lower(mean, y, folds, idx) -> float:
    """Lower 2.5% bootstrap bound of the within-fold Spearman correlation of mean and y.

    Ranks are taken within each fold and the fold correlations averaged (weighted by
    fold size), so a model cannot pass by shifting its level between folds — a constant
    predictor trained on different data per fold would otherwise correlate with a
    campaign drifting toward its optimum.  A fold where the model's mean is constant
    counts as zero correlation.
    """
    sub = idx[:400]
    total = np.zeros(len(sub))
    weight = 0
    for f in np.unique(folds):
        cols = np.flatnonzero(folds == f)
        if len(cols) < 3:
            continue
        block = sub[:, cols]
        a = stats.rankdata(mean[block], axis=1)
        b = stats.rankdata(y[block], axis=1)
        a -= a.mean(axis=1, keepdims=True)
        b -= b.mean(axis=1, keepdims=True)
        denom = np.sqrt((a**2).sum(axis=1) * (b**2).sum(axis=1))
        with np.errstate(invalid="ignore", divide="ignore"):
            rho = (a * b).sum(axis=1) / denom
        total += len(cols) * np.where(np.isfinite(rho), rho, 0.0)
        weight += len(cols)
    if weight == 0:
        return -1.0
    return float(np.quantile(total / weight, 0.025))


def rank_surrogates(preds: dict[str, dict], failures: dict[str, list[str]],
                    fit_seconds: dict[str, float], *, scales: dict[str, float] | None = None,
                    scaled_coverage: dict[str, float] | None = None,
                    backtest_score: dict[str, float] | None = None,
                    seed: int = 0) -> Ranking:
    """Apply the ranking rule of this module's docstring.

    Parameters
    ----------
    preds : {name: {"y", "mean", "std", "fold"}}
        Pooled held-out predictions of each *working* model, on the same points in the
        same order.
    failures : {name: [error text per failed fold]}
        Models with at least one failed fold (not in ``preds``).
    fit_seconds : {name: mean seconds per fit}
    scales : {name: variance scale}, optional
        Cross-fitted scale factors; a model whose raw coverage misses the guard but whose
        scaled coverage (``scaled_coverage``) meets it is scored and recommended scaled.
    backtest_score : {name: score}, optional
        Lower is better; breaks ties within the group tied with the leader.
    """
    rng = np.random.default_rng(seed)
    scales = scales or {}
    scaled_coverage = scaled_coverage or {}
    backtest_score = backtest_score or {}
    names = list(preds)
    rows: dict[str, dict] = {}
    reasons: dict[str, list[str]] = {n: [] for n in list(preds) + list(failures)}

    if names:
        y = preds[names[0]]["y"]
        folds = preds[names[0]]["fold"]
        idx = stratified_bootstrap_index(folds, N_BOOTSTRAP, rng)
        crps_pts, use_scale = {}, {}
        for n in names:
            p = preds[n]
            cov_raw = float(np.mean(np.abs(p["y"] - p["mean"]) <= 1.6448536269514722 * p["std"]))
            s = float(scales.get(n, 1.0))
            cov_s = float(scaled_coverage.get(n, cov_raw))
            raw_ok = COVERAGE_GUARD[0] <= cov_raw <= COVERAGE_GUARD[1]
            scaled_ok = COVERAGE_GUARD[0] <= cov_s <= COVERAGE_GUARD[1]
            # Scale only when it is what rescues coverage (or the raw model is already
            # fine and the scale is a large correction), so advice stays minimal.
            use_scale[n] = (not raw_ok and scaled_ok) or (raw_ok and scaled_ok and abs(np.log(s)) > np.log(1.25))
            std = p["std"] * (s if use_scale[n] else 1.0)
            crps_pts[n] = gaussian_crps(p["y"], p["mean"], std)
            cover_ok = raw_ok or scaled_ok
            rho_lo = _spearman_lower(p["mean"], p["y"], p["fold"], idx)
            order_ok = rho_lo > 0
            rows[n] = {"surrogate": n, "status": "ok", "crps": float(crps_pts[n].mean()),
                       "coverage_90": cov_s if use_scale[n] else cov_raw,
                       "variance_scale": s if use_scale[n] else 1.0,
                       "guard_coverage": bool(cover_ok), "guard_order": bool(order_ok),
                       "spearman_lower": rho_lo, "fit_seconds": float(fit_seconds.get(n, np.nan))}
            if use_scale[n]:
                reasons[n].append(f"scores with its standard deviation scaled by {s:.2f} "
                                  f"(90% coverage {cov_raw:.2f} as fitted, {cov_s:.2f} scaled)")
            if not cover_ok:
                reasons[n].append(f"90% interval covers {cov_raw:.0%} of held-out trials, "
                                  f"outside {COVERAGE_GUARD[0]:.0%}-{COVERAGE_GUARD[1]:.0%} "
                                  "even after scaling")
            if not order_ok:
                reasons[n].append("does not order the held-out trials better than chance "
                                  f"(Spearman lower 95% bound {rho_lo:.2f})")

        passing = [n for n in names if rows[n]["guard_coverage"] and rows[n]["guard_order"]]
        pool = passing or names
        leader = min(pool, key=lambda n: rows[n]["crps"])
        boot_means = {n: crps_pts[n][idx].mean(axis=1) for n in names}
        stacked = np.vstack([boot_means[n] for n in names])
        winners = np.argmin(stacked, axis=0)
        for i, n in enumerate(names):
            d = boot_means[n] - boot_means[leader]
            lo, hi = np.quantile(d, [0.025, 0.975])
            rows[n].update(crps_diff=float(crps_pts[n].mean() - crps_pts[leader].mean()),
                           crps_diff_low=float(lo), crps_diff_high=float(hi),
                           p_best=float(np.mean(winners == i)),
                           tied_with_leader=bool(n == leader or lo <= 0 <= hi))
        _ = y
    else:
        leader = None

    def key(n):
        r = rows[n]
        guard_fail = not (r["guard_coverage"] and r["guard_order"])
        in_tie = r["tied_with_leader"] and not guard_fail
        if in_tie:
            tied = [m for m in rows if rows[m]["tied_with_leader"]]
            if all(backtest_score.get(m) is not None for m in tied):
                return (0, 0, (backtest_score[n], r["crps"], r["fit_seconds"]))
            return (0, 0, (0.0, r["crps"], r["fit_seconds"]))
        return (int(guard_fail), 1, (0.0, r["crps"], r["fit_seconds"]))

    ordered = sorted(rows, key=key)
    failed = sorted(failures, key=lambda n: len(failures[n]))
    for n in failed:
        rows[n] = {"surrogate": n, "status": "failed", "crps": np.nan,
                   "fit_seconds": float(fit_seconds.get(n, np.nan)),
                   "failed_folds": len(failures[n])}
        first = failures[n][0] if failures[n] else "unknown error"
        reasons[n].append(f"failed on {len(failures[n])} fold(s): {first}; ranked last")
    ordered += failed
    table = pd.DataFrame([rows[n] for n in ordered])
    table.insert(1, "rank", np.arange(1, len(table) + 1))

    top = ordered[0] if ordered and rows[ordered[0]]["status"] == "ok" else None
    confidence, statement = _confidence(top, rows, ordered, backtest_score)
    cheaper: list[str] = []
    if top is not None:
        for n in ordered:
            if rows[n]["status"] != "ok" or n == top:
                continue
            r = rows[n]
            if r.get("tied_with_leader"):
                ft, fl = r["fit_seconds"], rows[top]["fit_seconds"]
                if np.isfinite(ft) and np.isfinite(fl) and ft > 0 and fl / ft >= 3:
                    cheaper.append(f"{n} is tied with {top} and fits {fl / ft:.0f}x faster "
                                   "on this machine: a cheaper alternative")
                reasons[n].insert(0, f"tied with {leader} on CRPS (difference "
                                     f"{r['crps_diff']:+.4g}, 95% CI {r['crps_diff_low']:+.4g} "
                                     f"to {r['crps_diff_high']:+.4g})")
            else:
                reasons[n].insert(0, f"CRPS {r['crps_diff']:+.4g} worse than {leader} "
                                     f"(95% CI {r['crps_diff_low']:+.4g} to "
                                     f"{r['crps_diff_high']:+.4g})")
        reasons[top].insert(0, statement)
    return Ranking(table=table, leader=top, confidence=confidence, statement=statement,
                   reasons=reasons, method=__doc__.split("The confidence")[0].strip(),
                   cheaper_by_fit_seconds=cheaper)


def _confidence(top, rows, ordered, backtest_score):
    if top is None:
        return "none", "No surrogate produced usable predictions on every fold."
    r = rows[top]
    ties = [n for n in ordered if n != top and rows[n].get("status") == "ok"
            and rows[n].get("tied_with_leader")
            and rows[n]["guard_coverage"] and rows[n]["guard_order"]]
    pb = r["p_best"]
    if not ties and pb >= 0.9:
        level = "high"
    elif not ties or pb >= 0.6:
        level = "moderate"
    else:
        level = "low"
    others = [n for n in ordered if n != top and rows[n].get("status") == "ok"]
    if not r["guard_coverage"] or not r["guard_order"]:
        level = "low"
        text = (f"{top} scores best, but no model passes the guard rails on coverage and "
                "ordering; treat this as weak evidence.")
    elif ties:
        how = ("the backtest" if top in backtest_score else "mean CRPS")
        text = (f"{top} is statistically tied with {', '.join(ties)} on held-out CRPS; "
                f"{how} breaks the tie. Probability of being best {pb:.2f}.")
    elif others:
        ru = others[0]
        text = (f"{top} has the lowest held-out CRPS; its lead over {ru} "
                f"({rows[ru]['crps_diff']:.4g}, 95% CI {rows[ru]['crps_diff_low']:.4g} to "
                f"{rows[ru]['crps_diff_high']:.4g}) is unlikely to be noise. "
                f"Probability of being best {pb:.2f}.")
    else:
        text = f"{top} is the only working model."
    return level, text
