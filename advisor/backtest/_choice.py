"""Choosing a setting from a backtest dict, and the paired decision per surrogate."""

from __future__ import annotations

import math

import numpy as np

from ..execution import task_seed

__all__ = ["choose_setting", "DEFAULT_LABEL"]

_TIE = 1e-9

DEFAULT_LABEL = "EI xi=0.01"


def _decide(bt: dict, surrogate: str, seed: int) -> dict:
    """The paired test of every setting against the default for ``surrogate``.

    Evidence = the simulated campaigns (runs paired by stand-in and start); the pool
    replay decides only when no simulated campaign ran, and says so.

    The unit (since 2026-12-03, stop 29): each run's *final regret* divided by random
    order's mean final regret on the same stand-in or campaign (random search = 1, the
    unit real next campaigns are judged in, ``unit`` = ``"final_over_random"``).  Before,
    the decision read the normalized-regret AUC; with stand-ins equal to the real
    functions that unit found real gains on 8-21% of logs at 24 runs where the final
    regret finds them on 50-58% (``benchmarks/nondefault_ceiling.py``, runs of 30
    trials, quick grid): the gains come late in a run and an average over the run
    dilutes them.  The AUC test is still run and reported (``auc_test``); when no run
    has a positive random-order final regret (random search always ends at the
    optimum) the AUC decides and ``unit`` says so.  Power: ``power_final_at_0.1`` in
    the decision's unit (``proportional_power``: a proportional gain, since stop 30; the
    shift model before overstated the realized rate on runs tied at the optimum),
    ``power_at_0.1`` for 0.1 of AUC (the same proportional model since stop 30; the
    shift of ``paired_power`` before, which claimed power for a gain larger than the
    runs' mean AUC);
    ``detectable_gain`` (``_decision.detectable_gain``): the smallest proportional gain
    in the decision's unit these runs find with power 0.8.
    """
    from ._decision import detectable_gain, paired_decision, proportional_power

    part = None
    for cand in ("simulated", "replay"):
        sec = bt.get(cand)
        if sec and not sec.get("error") and sec.get("results"):
            part = cand
            break
    if part is None:
        return {"experiment": None, "chosen": None, "beats_default": False,
                "comparisons": [], "power_at_0.1": None, "power_final_at_0.1": None,
                "unit": None, "auc_test": None, "versus_baselines": None}
    values = {}
    for r in bt[part]["results"]:
        if r["surrogate"] != surrogate or r["error"] or r["acquisition"]["name"] == "random":
            continue
        values[r["label"]] = {(run["unit"], run["seed_index"]): run["auc"]
                              for run in r["runs"]}
    strata = None
    if part == "simulated":  # the stand-in class of each run (GP draws, forest functions)
        cls = {f["id"]: f.get("class") for f in bt[part].get("functions", [])}
        strata = {k: cls.get(k[0]) for v in values.values() for k in v
                  if cls.get(k[0]) is not None}
    final = _final_over_random(bt[part], surrogate)
    auc_test = paired_decision(values, DEFAULT_LABEL, strata=strata)
    use_final = len(final.get(DEFAULT_LABEL, {})) >= 2
    out = paired_decision(final, DEFAULT_LABEL, strata=strata) if use_final else dict(auc_test)
    out["experiment"] = part
    out["unit"] = "final_over_random" if use_final else "auc"
    out["metric"] = ("final regret over random order's mean final regret on the same "
                     "stand-in or campaign (random search = 1), paired by run"
                     if use_final else "normalized-regret AUC, paired by run")
    out["auc_test"] = {k: auc_test[k] for k in ("chosen", "beats_default", "comparisons")}
    rng = np.random.default_rng(task_seed(seed, "power", surrogate))
    n_classes = len(set(strata.values())) if strata else 1
    # The AUC is bounded below by 0 too: a shift by 0.1 models a gain no setting can
    # make when the runs' mean AUC is below 0.1 (the sample logs' stand-ins: 0.085-0.13,
    # random order's 0.10-0.15), so the AUC's power uses the same proportional model and
    # is None there (stop 30; the shift said 0.85-1.0 for that impossible gain).
    out["power_at_0.1"] = proportional_power(values, DEFAULT_LABEL, rng, strata=strata)
    auc_level = [x for v in values.values() for x in v.values() if np.isfinite(x)]
    out["auc_mean_level"] = float(np.mean(auc_level)) if auc_level else None
    out["power_note"] = ("chance that a setting whose runs' normalized-regret AUC is "
                         "proportionally lower, by 0.1 on average, is found significant "
                         "with this many runs (resampled pairs, strictest Holm step"
                         + (", found within every stand-in class" if n_classes > 1 else "")
                         + "); None when the runs' mean AUC (auc_mean_level) is 0.1 or "
                         "less, where no setting can gain 0.1 of AUC")
    # in the final unit a shift is no model of a gain (zero-inflated: runs tied at the
    # optimum), see _decision.proportional_power
    out["power_final_at_0.1"] = (proportional_power(final, DEFAULT_LABEL, rng,
                                                    strata=strata) if use_final else None)
    out["detectable_gain"] = (detectable_gain(final, DEFAULT_LABEL, rng, strata=strata)
                              if use_final else None)
    # the level the power model scales (its pooled pairs' mean, detectable_gain's
    # largest possible gain), so that "no setting can gain 0.1" and a None power agree
    out["final_mean_level"] = (None if not out["detectable_gain"] else
                               float(out["detectable_gain"]["largest_possible_gain"]))
    out["power_final_note"] = (
        "the same chance for a setting whose runs end proportionally lower, by 0.1 on "
        "average, in final regret over random order's mean final regret on the same "
        "stand-in or campaign (random search = 1, the decision's unit and the one real "
        "campaigns are judged in; runs that end at the optimum stay there), after the "
        "runs' own number of trials; None when the settings' runs end on average within "
        "0.1 of the optimum (final_mean_level), where no setting can gain 0.1; "
        "detectable_gain: the smallest such proportional gain found with power 0.8 "
        "(gain None: not even a setting that ends every run at the optimum is)")
    out["versus_baselines"] = _versus_baselines(bt[part], surrogate, out.get("chosen"))
    return out


def _versus_baselines(sec: dict, surrogate: str, label: str | None) -> dict | None:
    """The chosen setting against random search (its shuffles after the same start) and
    grid search (the same start index's design), paired by run, in AUC and
    final regret (:func:`._decision.baseline_test`); None without the baselines."""
    from ._decision import baseline_test

    res = next((r for r in sec.get("results", []) if r["surrogate"] == surrogate
                and r["label"] == label and not r["error"]), None)
    rnd = sec.get("random") or {}
    if res is None or not rnd.get("per_start_runs"):
        return None
    key = lambda run: (run["unit"], run["seed_index"])  # noqa: E731
    runs = {"auc": {key(r): r["auc"] for r in res["runs"]},
            "final": {key(r): r["final_regret"] for r in res["runs"]
                      if r.get("final_regret") is not None}}

    def per_start(field):
        return {(u, s): v[field] for u, starts in rnd["per_start_runs"].items()
                for s, v in enumerate(starts)}

    baselines = {"random search": {"auc": per_start("auc"),
                                   "final": per_start("final_regret")}}
    grid = (sec.get("grid") or {}).get("runs") or []
    if grid:
        baselines["grid search"] = {
            "auc": {key(g): g["auc"] for g in grid},
            "final": {key(g): g["final_regret"] for g in grid
                      if g.get("final_regret") is not None}}
    out = baseline_test(runs, baselines)
    out["setting"] = label
    return out


def _final_over_random(sec: dict, surrogate: str) -> dict:
    """{label: {run key: final regret / random order's mean final regret there}}, the
    units where random order's mean final regret is positive."""
    rnd = (sec.get("random") or {}).get("per_unit_mean_final_regret") or {}
    out = {}
    for r in sec["results"]:
        if r["surrogate"] != surrogate or r["error"] or r["acquisition"]["name"] == "random":
            continue
        out[r["label"]] = {(run["unit"], run["seed_index"]):
                           run["final_regret"] / rnd[run["unit"]] for run in r["runs"]
                           if run.get("final_regret") is not None
                           and rnd.get(run["unit"], 0) > 0}
    return out



# -- choosing ---------------------------------------------------------------------------
def _experiments(bt: dict) -> list[tuple[str, dict]]:
    out = []
    for part in ("replay", "simulated"):
        sec = bt.get(part)
        if sec and not sec.get("error") and sec.get("results"):
            out.append((part, sec))
    return out


def _scores(bt: dict, surrogate: str | None = None) -> list[dict]:
    """One row per (surrogate, setting) that ran without error in every experiment."""
    parts = _experiments(bt)
    rows = {}
    for part, sec in parts:
        for r in sec["results"]:
            if surrogate is not None and r["surrogate"] != surrogate:
                continue
            key = (r["surrogate"], r["label"])
            row = rows.setdefault(key, {"surrogate": r["surrogate"],
                                        "acquisition": r["acquisition"],
                                        "label": r["label"], "parts": {}, "error": None,
                                        "beats": [0, 0]})
            if r["error"] or r["auc"]["median"] is None:
                row["error"] = r["error"] or "no runs"
                continue
            row["parts"][part] = {"auc": r["auc"]["median"],
                                  "ttb": r["trials_to_best5"]["median"]}
            ref = sec["random"]["per_unit_mean_auc"]
            for run in r["runs"]:
                row["beats"][0] += run["auc"] < ref[run["unit"]]
                row["beats"][1] += 1
    ok = []
    for row in rows.values():
        if row["error"] is None and len(row["parts"]) == len(parts):
            row["score"] = float(np.mean([v["auc"] for v in row["parts"].values()]))
            rp = row["parts"].get("replay")
            row["tie"] = rp["ttb"] if rp else math.inf
            ok.append(row)
    ok.sort(key=lambda r: (round(r["score"] / _TIE), r["tie"]))
    return ok


def _random_score(bt: dict) -> float | None:
    parts = _experiments(bt)
    if not parts:
        return None
    return float(np.mean([sec["random"]["auc"]["median"] for _, sec in parts]))


def _choice_from(ranked: list[dict], bt: dict, who: str) -> dict:
    parts = [p for p, _ in _experiments(bt)]
    if not ranked:
        return {"surrogate": who, "acquisition": None, "label": None, "score": None,
                "margin_over_runner_up": None, "margin_over_random": None,
                "runner_up": None,
                "reasons": [f"no setting ran without error for {who}" if parts
                            else "no backtest experiment ran"]}
    best = ranked[0]
    runner = ranked[1] if len(ranked) > 1 else None
    overall = len({r["surrogate"] for r in ranked}) > 1 or who != best["surrogate"]

    def name(r):
        return f"{r['surrogate']} + {r['label']}" if overall else r["label"]

    rand = _random_score(bt)
    m_run = None if runner is None else runner["score"] - best["score"]
    m_rand = None if rand is None else rand - best["score"]
    detail = ", ".join(f"{p} {best['parts'][p]['auc']:.3f}" for p in parts)
    reasons = [f"{name(best)} has the lowest median normalized-regret AUC "
               f"({detail}; score {best['score']:.3f}) among {len(ranked)} setting(s)"]
    if runner is not None:
        reasons.append(f"ahead of {name(runner)} by {m_run:.3f}")
        if m_run < 0.01:
            reasons.append("the margin over the runner-up is under 0.01: the two are "
                           "practically tied on these logs")
    if m_rand is not None:
        verdict = "better" if m_rand > 0 else "no better"
        reasons.append(f"{verdict} than random order (score {rand:.3f}, margin {m_rand:.3f})")
    won, total = best["beats"]
    if total:
        reasons.append(f"beats the random-order mean on {won} of {total} runs")
    return {"surrogate": best["surrogate"], "acquisition": best["acquisition"],
            "label": best["label"], "score": best["score"],
            "runner_up": None if runner is None else {"surrogate": runner["surrogate"],
                                                      "acquisition": runner["acquisition"],
                                                      "label": runner["label"],
                                                      "score": runner["score"]},
            "margin_over_runner_up": m_run, "margin_over_random": m_rand,
            "runs_beating_random": int(won), "runs": int(total), "reasons": reasons}


def choose_setting(backtest: dict, surrogate: str) -> dict:
    """The best acquisition setting for ``surrogate`` in a :func:`run_backtest` dict.

    Rule: lowest score = mean over the experiments that ran (replay, simulated) of the
    median normalized-regret AUC; ties (within 1e-9) to the lower median replay
    ``trials_to_best5``.  Settings that failed are not eligible.

    Returns
    -------
    dict
        ``surrogate``, ``acquisition`` ({"name", "params"} or None when nothing ran),
        ``label``, ``score``, ``runner_up``, ``margin_over_runner_up``,
        ``margin_over_random`` (random-order score minus the chosen score; > 0 means the
        setting beats random), ``runs_beating_random``, ``runs``, ``reasons``.
    """
    return _choice_from(_scores(backtest, surrogate), backtest, surrogate)


def _overall_choice(bt: dict) -> dict:
    return _choice_from(_scores(bt), bt, "any surrogate")
