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

The package's private modules: ``_result`` (the :class:`Assessment` record),
``_folds`` (the cross-validation grid and its pooling), ``_stages`` (backtest
candidates, backtest, failure model, plan).  :func:`assess` lives here and calls the
stage functions through this module's names, so a test or the cost benchmark can wrap
or replace them (``advisor.assessment._cross_validate`` etc.).
"""

from __future__ import annotations

import datetime as _dt
import time
from typing import Callable, Sequence

import numpy as np
import pandas as pd

from .. import decision
from ..decision import DEFAULT_ACQUISITION
from ..errors import UsageError
from ..execution import Executor, task_seed
from ..logs import TrialTable
from ..ranking import rank_surrogates
from ..recalibration import cross_fitted_recalibration
from ..scoring import METRIC_KEYS, bootstrap_intervals, stratified_bootstrap_index
from ..surrogates import surrogate_names
from ..validation import choose_scheme
from ._folds import (_all_folds, _cross_validate, _encoding_of, _fit_predict_task,
                     _isolated_folds, _merge_info, _nanmean, _other_schemes,
                     _ranking_blocks, _score_pooled)
from ._result import Assessment, _package_versions
from ._stages import (_CANDIDATE_RULE, _COST_SCOPE, _as_trials, _backtest_candidates,
                      _cost_names, _feasibility,
                      _plan, _quick_model, _replicate_noise, _run_backtest, _settings)

__all__ = ["assess", "Assessment", "DEFAULT_ACQUISITION"]


def assess(trials: TrialTable, seed: int = 0, quick: bool = False,
           surrogates: Sequence[str] | None = None, validation: str = "auto",
           jobs: int = 1, scheduler: str | None = None,
           acquisitions=None, budget: int | None = None, batch: int = 1,
           propose: int = 0, max_fit_seconds: float | None = None,
           backtest: bool = True, plan: bool = True, freeze: bool = False,
           progress: Callable[[int, int, str], None] | None = None,
           command: str | None = None, campaign_order: Sequence[str] | None = None,
           model_time_limit: float | None = 600.0, backtest_runs: int | None = None,
           **load_options) -> Assessment:
    """Cross-validate every candidate surrogate on ``trials`` and recommend one.

    Parameters
    ----------
    trials : TrialTable, str, Path or pandas.DataFrame
        From :func:`advisor.load_trials`; or a path or DataFrame, which is then read by
        ``load_trials(trials, **load_options)``.
    **load_options :
        ``objective``, ``direction``, ``campaign``, ``order``, ... for
        :func:`advisor.load_trials`, when ``trials`` is a path or a DataFrame.
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
    backtest_runs : int, optional
        Paired simulated runs per surrogate and setting in the backtest (rounded up to
        whole stand-ins: ``sim_seeds`` starts each).  Default: the plan's (24 quick, 32
        thorough).  More runs buy power for the paired test against the default
        (``power_final_at_0.1``, ``detectable_gain``) at a cost about proportional to
        the runs, slowly (README *Buying power*).
    model_time_limit : float or None
        Seconds a user's model (``module:Class``) may take over all of its validation
        folds; it runs in a process of its own that is killed after that, and is then
        recorded as failed.  None runs user models in the task grid like the built-ins.
    freeze : bool
        Hold the parameters flagged as freeze candidates at their best logged value in
        the proposals (default False: every parameter varies, and the candidates are
        only reported).
    campaign_order : sequence of str, optional
        Campaigns in the order they ran, earliest first.  Forward chaining then trains
        each fold on every earlier campaign in full plus the current campaign's prefix
        (``validation.campaign_order`` in the output); without it campaigns are chained
        one by one and the order between them is not inferred.

    Returns
    -------
    Assessment
    """
    t_start = time.perf_counter()
    trials = _as_trials(trials, load_options)
    names = list(surrogates) if surrogates else surrogate_names()
    if not surrogates and not (trials.campaign and trials.n_campaigns >= 2):
        # a campaign random effect needs two campaigns to be identified; by default the
        # campaign GP is a candidate only then (it can still be asked for by name)
        names = [n for n in names if n != "campaign_gp"]
    if len(set(names)) != len(names):
        raise UsageError("a surrogate is named twice", fix="name each surrogate once")
    for n in names:
        if ":" not in n and n not in surrogate_names():
            raise UsageError(f"unknown surrogate '{n}'; known: " + ", ".join(surrogate_names()),
                             fix="pick listed names or give module:Class")
    if backtest_runs is not None and int(backtest_runs) < 2:
        raise UsageError(f"backtest_runs={backtest_runs}: the paired test needs at least 2 "
                         "runs per setting", fix="pass 2 or more (the default is 24 quick)")
    if batch < 1 or (budget is not None and budget < 3) or propose < 0:
        raise UsageError(f"batch={batch}, budget={budget}, propose={propose}: batch must be "
                         "at least 1, budget at least 3, propose at least 0",
                         fix="pass sensible sizes")
    settings = _settings(acquisitions, quick) if backtest else None
    encodings = {n: _encoding_of(n) for n in names}
    executor = Executor(jobs=jobs, scheduler=scheduler, progress=progress)

    y = trials.y
    groups = trials.groups
    if campaign_order is not None and not trials.campaign:
        raise UsageError("a campaign order was given but the log has no campaign column",
                         fix="name the campaign column with --campaign, or drop "
                             "--campaign-order")
    scheme = choose_scheme(validation, order=trials.order_values if trials.order else None,
                           groups=groups if trials.campaign else None,
                           n_rows=trials.n_used, seed=seed, quick=quick,
                           campaign_order=campaign_order)
    X_enc = {enc: trials.features(enc) for enc in set(encodings.values())}
    folds = list(scheme.splitter.split(X_enc[next(iter(X_enc))], y, groups))
    t_cv = time.perf_counter()
    cv = _cross_validate(executor, names, encodings, X_enc, y, groups, folds, seed, quick,
                         time_limit=model_time_limit)
    t_cv = time.perf_counter() - t_cv
    preds, failures, fit_s, pred_s = cv["preds"], cv["failures"], cv["fit_s"], cv["pred_s"]
    noise, info, tested, fold_of = cv["noise"], cv["info"], cv["tested"], cv["fold_of"]
    pred_rows, fold_rows = cv["pred_rows"], cv["fold_rows"]
    by_scheme = {scheme.name: {n: _score_pooled(p) for n, p in preds.items()}}
    secondary = []
    if not quick:
        # Thorough mode also scores the working models under the other schemes that
        # apply, so a reviewer sees how much the scheme matters (k-fold is optimistic on
        # optimization logs); the ranking itself rests on the primary scheme.
        working = [n for n in names if n not in failures]
        for other in _other_schemes(scheme.name, trials):
            sc = choose_scheme(other, order=trials.order_values if trials.order else None,
                               groups=groups if trials.campaign else None,
                               n_rows=trials.n_used, seed=seed, quick=quick)
            f2 = list(sc.splitter.split(X_enc[next(iter(X_enc))], y, groups))
            cv2 = _cross_validate(executor, working, encodings, X_enc, y, groups, f2,
                                  seed, quick, tag=other, time_limit=model_time_limit)
            by_scheme[other] = {n: _score_pooled(p) for n, p in cv2["preds"].items()}
            secondary.append({"scheme": other, "description": sc.splitter.describe(),
                              "n_folds": len(f2), "failed": sorted(cv2["failures"])})

    rng = np.random.default_rng(task_seed(seed, "intervals"))
    boot_idx = stratified_bootstrap_index(fold_of[tested], 200 if quick else 500, rng)
    metrics, intervals, recal = {}, {}, {}
    for n, p in preds.items():
        # Rank metrics within folds, averaged, with their spread (scoring docstring).
        metrics[n] = _score_pooled(p, folds=p["fold"])
        intervals[n] = bootstrap_intervals(p["y"], p["mean"], p["std"], boot_idx)
        recal[n] = cross_fitted_recalibration(p["y"], p["mean"], p["std"], p["fold"],
                                              forward=scheme.name == "forward")
    for n in names:
        metrics.setdefault(n, {k: float("nan") for k in METRIC_KEYS})
        metrics[n]["fit_seconds"] = fit_s[n]
        metrics[n]["predict_seconds"] = pred_s[n]

    rank_kwargs = dict(scales={n: recal[n]["scale"] for n in recal},
                       scaled_coverage={n: recal[n]["after_scale"]["coverage_90"] for n in recal},
                       scoring_scales={n: recal[n]["scale_by_point"] for n in recal},
                       blocks=_ranking_blocks(trials, tested, fold_of[tested]),
                       seed=task_seed(seed, "ranking"))
    fail_text = {n: [e["error"] for e in v] for n, v in failures.items()}
    ranking = rank_surrogates(preds, fail_text, fit_s, **rank_kwargs)

    # the failure model first: the simulated campaigns fail where it says
    feasibility_out = _feasibility(trials, scheme.name, seed=seed, quick=quick,
                                   executor=executor)
    backtest_out, opt_test, pair = None, None, None
    t_bt = time.perf_counter()
    if backtest and ranking.leader is not None:
        candidates = _backtest_candidates(ranking, quick)
        if candidates:
            backtest_out = _run_backtest(trials, candidates, settings, seed=seed,
                                         quick=quick, budget=budget, batch=batch,
                                         executor=executor,
                                         failure_model=(feasibility_out or {}).get("_model"),
                                         runs=backtest_runs)
            # Ties and the pair: only the paired test over the same simulated runs
            # decides (advisor.decision); a backtest score alone reorders nothing.
            opt_test = decision.optimization_test(
                backtest_out, ranking.leader, decision.close_candidates(ranking.table))
            chosen = {n: (c.get("decision") or {}).get("chosen") for n, c in
                      backtest_out["per_surrogate"].items()}
            winner, evidence, pair = decision.tie_and_pair(ranking.table, opt_test, chosen)
            if opt_test is not None:
                scores = {n: backtest_out["per_surrogate"][n]["score"] for n in candidates
                          if backtest_out["per_surrogate"].get(n, {}).get("score")
                          is not None}
                ranking = rank_surrogates(preds, fail_text, fit_s, backtest_score=scores,
                                          tie_winner=winner, tie_evidence=evidence,
                                          **rank_kwargs)
    t_bt = time.perf_counter() - t_bt

    schemes = decision.scheme_summary(scheme.name, by_scheme, ranking.table)
    disagreement = decision.score_disagreement(
        preds, ranking.table, rank_kwargs["blocks"], task_seed(seed, "score-disagreement"),
        rank_kwargs["scoring_scales"])
    rec = decision.recommendation(ranking, backtest_out, test=opt_test, pair=pair,
                                  disagreement=disagreement, schemes=schemes)
    t_plan = time.perf_counter()
    planning_out, proposals = None, None
    if plan and rec["surrogate"] is not None:
        # Dearest fits first (by the cross-validation's fit seconds), so that the cost
        # projection's worker processes finish at about the same time.
        def fit_cost(n):
            v = fit_s.get(n)
            return float(v) if v is not None and np.isfinite(v) else 0.0

        planned = sorted(_cost_names([n for n in names if n not in failures], ranking,
                                     rec, quick), key=fit_cost, reverse=True)
        planning_out, proposals = _plan(trials, rec, names=planned,
                                        cost_scope=_COST_SCOPE,
                                        seed=seed, quick=quick, budget=budget,
                                        propose=propose, max_fit_seconds=max_fit_seconds,
                                        executor=executor, freeze=freeze,
                                        feasibility=feasibility_out)
        cost = (planning_out or {}).get("cost")
        if cost:  # the JSON keeps the ranking's order, whatever ran first
            cost["surrogates"] = {n: cost["surrogates"][n] for n in names
                                  if n in cost["surrogates"]}
    t_plan = time.perf_counter() - t_plan
    table = ranking.table
    noise_out = {"replicates": _replicate_noise(trials), "fitted": noise}
    a = Assessment(
        trials=trials, seed=seed, quick=quick, surrogates=names,
        validation={"scheme": scheme.name, "description": scheme.splitter.describe(),
                    "reason": scheme.reason, "n_folds": len(folds),
                    "tested_trials": int(len(tested)), "trials": int(len(y)),
                    "campaign_order": (list(campaign_order) if campaign_order is not None
                                       and scheme.name == "forward" and trials.campaign
                                       else None),
                    "ranking_blocks": ranking.mcs,
                    "secondary": secondary,
                    "metrics_by_scheme": by_scheme, **schemes},
        predictions=pd.DataFrame(pred_rows, columns=["surrogate", "fold", "row", "y",
                                                     "mean", "std"]),
        fold_metrics=pd.DataFrame(fold_rows), metrics=metrics, intervals=intervals,
        failures=failures, recalibration=recal, ranking=table, recommendation=rec,
        reasons=ranking.reasons, noise=noise_out, model_info=info, backtest=backtest_out,
        planning=planning_out, proposals=proposals, feasibility=feasibility_out,
        versions=_package_versions(), command=command,
        created=_dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        ranking_rule=ranking.method)
    a.timing = {"cross_validation_seconds": t_cv, "backtest_seconds": t_bt,
                "planning_seconds": t_plan,
                "total_seconds": time.perf_counter() - t_start}
    return a
