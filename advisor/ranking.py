"""The ranking rule: which surrogate to recommend, how sure we are, and why.

The rule, in order (also in the README):

1. **Working models first.**  A model that failed or returned unusable predictions on
   any fold is ranked after every working model (fewest failed folds first), with its
   error as the reason.
2. **Guard rails.**  A working model must (a) cover: its held-out 90% interval covers
   between 80% and 97% of the held-out trials, either as it is or after the variance
   scale fitted on the other folds (the recommendation then says to scale); a model
   that covers more than 97% with no scale bringing it inside (a non-Gaussian
   predictive gets none) is only too wide, which its CRPS already charges for: it is
   noted (``coverage_wide``) and passes, only too narrow fails; and (b)
   order: the Spearman correlation of its predicted means with the held-out objective,
   taken within each fold and averaged, is positive with a 95% bootstrap interval above
   zero.  Models that fail a guard rail
   are ranked after those that pass.
3. **Primary score.**  Among the models passing the guard rails, the leader is the one
   with the lowest mean held-out CRPS (a strictly proper score, Gneiting & Raftery
   2007; in the objective's units, of the version — raw or scaled — that is
   recommended).
4. **Ties.**  Held-out errors are correlated within a campaign and within a fold, so
   the resampling unit is the block (campaign × fold cell; the fold when campaigns are
   not known): a rescaled block bootstrap (Rao & Wu 1988), stratified by fold when
   every fold has at least two blocks, 2,000 replicates, the same draws for every
   model.  The models tied with the leader are the other members of the 95% *model
   confidence set* (Hansen, Lunde & Nason 2011, the T_max elimination rule of their
   §3.1.2): starting from all models passing the guard rails, the one whose mean CRPS
   lies furthest above the set's average (in bootstrap standard errors) is removed
   while the bootstrap p-value of that largest deviation is below 5%.  A model's MCS
   p-value is the largest p-value met up to its removal; it is in the set (tied) when
   that p-value is at least 0.05.  The set contains the best model with probability at
   least 95% whatever the number of models, so the leader was chosen on the same data
   without inflating the claim.  Each model's probability of being best is the share of
   the same replicates in which its mean CRPS is the lowest (the leader re-selected in
   every replicate).
5. **Tie-breakers.**  Within the group tied with the leader, the acquisition backtest
   decides only with evidence that has power: a tied model goes first when the paired
   test over the same simulated campaigns (the default setting, EI xi = 0.01, on each
   model; runs paired by stand-in and start; one-sided Wilcoxon signed-rank, Holm over
   the candidates, level 0.05; :func:`advisor.backtest.paired_surrogate_test`) says it
   optimizes better than the leader (Foldager, Jordahn, Hansen & Andersen 2023:
   calibration tracks optimization regret across model types but not within one).
   Otherwise the tie keeps the order of mean CRPS (the point estimate still favours
   the leader), and models with equal CRPS go by :data:`SIMPLICITY_ORDER` (the simpler,
   more robust model first).  A backtest score without a significant paired test never
   reorders models: with 8 paired runs it picks between equal models at random.  Cost
   is the last tie-breaker, and a tied model that fits at least three times faster than
   the one ranked above it is named as the cheaper alternative.  Measured seconds never
   reorder models on their own: timings vary between runs and machines, and the
   ranking must be reproducible.  Models not tied follow in order of mean CRPS.

The confidence words come from the largest MCS p-value among the models other than the
recommended one (how plausible it still is that another model is as good): *high* when
it is below 0.05 (the 95% set holds the recommended model alone), *moderate* when below
0.20, *low* otherwise, and *low* whenever the recommended model fails a guard rail.
Measured false-claim rates (equal models, 96 held-out points in 4 campaigns x 4 folds,
see ``tests/test_ranking.py``) are in the README.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats

from .scoring import (block_bootstrap_means, has_point_scores, point_scores,
                      stratified_bootstrap_index)

__all__ = ["rank_surrogates", "Ranking", "COVERAGE_GUARD", "N_BOOTSTRAP", "MCS_LEVEL",
           "model_confidence_set", "CONFIDENCE_THRESHOLDS", "SIMPLICITY_ORDER", "simplicity_rank"]

COVERAGE_GUARD = (0.80, 0.97)
N_BOOTSTRAP = 2000
#: Size of the test behind the model confidence set: the set is a (1 - 0.05) set.
MCS_LEVEL = 0.05
#: Largest MCS p-value of another model below which the word applies.
CONFIDENCE_THRESHOLDS = {"high": 0.05, "moderate": 0.20}
#: Simpler / more robust first: the built-in models by how much can go wrong in a fit.
#: The GP family has a handful of hyperparameters and a closed-form predictive
#: (the campaign and warped GPs add one offset variance or one transform); the forest
#: has no gradient-trained weights but its variance is an ad-hoc tree spread; DNGO
#: trains a network as a point estimate and keeps closed-form Bayesian linear
#: regression on top; the ensemble, the sampled BNN and the neural process train
#: many weights each (the BNN's sampler may not converge in quick mode; the neural
#: process needs many related tasks).  Models not listed (user models) come last.
SIMPLICITY_ORDER = ("gp", "campaign_gp", "warped_gp", "forest", "dngo", "ensemble", "bnn",
                    "neural_process")


def model_confidence_set(losses, blocks, n_draws: int, rng: np.random.Generator) -> np.ndarray:
    """MCS p-values by the T_max elimination rule of Hansen, Lunde & Nason (2011).

    ``losses`` (m, n) are per-point losses of m models on the same points and
    ``blocks`` (n,) their resampling blocks.  At each step, for the models still in the
    set, d_i is model i's mean loss minus the set's average and c_ib block b's share of
    it (block sum of the centred loss over n, so d_i = sum_b c_ib); t_i = d_i / se_i with
    se_i = sqrt(sum_b c_ib^2), and T_max = max_i t_i (HLN 2011 §3.1.2).  The null
    distribution of T_max comes from flipping the sign of every block's contribution
    at random (Rademacher weights, the wild cluster bootstrap of Cameron, Gelbach &
    Miller 2008, REStat 90, 414-427), which stays well sized with as few as a dozen
    blocks where a resampling bootstrap is too narrow.  The model with the largest
    t_i is removed; its MCS p-value is the largest step p-value so far (HLN Def. 2); the
    last model gets 1.  A model is in the (1-α) set when its p-value is >= α.
    """
    losses = np.atleast_2d(np.asarray(losses, float))
    m, n = losses.shape
    labels, inv = np.unique(np.asarray(blocks), return_inverse=True)
    g = len(labels)
    signs = rng.choice([-1.0, 1.0], size=(n_draws, g))
    pvals = np.ones(m)
    alive = list(range(m))
    running = 0.0
    scale = max(float(np.mean(np.abs(losses))), 1e-300)
    while len(alive) > 1:
        a = np.array(alive)
        centred = losses[a] - losses[a].mean(axis=0)          # loss minus set average
        d = centred.mean(axis=1)
        c = np.zeros((len(a), g))
        np.add.at(c.T, inv, centred.T)
        c /= n
        # Under the null every block's contribution is symmetric about zero, so the
        # uncentred sum of squares (unchanged by any sign flip) studentizes both the
        # statistic and its flips: a randomization test, exact under that symmetry.
        # Models that agree to rounding have se ~ 0; they are not told apart.
        se = np.maximum(np.sqrt((c**2).sum(axis=1)), 1e-8 * scale)
        t = d / se
        null = (signs @ c.T) / se[None, :]
        p = float(np.mean(null.max(axis=1) >= t.max() - 1e-12))
        running = max(running, p)
        worst = int(a[int(np.argmax(t))])
        pvals[worst] = running
        alive.remove(worst)
    return pvals


def _default_blocks(preds, names):
    p = preds[names[0]]
    fold = np.asarray(p["fold"])
    if p.get("campaign") is not None:
        camp = np.unique(np.asarray(p["campaign"]).astype(str), return_inverse=True)[1]
        return camp * (int(fold.max()) + 1) + fold
    return fold


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
    #: The model a significant paired backtest test put first in the tie group (None:
    #: mean CRPS kept its order).
    tie_winner: str | None = None
    #: How ties were decided: MCS level, number of resampling blocks, stratification.
    mcs: dict = field(default_factory=dict)


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
                    seed: int = 0, blocks=None,
                    scoring_scales: dict | None = None,
                    tie_winner: str | None = None,
                    tie_evidence: str | None = None) -> Ranking:
    """Apply the ranking rule of this module's docstring.

    Parameters
    ----------
    preds : {name: {"y", "mean", "std", "fold"[, "campaign", "nll_pt", "crps_pt", "pit"]}}
        Pooled held-out predictions of each *working* model, on the same points in the
        same order.  With ``nll_pt``, ``crps_pt`` and ``pit`` (per-point scores of a
        non-Gaussian predictive at variance scale 1, see
        :func:`advisor.scoring.point_scores`) those replace the Gaussian closed forms
        and the model gets no variance scale.
    failures : {name: [error text per failed fold]}
        Models with at least one failed fold (not in ``preds``).
    fit_seconds : {name: mean seconds per fit}
    scales : {name: variance scale}, optional
        Cross-fitted scale factors; a model whose raw coverage misses the guard but whose
        scaled coverage (``scaled_coverage``) meets it is scored and recommended scaled.
    backtest_score : {name: score}, optional
        Kept for callers of earlier versions; no longer reorders models (a backtest
        score without a significant paired test picks between equal models at random).
    tie_winner : str, optional
        A model tied with the leader that the paired backtest test found to optimize
        better than it (rule 5); it goes first within the tie group.
    tie_evidence : str, optional
        The test result in words (test, p-value, level) for the statement and reasons.
    blocks : array (n,), optional
        Resampling block of each point; default campaign × fold when ``preds`` carry
        ``campaign``, else the fold.
    scoring_scales : {name: float or array (n,)}, optional
        Cross-fitted variance scale of each point (its fold's scale fitted on the other
        folds) used to score a scaled model's CRPS; default the scalar in ``scales``.
    """
    rng = np.random.default_rng(seed)
    scales = scales or {}
    scoring_scales = scoring_scales or {}
    scaled_coverage = scaled_coverage or {}
    backtest_score = backtest_score or {}
    names = list(preds)
    rows: dict[str, dict] = {}
    reasons: dict[str, list[str]] = {n: [] for n in list(preds) + list(failures)}
    mcs_info: dict = {"level": MCS_LEVEL, "n_blocks": 0, "stratified_by_fold": False}

    if names:
        folds = np.asarray(preds[names[0]]["fold"])
        blocks = np.asarray(blocks) if blocks is not None else _default_blocks(preds, names)
        # Stratify by fold only when every fold has at least two blocks to resample.
        per_fold = [len(np.unique(blocks[folds == f])) for f in np.unique(folds)]
        strata = folds if min(per_fold) >= 2 else None
        mcs_info.update(n_blocks=int(len(np.unique(blocks))),
                        stratified_by_fold=strata is not None)
        idx = stratified_bootstrap_index(folds, 400, rng)
        crps_pts, use_scale = {}, {}
        for n in names:
            p = preds[n]
            own = has_point_scores(p)
            pit_raw = point_scores(p)["pit"]
            cov_raw = float(np.mean(np.abs(pit_raw - 0.5) <= 0.45))
            # A non-Gaussian predictive (its own per-point scores) gets no variance scale.
            s = 1.0 if own else float(scales.get(n, 1.0))
            cov_s = cov_raw if own else float(scaled_coverage.get(n, cov_raw))
            raw_ok = COVERAGE_GUARD[0] <= cov_raw <= COVERAGE_GUARD[1]
            scaled_ok = COVERAGE_GUARD[0] <= cov_s <= COVERAGE_GUARD[1]
            # Scale only when it is what rescues coverage (or the raw model is already
            # fine and the scale is a large correction), so advice stays minimal.
            use_scale[n] = not own and ((not raw_ok and scaled_ok) or
                                        (raw_ok and scaled_ok and abs(np.log(s)) > np.log(1.25)))
            # The CRPS is scored with the cross-fitted scale (each fold's from the other
            # folds) when given, like the coverage; the recommended scale is ``s``.
            score_scale = scoring_scales.get(n, s) if use_scale[n] else 1.0
            crps_pts[n] = point_scores(p, score_scale)["crps"]
            cover_ok = raw_ok or scaled_ok
            # Too wide, with no scale that brings it inside the band (a non-Gaussian
            # predictive gets none): wider than needed, which CRPS and NLL already
            # charge for; only too narrow (overconfident) fails the guard rail.  On the
            # real-log benchmark the upper bound demoted the CRPS leader in 3 of 15
            # cases, each time the truly better model (README, "Real-log benchmark").
            wide = bool(not cover_ok and min(cov_raw, cov_s) > COVERAGE_GUARD[1])
            cover_ok = cover_ok or wide
            rho_lo = _spearman_lower(p["mean"], p["y"], p["fold"], idx)
            order_ok = rho_lo > 0
            rows[n] = {"surrogate": n, "status": "ok", "crps": float(crps_pts[n].mean()),
                       "coverage_90": cov_s if use_scale[n] else cov_raw,
                       "variance_scale": s if use_scale[n] else 1.0,
                       "guard_coverage": bool(cover_ok), "guard_order": bool(order_ok),
                       "coverage_wide": wide,
                       "spearman_lower": rho_lo, "fit_seconds": float(fit_seconds.get(n, np.nan))}
            if use_scale[n]:
                reasons[n].append(f"scores with its standard deviation scaled by {s:.2f} "
                                  f"(90% coverage {cov_raw:.2f} as fitted, {cov_s:.2f} scaled)")
            if wide:
                reasons[n].append(f"90% interval covers {cov_raw:.0%} of held-out trials, "
                                  f"above {COVERAGE_GUARD[1]:.0%}: wider than needed (its "
                                  "CRPS and NLL already pay for that; not a guard failure)")
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
        losses = np.vstack([crps_pts[n] for n in names])
        boot = block_bootstrap_means(losses, blocks, N_BOOTSTRAP, rng, strata=strata)
        in_pool = np.array([n in pool for n in names])
        pool_boot = boot[in_pool]
        winners = np.argmin(pool_boot, axis=0)
        pool_names = [n for n in names if n in pool]
        pv = model_confidence_set(losses[in_pool], blocks, N_BOOTSTRAP, rng)
        mcs_p = dict(zip(pool_names, pv))
        li = names.index(leader)
        for i, n in enumerate(names):
            if n not in pool:  # outside the set's candidates: a paired test with the leader
                mcs_p[n] = float(model_confidence_set(losses[[i, li]], blocks,
                                                      N_BOOTSTRAP, rng)[0])
        li = names.index(leader)
        for i, n in enumerate(names):
            d = boot[i] - boot[li]
            lo, hi = np.quantile(d, [0.025, 0.975])
            pb = (float(np.mean(winners == pool_names.index(n))) if n in pool else 0.0)
            pval = mcs_p.get(n)
            in_set = bool(n == leader or (pval is not None and pval >= MCS_LEVEL))
            rows[n].update(crps_diff=float(crps_pts[n].mean() - crps_pts[leader].mean()),
                           crps_diff_low=float(lo), crps_diff_high=float(hi),
                           p_best=pb, mcs_pvalue=float(pval) if pval is not None else np.nan,
                           in_mcs=in_set, tied_with_leader=in_set)
    else:
        leader = None

    def key(n):
        r = rows[n]
        guard_fail = not (r["guard_coverage"] and r["guard_order"])
        in_tie = r["tied_with_leader"] and not guard_fail
        simple = simplicity_rank(n)
        if in_tie:
            return (0, 0, int(n != tie_winner), (r["crps"], simple, r["fit_seconds"]))
        return (int(guard_fail), 1, 1, (r["crps"], simple, r["fit_seconds"]))

    if tie_winner is not None and not (tie_winner in rows and rows[tie_winner].get(
            "tied_with_leader") and rows[tie_winner]["guard_coverage"]
            and rows[tie_winner]["guard_order"]):
        tie_winner = None  # only a tied model passing the guard rails can break a tie
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
    confidence, statement = _confidence(top, rows, ordered, tie_winner, tie_evidence)
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
                   cheaper_by_fit_seconds=cheaper, mcs=mcs_info, tie_winner=tie_winner)


def simplicity_rank(name: str) -> int:
    """Position in :data:`SIMPLICITY_ORDER` (user models after every built-in)."""
    return SIMPLICITY_ORDER.index(name) if name in SIMPLICITY_ORDER else len(SIMPLICITY_ORDER)


def _confidence(top, rows, ordered, tie_winner=None, tie_evidence=None):
    if top is None:
        return "none", "No surrogate produced usable predictions on every fold."
    r = rows[top]
    ties = [n for n in ordered if n != top and rows[n].get("status") == "ok"
            and rows[n].get("tied_with_leader")
            and rows[n]["guard_coverage"] and rows[n]["guard_order"]]
    pb = r["p_best"]
    rivals = [rows[n].get("mcs_pvalue") for n in ordered if n != top
              and rows[n].get("status") == "ok"]
    # When a tie-breaker put ``top`` first, the lower-CRPS leader is among the rivals
    # with p-value 1, so the word is "low".
    rivals = [p for p in rivals if p is not None and np.isfinite(p)]
    worst = max(rivals, default=0.0)
    if worst < CONFIDENCE_THRESHOLDS["high"]:
        level = "high"
    elif worst < CONFIDENCE_THRESHOLDS["moderate"]:
        level = "moderate"
    else:
        level = "low"
    others = [n for n in ordered if n != top and rows[n].get("status") == "ok"]
    if not r["guard_coverage"] or not r["guard_order"]:
        level = "low"
        text = (f"{top} scores best, but no model passes the guard rails on coverage and "
                "ordering; treat this as weak evidence.")
    elif ties:
        if top == tie_winner:
            how = ("the acquisition backtest breaks the tie: "
                   + (tie_evidence or "the paired test says it optimizes better"))
        elif tie_evidence:
            how = ("mean CRPS keeps its order: no tied model optimizes significantly "
                   f"better in the backtest ({tie_evidence})")
        else:
            how = "mean CRPS keeps its order (no paired backtest test of the tied models)"
        text = (f"{top} is statistically tied with {', '.join(ties)} on held-out CRPS "
                f"(95% model confidence set); {how}. "
                f"Probability of being best {pb:.2f}.")
    elif others:
        ru = others[0]
        text = (f"{top} has the lowest held-out CRPS; its lead over {ru} "
                f"({rows[ru]['crps_diff']:.4g}, 95% CI {rows[ru]['crps_diff_low']:.4g} to "
                f"{rows[ru]['crps_diff_high']:.4g}; largest rival MCS p-value "
                f"{worst:.3f}) is unlikely to be noise. "
                f"Probability of being best {pb:.2f}.")
    else:
        text = f"{top} is the only working model."
    return level, text
