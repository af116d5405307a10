"""The stages after cross-validation: which models to backtest, the backtest itself,
the failure model and the next-campaign plan.  Each is a function the orchestrator
calls (and the cost benchmark times); a section that fails is recorded, never fatal."""

from __future__ import annotations

import inspect

import numpy as np

from .. import decision
from ..decision import DEFAULT_ACQUISITION
from ..errors import UsageError
from ..logs import TrialTable
from ..surrogates import make_surrogate


def _as_trials(trials, load_options: dict) -> TrialTable:
    """A TrialTable as given, or read from a path / DataFrame with ``load_options``."""
    if isinstance(trials, TrialTable):
        if load_options:
            raise UsageError("assess got a loaded TrialTable and also log options ("
                             + ", ".join(sorted(load_options)) + ")",
                             fix="give the options to load_trials, or pass the path or "
                                 "DataFrame to assess")
        return trials
    from ..logs import load_trials

    unknown = set(load_options) - set(inspect.signature(load_trials).parameters)
    if unknown:
        raise UsageError("assess has no option " + ", ".join(sorted(unknown)),
                         fix="check the spelling (see help(advisor.assess) and "
                             "help(advisor.load_trials))")
    return load_trials(trials, **load_options)



def _feasibility(trials, scheme: str, *, seed, quick, executor):
    """The model of trial failure (``None`` when no trial failed); never fatal."""
    from ..feasibility import assess_feasibility

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
                   "guards; when no model passed the guards, the leader the recommendation "
                   "names; the other models cannot change the recommendation")


def _backtest_candidates(ranking, quick: bool) -> list[str]:
    """The models that can matter: the leader, the models close to it (the tie group
    and the pair candidates, :func:`advisor.decision.close_candidates`), and the default
    GP when it passes the guard rails.  When no model passes them, the leader is the
    model the recommendation names all the same (:mod:`advisor.ranking`), so it is
    backtested alone: its acquisition setting is then tested, not an untested default.
    Backtesting refits a model at every step, so the grid is kept to these."""
    t = ranking.table
    working = t[(t["status"] == "ok")]
    ok = working[working["guard_coverage"].astype(bool) & working["guard_order"].astype(bool)]
    cap = 2 if quick else 3
    names = ok["surrogate"].tolist()
    if not names:
        return [ranking.leader] if ranking.leader in working["surrogate"].tolist() else []
    if ranking.leader not in names:
        out = names[:1]
    else:
        out = ([ranking.leader] + decision.close_candidates(t, ranking.leader))[:cap]
    if "gp" in names and "gp" not in out:
        out.append("gp")
    return out


def _settings(acquisitions, quick: bool):
    from ..acquisition import default_settings, parse_settings

    from ..acquisition import AcquisitionSetting

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
                  failure_model=None, runs=None):
    from ..backtest import FailureModel, plan_for, run_backtest

    plan = plan_for(quick)
    if runs is not None:   # whole stand-ins, each run from plan.sim_seeds starts
        plan = plan_for(quick, sim_functions=max(2, -(-int(runs) // plan.sim_seeds)))
    out = run_backtest(trials, candidates, settings, seed=seed, quick=quick,
                       budget=budget, batch=batch, executor=executor,
                       make=_quick_model, plan=plan,
                       failures=None if failure_model is None else FailureModel(failure_model))
    out["candidates_rule"] = _CANDIDATE_RULE
    return out


_COST_SCOPE = ("projected for the models that can be recommended (the leader, the models "
               "close to it and the default GP, as backtested); every model's measured fit "
               "seconds per fold are in the ranking")
_COST_SCOPE_FULL = "every model that passed cross-validation"


def _cost_names(names, ranking, rec, quick: bool) -> list[str]:
    """The models whose running cost is projected: only those that can be recommended,
    in both modes.  Timing a model at the log's size and beyond is the dearest part of a
    plan: 30 of 120 CPU s of the quick 500-trial case (stop 24), and 45.6 of 54.9 s of
    the thorough 138-trial plan's wall (stop 27: the SGHMC network's thorough chain at
    four sizes 41 s, the neural process 14 s, for models that the recommendation cannot
    name).  Every model's measured fit seconds per fold stay in the ranking."""
    keep = set(_backtest_candidates(ranking, quick)) | {rec["surrogate"]}
    return [n for n in names if n in keep]


def _plan(trials, rec, *, names, seed, quick, budget, propose, max_fit_seconds, executor,
          freeze=False, feasibility=None, cost_scope: str | None = None):
    """Relevance, learning curve and cost projection for the recommended surrogate, and
    the proposed first batch.  Each part that fails is recorded, never fatal."""
    from .. import planning
    from ..acquisition import AcquisitionSetting

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

    # the relevance's full fit runs as one task of the learning curve's grid (workers
    # busy instead of idle while it fits: advisor.planning._joint)
    from ..planning._joint import fit_and_curve

    joint = {}

    def joint_part(key):
        if not joint:
            joint["fitted"], joint["curve"] = fit_and_curve(
                trials, leader, seed=seed, quick=quick, executor=executor)
        value = joint[key]
        if isinstance(value, BaseException):
            raise value
        return value

    attempt("relevance", lambda: planning.parameter_relevance(
        trials, leader, seed=seed, quick=quick, executor=executor,
        fitted=joint_part("fitted")))
    attempt("learning_curve", lambda: joint_part("curve"))
    attempt("cost", lambda: planning.cost_projection(
        trials, names, seed=seed, quick=quick, budget=next_budget,
        max_fit_seconds=max_fit_seconds, repeats=1, executor=executor))
    if out.get("cost") is not None:
        out["cost"]["scope"] = cost_scope or _COST_SCOPE_FULL
    proposals = None
    if propose:
        candidates = {p["name"]: p["freeze_value"] for p in
                      ((out.get("relevance") or {}).get("parameters") or [])
                      if p.get("freeze")}
        frozen = candidates if freeze else {}
        setting = AcquisitionSetting(rec["acquisition"]["name"], rec["acquisition"]["params"])
        try:
            feas_model = (feasibility or {}).get("_model")
            full_fit = joint.get("fitted")
            proposals = planning.propose_batch(
                trials, leader, setting, propose, seed=seed, quick=quick,
                frozen=frozen or None,
                # the relevance's full-data fit (same model, trials and budget): the
                # plan fits the leader on all trials once
                fitted=None if isinstance(full_fit, BaseException) else full_fit,
                success_probability=None if feas_model is None else
                feas_model.success_probability)
            if feas_model is not None:
                from ..feasibility import proposals_below
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

