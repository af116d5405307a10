"""The relevance's full-data fit and the learning curve's fits in one task grid.

:func:`advisor.planning.parameter_relevance` starts with one fit of the surrogate on every
trial, which its half-sample refits start from; the learning curve's fits do not depend
on it.  Run one after the other, that full fit ran alone in the main process while the
worker processes idled: 9.0 of the quick 500-trial command's 62 s (a campaign GP told
its four campaigns; py-spy, stop 28).  Here it is one task of the learning curve's grid,
so the workers fit it beside the curve's 30 fits.  Results are the same as run apart
(every fit has its own task seed); only where the full fit runs changes.
"""

from __future__ import annotations

from typing import Callable

from ..execution import Executor, task_seed
from ..surrogates import make_surrogate

from ._common import _encoding, _fit_model
from ._learning import _curve_result, _curve_tasks, _learning_task


def _joint_task(kind, args):
    """A learning-curve fit, or the relevance's full fit; a failure of the full fit is
    returned, not raised, so that the curve's results still arrive (the relevance then
    records it, as when it fits the model itself)."""
    if kind == "curve":
        return _learning_task(*args)
    make, name, seed, quick, X, y, groups = args
    try:
        model = make(name, seed=seed, quick=quick)
        _fit_model(model, X, y, groups)   # a user model's fit may return None
        return model
    except Exception as exc:  # recorded by the relevance section, never fatal
        return exc


def fit_and_curve(trials, surrogate_name: str, *, seed: int, quick: bool,
                  executor: Executor | None = None, make: Callable = make_surrogate):
    """``(fitted, curve)``: the relevance's full fit as ``(model, encoding)`` (for
    ``parameter_relevance(fitted=)``) and the learning curve's dict; either may be the
    exception that stopped it instead (the caller raises it where the section would
    have: ``advisor.assessment._stages._plan`` records it as that section's error)."""
    probe = make(surrogate_name, seed=0, quick=quick)
    encoding = _encoding(probe)
    X = trials.space.encode(trials.used, encoding)
    fit_args = (make, surrogate_name, task_seed(seed, "relevance", "all"), quick, X,
                trials.y, trials.groups)
    try:
        tasks, ctx = _curve_tasks(trials, surrogate_name, seed=seed, quick=quick, make=make)
        curve_error = None
    except Exception as exc:  # a UsageError included: raised where the section runs
        tasks, ctx, curve_error = [], None, exc
    out = (executor or Executor()).map(
        _joint_task, [("fit", fit_args)] + [("curve", t) for t in tasks],
        label="relevance fit and learning curve")
    model = out[0]
    fitted = model if isinstance(model, Exception) else (model, encoding)
    curve = curve_error if curve_error is not None else _curve_result(ctx, out[1:])
    return fitted, curve
