"""Fit every candidate on the past campaigns, score it on fresh campaigns (the truth),
and cross-validate it on the past log under each validation scheme.

The truth for candidate *m* on a problem is its mean NLL and CRPS per point on every
trial of the new campaigns, when fitted on the whole past log — how the surrogate
starts the next campaign.  The advisor's pick comes from ``advisor.assess`` (quick,
one job, no backtest, no plan) with the default scheme; the other schemes are run with
``validation=`` so the score-choice table can compare rules.  Only the public API is
used, so the benchmark judges whatever ranking rule and models the code has.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np
from scipy import stats

import advisor
from advisor.execution import task_seed

from .campaigns import campaign_log
from .problems import PROBLEMS

__all__ = ["measure_problem", "summarize", "PAST", "NEW"]

PAST = ["past1", "past2", "past3"]
NEW = ["new1", "new2"]


def _load(problem, frame, folder: Path):
    path = folder / f"{problem.name}.csv"
    frame.to_csv(path, index=False)
    return advisor.load_trials(path, objective=problem.objective,
                               direction=problem.direction, campaign="campaign",
                               order="trial")


def _truth(trials, new_frame, names, seed: int, sign: float, extra_frame=None,
           tag: str = "truth") -> dict:
    """Fit on the past log (plus ``extra_frame``, the new campaigns' first trials, when
    given) and score on ``new_frame``."""
    y_new = sign * new_frame[trials.objective].to_numpy(float)
    out = {}
    for n in names:
        try:
            model = advisor.make_surrogate(n, seed=task_seed(seed, tag, n), quick=True)
            enc = getattr(model, "input_encoding", "onehot")
            enc = enc if enc in ("onehot", "ordinal") else "onehot"
            X, y = trials.features(enc), trials.y
            if extra_frame is not None:
                X = np.vstack([X, trials.space.encode(extra_frame, enc)])
                y = np.concatenate([y, sign * extra_frame[trials.objective].to_numpy(float)])
            model.fit(X, y)
            mean, std = model.predict(trials.space.encode(new_frame, enc))
            s = advisor.score_predictions(y_new, np.asarray(mean), np.asarray(std))
            out[n] = {"nll": float(s["nll"]), "crps": float(s["crps"]),
                      **_optimization_truth(y_new, np.asarray(mean),
                                            new_frame["campaign"].to_numpy())}
        except Exception as exc:  # a failing model is recorded, not fatal
            out[n] = {"nll": None, "crps": None, "error": f"{type(exc).__name__}: {exc}"[:200]}
    return out


def _optimization_truth(y, mean, campaign) -> dict:
    """What the model's predictions are worth to an optimizer on the new campaigns (a
    proxy: no new black-box evaluations).  ``pool_regret``: in each new campaign, the
    normalized regret (y - best) / (worst - best) of the trial the model predicts best,
    averaged over campaigns; ``spearman``: rank correlation of predicted mean and
    objective within each campaign, averaged."""
    regrets, rhos = [], []
    for c in np.unique(campaign):
        sel = campaign == c
        yc, mc = y[sel], mean[sel]
        span = yc.max() - yc.min()
        if span > 0:
            regrets.append(float((yc[np.argmin(mc)] - yc.min()) / span))
        if np.ptp(mc) > 0 and np.ptp(yc) > 0:
            rhos.append(float(stats.spearmanr(mc, yc)[0]))
    return {"pool_regret": float(np.mean(regrets)) if regrets else None,
            "spearman": float(np.mean(rhos)) if rhos else None}


def _cv(trials, names, seed: int, scheme: str) -> dict:
    a = advisor.assess(trials, seed=seed, quick=True, surrogates=names, validation=scheme,
                       jobs=1, backtest=False, plan=False)
    order = [r for r in a.ranking["surrogate"]]
    t = a.ranking
    tied = [r["surrogate"] for r in t.to_dict("records") if r.get("status") == "ok"
            and bool(r.get("tied_with_leader")) and bool(r.get("guard_coverage"))
            and bool(r.get("guard_order"))]
    scores = {n: {"nll": _f(a.metrics.get(n, {}).get("nll")),
                  "crps": _f(a.metrics.get(n, {}).get("crps"))} for n in names}
    return {"scheme": a.validation["scheme"], "pick": a.recommendation["surrogate"],
            "ranking": order, "tied": tied, "scores": scores,
            "notes": a.to_dict().get("notes", []),
            "score_disagreement": a.recommendation.get("score_disagreement")}


def _f(v):
    return None if v is None or not np.isfinite(v) else float(v)


def _mean_truth(by_seed: list[dict], names) -> dict:
    """Each candidate's truth averaged over model seeds, with the standard error of its
    NLL over the seeds (``nll_se``; None with one seed)."""
    out = {}
    for n in names:
        runs = [t[n] for t in by_seed]
        if any(r.get("nll") is None for r in runs):
            out[n] = dict(runs[0])
            continue
        entry = {}
        for key in runs[0]:
            vals = [r.get(key) for r in runs]
            if all(isinstance(v, (int, float)) for v in vals):
                entry[key] = float(np.mean(vals))
        nll = np.array([r["nll"] for r in runs])
        entry["nll_se"] = float(nll.std(ddof=1) / np.sqrt(len(nll))) if len(nll) > 1 else None
        entry["nll_by_seed"] = [float(v) for v in nll]
        out[n] = entry
    return out


def measure_problem(name: str, n_per_campaign: int, seed: int = 0,
                    schemes=("campaign", "kfold"), names=None,
                    within_campaign: bool = False, truth_seeds: int = 1) -> dict:
    """Everything the tables need for one problem, one size, one seed.

    ``truth_seeds`` > 1 fits every candidate for the truth with that many model seeds
    (``seed``, ``seed + 1``, ...) and keeps the mean over them (the pick is refitted by
    the user with an arbitrary seed, so its expected score is the honest truth); the
    summary's regret then carries the standard error over the seeds."""
    problem = PROBLEMS[name]
    names = list(names) if names else advisor.surrogate_names()
    past = campaign_log(name, PAST, n_per_campaign)
    new = campaign_log(name, NEW, n_per_campaign)
    sign = 1.0 if problem.direction == "minimize" else -1.0
    with tempfile.TemporaryDirectory() as tmp:
        trials = _load(problem, past, Path(tmp))
        truth = _mean_truth([_truth(trials, new, names, seed + k, sign)
                             for k in range(truth_seeds)], names)
        within = None
        if within_campaign:
            # In use, the surrogate is refitted once the new campaign has begun: fit on
            # the past log plus each new campaign's first half, score on the second.
            first = new.groupby("campaign", group_keys=False).apply(
                lambda g: g[g["trial"] <= n_per_campaign // 2])
            second = new.drop(first.index)
            within = _truth(trials, second, names, seed, sign, extra_frame=first,
                            tag="truth_within")
        primary = _cv(trials, names, seed, "auto")
        cv = {primary["scheme"]: {n: primary["scores"][n] for n in names}}
        for s in schemes:
            if s not in cv:
                cv[s] = _cv(trials, names, seed, s)["scores"]
    out = {"problem": name, "description": problem.description, "seed": seed,
           "truth_seeds": truth_seeds,
           "n_per_campaign": n_per_campaign, "n_past": len(past), "n_new": len(new),
           "y_std": float(np.std(past[problem.objective].to_numpy(float))),
           "candidates": names, "truth": truth, "truth_within": within, "cv": cv,
           "pick": primary["pick"], "pick_scheme": primary["scheme"],
           "ranking": primary["ranking"], "tied": primary["tied"],
           "score_disagreement": primary["score_disagreement"], "notes": primary["notes"]}
    out["summary"] = summarize(out)
    return out


def summarize(m: dict) -> dict:
    """Selection regret, rank agreement and top-two membership of the advisor's pick."""
    truth = {n: v for n, v in m["truth"].items() if v.get("nll") is not None}
    pick = m["pick"]
    out = {}
    for key in ("nll", "crps"):
        vals = {n: v[key] for n, v in truth.items()}
        best = min(vals, key=vals.get)
        order = sorted(vals, key=vals.get)
        picked = vals.get(pick, np.nan)
        out[f"true_best_{key}"] = best
        out[f"regret_{key}"] = float(picked - vals[best])
        out[f"pick_in_top2_{key}"] = pick in order[:2]
        out[f"pick_beats_baseline_{key}"] = ("baseline" not in vals
                                            or picked <= vals["baseline"])
        # Rank agreement: the advisor's ranking (its order) against the true order.
        common = [n for n in m["ranking"] if n in vals]
        if len(common) >= 3:
            adv_rank = np.arange(len(common))
            true_rank = stats.rankdata([vals[n] for n in common])
            out[f"spearman_{key}"] = float(stats.spearmanr(adv_rank, true_rank)[0])
            out[f"kendall_{key}"] = float(stats.kendalltau(adv_rank, true_rank)[0])
    # Monte-Carlo error of the NLL regret over the truth's model seeds: the standard
    # error of the paired per-seed difference (pick minus the best on average).
    bpick, bbest = truth.get(pick, {}), truth[out["true_best_nll"]]
    if bpick.get("nll_by_seed") and len(bpick["nll_by_seed"]) > 1:
        d = np.array(bpick["nll_by_seed"]) - np.array(bbest["nll_by_seed"])
        out["regret_nll_se"] = float(d.std(ddof=1) / np.sqrt(len(d)))
    else:
        out["regret_nll_se"] = None
    # CRPS regret in units of the past objective's spread, comparable across problems.
    out["regret_crps_rel"] = out["regret_crps"] / max(m.get("y_std", 1.0), 1e-12)
    return out
