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

from . import decision
from ._version import __version__
from .decision import DEFAULT_ACQUISITION
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
    feasibility: dict | None = None
    timing: dict = field(default_factory=dict)
    versions: dict = field(default_factory=dict)
    command: str | None = None
    created: str = ""
    ranking_rule: str = ""

    def to_dict(self) -> dict:
        from .report.export import assessment_to_dict
        return assessment_to_dict(self)

    # The report package sits above this module; these thin delegations import it at
    # call time only (as to_dict does), so importing assessment never pulls it in.
    def _repr_html_(self) -> str:
        """Jupyter's rich display: a compact HTML summary (recommendation, ranking
        table, calibration figure) from the same section content as the PDF."""
        from .report.notebook import to_html
        return to_html(self)

    def figure(self, name: str):
        """The report's figure ``name`` as a :class:`matplotlib.figure.Figure`; names
        in :meth:`figure_names` (e.g. ``"calibration"``, ``"coverage"``)."""
        from .report.notebook import figure
        return figure(self, name)

    @staticmethod
    def figure_names() -> list[str]:
        """Names :meth:`figure` accepts, in the report's order."""
        from .report.notebook import figure_names
        return figure_names()


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


def _as_trials(trials, load_options: dict) -> TrialTable:
    """A TrialTable as given, or read from a path / DataFrame with ``load_options``."""
    if isinstance(trials, TrialTable):
        if load_options:
            raise UsageError("assess got a loaded TrialTable and also log options ("
                             + ", ".join(sorted(load_options)) + ")",
                             fix="give the options to load_trials, or pass the path or "
                                 "DataFrame to assess")
        return trials
    from .logs import load_trials

    unknown = set(load_options) - set(inspect.signature(load_trials).parameters)
    if unknown:
        raise UsageError("assess has no option " + ", ".join(sorted(unknown)),
                         fix="check the spelling (see help(advisor.assess) and "
                             "help(advisor.load_trials))")
    return load_trials(trials, **load_options)


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
           backtest: bool = True, plan: bool = True, freeze: bool = False,
           progress: Callable[[int, int, str], None] | None = None,
           command: str | None = None, campaign_order: Sequence[str] | None = None,
           model_time_limit: float | None = 600.0, **load_options) -> Assessment:
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
                                         failure_model=(feasibility_out or {}).get("_model"))
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
        planning_out, proposals = _plan(trials, rec, names=[n for n in names
                                                            if n not in failures],
                                        seed=seed, quick=quick, budget=budget,
                                        propose=propose, max_fit_seconds=max_fit_seconds,
                                        executor=executor, freeze=freeze,
                                        feasibility=feasibility_out)
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


def _feasibility(trials, scheme: str, *, seed, quick, executor):
    """The model of trial failure (``None`` when no trial failed); never fatal."""
    from .feasibility import assess_feasibility

    if trials.n_failed == 0:
        return None
    try:
        return assess_feasibility(trials, scheme=scheme, seed=seed, quick=quick,
                                  executor=executor)
    except Exception as exc:  # a report section failing must not sink the assessment
        return {"error": f"{type(exc).__name__}: {exc}".splitlines()[0][:300],
                "skipped": "the failure model could not be fitted", "chosen": None}


def _replicate_noise(trials: TrialTable):
    fn = getattr(trials, "replicate_noise", None)
    if fn is None:
        return None
    try:
        return fn()
    except Exception:  # a summary for the report; never worth failing the run over
        return None


_CANDIDATE_RULE = ("backtested: the calibration leader and the models close to it (tied "
                   "with it, then within 10% of its mean CRPS; up to 2 models in all in "
                   "quick mode, 3 otherwise), and the default GP when it passed the "
                   "guards; the other models cannot change the recommendation")


def _backtest_candidates(ranking, quick: bool) -> list[str]:
    """The models that can matter: the leader, the models close to it (the tie group
    and the pair candidates, :func:`advisor.decision.close_candidates`), and the default
    GP when it passes the guard rails.  Backtesting refits a model at every step, so
    the grid is kept to these."""
    t = ranking.table
    ok = t[(t["status"] == "ok")]
    ok = ok[ok["guard_coverage"].astype(bool) & ok["guard_order"].astype(bool)]
    cap = 2 if quick else 3
    names = ok["surrogate"].tolist()
    if ranking.leader not in names:
        out = names[:1]
    else:
        out = ([ranking.leader] + decision.close_candidates(t, ranking.leader))[:cap]
    if "gp" in names and "gp" not in out:
        out.append("gp")
    return out


def _settings(acquisitions, quick: bool):
    from .acquisition import default_settings, parse_settings

    from .acquisition import AcquisitionSetting

    if acquisitions is None:
        out = default_settings(quick)
    elif isinstance(acquisitions, str):
        out = parse_settings(acquisitions)
    else:
        out = list(acquisitions)
    # the default is always backtested: every setting is tested against it
    default = AcquisitionSetting(DEFAULT_ACQUISITION["name"], DEFAULT_ACQUISITION["params"])
    return out if default in out else [default] + out


def _quick_model(name: str, seed: int = 0, quick: bool = True, **options):
    """Surrogate factory for the backtest: always the quick model budget.

    The backtest compares acquisition settings, refitting a model dozens of times per
    run; a model's own budget is what cross-validation judges.  Top-level so worker
    processes can unpickle it.
    """
    return make_surrogate(name, seed=seed, quick=True, **options)


def _run_backtest(trials, candidates, settings, *, seed, quick, budget, batch, executor,
                  failure_model=None):
    from .backtest import FailureModel, plan_for, run_backtest

    out = run_backtest(trials, candidates, settings, seed=seed, quick=quick,
                       budget=budget, batch=batch, executor=executor,
                       make=_quick_model, plan=plan_for(quick),
                       failures=None if failure_model is None else FailureModel(failure_model))
    out["candidates_rule"] = _CANDIDATE_RULE
    return out


def _plan(trials, rec, *, names, seed, quick, budget, propose, max_fit_seconds, executor,
          freeze=False, feasibility=None):
    """Relevance, learning curve and cost projection for the recommended surrogate, and
    the proposed first batch.  Each part that fails is recorded, never fatal."""
    from . import planning
    from .acquisition import AcquisitionSetting

    leader = rec["surrogate"]
    out: dict = {"surrogate": leader, "caution": planning.CAUTION, "errors": {}}
    next_budget = budget or int(np.median([c["trials"] for c in trials.campaign_summary()]))

    def attempt(key, fn):
        try:
            out[key] = fn()
        except UsageError:
            raise
        except Exception as exc:  # a plan section failing must not sink the assessment
            out[key] = None
            out["errors"][key] = f"{type(exc).__name__}: {exc}".splitlines()[0][:300]

    attempt("relevance", lambda: planning.parameter_relevance(
        trials, leader, seed=seed, quick=quick, executor=executor))
    attempt("learning_curve", lambda: planning.learning_curve(
        trials, leader, seed=seed, quick=quick, executor=executor))
    attempt("cost", lambda: planning.cost_projection(
        trials, names, seed=seed, quick=quick, budget=next_budget,
        max_fit_seconds=max_fit_seconds, repeats=1))
    proposals = None
    if propose:
        candidates = {p["name"]: p["freeze_value"] for p in
                      ((out.get("relevance") or {}).get("parameters") or [])
                      if p.get("freeze")}
        frozen = candidates if freeze else {}
        setting = AcquisitionSetting(rec["acquisition"]["name"], rec["acquisition"]["params"])
        try:
            feas_model = (feasibility or {}).get("_model")
            proposals = planning.propose_batch(
                trials, leader, setting, propose, seed=seed, quick=quick,
                frozen=frozen or None,
                success_probability=None if feas_model is None else
                feas_model.success_probability)
            if feas_model is not None:
                from .feasibility import proposals_below
                feasibility["proposals_below_threshold"] = proposals_below(
                    proposals["p_success"])
            batch = dict(proposals.attrs.get("batch") or {})
            proposals.attrs = {}  # the payload below carries it; keep the frame plain
            out["proposals"] = {"k": int(propose), "frozen": frozen,
                                "freeze_candidates": candidates,
                                "freeze_applied": bool(freeze),
                                "batch_method": batch.get("method"),
                                "batch_reference": batch.get("reference"),
                                "batch": batch,
                                "rows": proposals.to_dict(orient="records")}
        except UsageError:
            raise
        except Exception as exc:
            out["errors"]["proposals"] = f"{type(exc).__name__}: {exc}".splitlines()[0][:300]
    return out, proposals


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
    from .execution import IsolatedFailure, run_isolated

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
        if not all(flags) and out.get("converged", True):
            out["converged"] = False
            out["warning"] = (f"sampler not converged on {len(flags) - sum(flags)} of "
                              f"{len(flags)} folds; treat the uncertainty with care")
    return out
