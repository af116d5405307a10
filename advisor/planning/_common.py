"""Constants and small helpers the planning modules share."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from scipy import stats

from ..errors import UsageError
from ..space import ParameterSpace


#: Shown beside every proposal, in every output that carries proposals.
CAUTION = (
    "These settings are statistical suggestions computed from past trials, not "
    "instructions. Try them only within validated safe operating limits and under the "
    "site's procedures, local codes and licensed practice. The tool knows nothing of "
    "constraints, hazards or limits it was not given, and it does not judge whether a "
    "setting is safe.")

#: Shown beside the parameter-relevance table.
RELEVANCE_CAUTION = (
    "A small effect is small only in the region the logged trials cover and as the "
    "surrogate reads it there; outside that region, or after a change of material, "
    "equipment or other parameters, a frozen parameter may matter again. Freezing is a "
    "suggestion to review with the people who know the process.")

#: Freeze rule, part 1: the upper end of the bootstrap interval of the total Sobol index
#: must lie below this (common practice in screening: 0.05 of the output variance).
TOTAL_EFFECT_FREEZE = 0.05
#: Freeze rule, part 2: the *upper* end of the permutation-importance interval (increase
#: in held-out MSE as a share of the objective's variance, t-interval over folds) must
#: lie below this margin: positive evidence that the effect is small, not merely no
#: evidence that it is large.  For independent inputs, permuting X_j raises the MSE by
#: twice the variance its total effect explains (Gregorutti, Michel & Saint-Pierre 2017,
#: Statistics and Computing 27, Prop. 1; from memory), so the margin is
#: 2 x TOTAL_EFFECT_FREEZE: the same 5%-of-variance effect on both scales.
PERMUTATION_FREEZE = 2 * TOTAL_EFFECT_FREEZE

#: Central confidence level of the bootstrap and permutation intervals.
_INTERVAL_LEVEL = 0.95
#: Two-sided 90% predictive interval of a proposal: mean +- this many std.
_Z90 = float(stats.norm.ppf(0.95))



def _encoding(model) -> str:
    return getattr(model, "input_encoding", "onehot")


def _check_trials(trials):
    if trials.n_used < 2:
        raise UsageError(f"only {trials.n_used} successful trials; planning needs at least 2",
                         fix="add successful trials to the log")


def _plain(value):
    """A numpy scalar as a plain Python value (for JSON)."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def _fnum(value) -> float | None:
    v = float(value)
    return v if math.isfinite(v) else None


def _feature_blocks(space: ParameterSpace, encoding: str) -> list[np.ndarray]:
    """Encoded column indices of each parameter (a one-hot block for a categorical)."""
    blocks, j = [], 0
    for p in space:
        width = len(p.levels) if (p.kind == "categorical" and encoding == "onehot") else 1
        blocks.append(np.arange(j, j + width))
        j += width
    return blocks


def _best_row(trials) -> pd.Series:
    return trials.used.iloc[int(np.argmin(trials.y))]


def _uses_groups(model) -> bool:
    """Whether ``model`` takes campaign labels (the optional ``uses_groups`` member of
    the surrogate protocol, :mod:`advisor.surrogates.base`)."""
    return bool(getattr(model, "uses_groups", False))


def _fit_model(model, X, y, groups=None):
    """``model.fit(X, y, groups=groups)`` for a model with ``uses_groups``, otherwise
    exactly ``model.fit(X, y)`` (a model without campaign labels is called as before).

    Why the labels: cross-validation tells such a model each row's campaign
    (:func:`advisor.assessment._folds._fit_predict_task`); fitted without them, a
    campaign GP pools every campaign as one, the offsets between campaigns become
    noise, and the planning would read a different model from the one that was
    ranked."""
    if groups is not None and _uses_groups(model):
        return model.fit(X, y, groups=groups)
    return model.fit(X, y)


def _predict_model(model, X, groups=None):
    """``model.predict(X, groups=groups)`` for a model with ``uses_groups`` given labels
    (held-out logged rows of known campaigns), otherwise exactly ``model.predict(X)``
    (settings of no logged campaign: for the campaign GP the prediction of a new
    campaign, mean without offset, sd with the unknown offset's variance)."""
    if groups is not None and _uses_groups(model):
        return model.predict(X, groups=groups)
    return model.predict(X)


def _fit(make, name, seed, quick, X, y, groups=None):
    """A fresh surrogate fitted on ``X``, ``y`` (with ``groups`` when it uses them)."""
    return _fit_model(make(name, seed=seed, quick=quick), X, y, groups)


def _fit_all(make, name, seed, quick, trials):
    """A surrogate fitted on every successful trial (told each trial's campaign when it
    has ``uses_groups``), and the encoding it asked for."""
    model = make(name, seed=seed, quick=quick)
    encoding = _encoding(model)
    _fit_model(model, trials.space.encode(trials.used, encoding), trials.y, trials.groups)
    return model, encoding
