"""The proposed first batch of the next campaign.

See :mod:`advisor.planning` for the references."""

from __future__ import annotations

import math
import warnings
from typing import Callable, Mapping

import numpy as np
import pandas as pd

from ..acquisition import incumbent, AcquisitionSetting, acquisition_values, parse_settings
from ..batching import (BATCH_REFERENCES, MAX_CORRELATION, build_batch, separation_radius,
                        smallest_distance, unit_cube)
from ..errors import UsageError
from ..execution import task_seed
from ..space import ParameterSpace
from ..surrogates import make_surrogate
from ..surrogates.base import latent_predictions

from ._common import _Z90, _check_trials, _fit_all, _uses_groups


def _check_frozen(space: ParameterSpace, frozen: Mapping | None) -> dict:
    frozen = dict(frozen or {})
    for name, value in frozen.items():
        if name not in space.names:
            raise UsageError(f"cannot freeze unknown parameter '{name}'; parameters are: "
                             + ", ".join(space.names), fix="use one of the listed names")
        p = space[name]
        if p.kind == "categorical":
            if str(value) not in p.levels:
                raise UsageError(f"frozen value {value!r} of '{name}' is not one of its "
                                 "levels: " + ", ".join(p.levels), fix="pick a listed level")
            frozen[name] = str(value)
            continue
        v = float(value)
        if not p.low <= v <= p.high:
            raise UsageError(f"frozen value {v} of '{name}' is outside its range "
                             f"{p.low}..{p.high}", fix="pick a value inside the range")
        if p.kind == "integer" and v != round(v):
            raise UsageError(f"frozen value {v} of integer parameter '{name}' is not whole",
                             fix="pick a whole number")
        frozen[name] = int(round(v)) if p.kind == "integer" else v
    return frozen


def _round_continuous(space: ParameterSpace, frame: pd.DataFrame) -> pd.DataFrame:
    """Round continuous settings to about 1e-4 of their range (4 significant digits on
    log scales), so proposals read like settings a person types, not float noise (our
    choice), then clip back inside the bounds."""
    frame = frame.copy()
    for p in space:
        if p.kind != "continuous" or p.high <= p.low:
            continue
        x = frame[p.name].to_numpy(dtype=float)
        if p.log:
            mag = np.floor(np.log10(np.abs(x)))
            x = np.round(x / 10.0 ** (mag - 3)) * 10.0 ** (mag - 3)
        else:
            decimals = max(0, int(math.ceil(-math.log10((p.high - p.low) * 1e-4))))
            x = np.round(x, decimals)
        frame[p.name] = np.clip(x, p.low, p.high)
    return frame


def _snap(space: ParameterSpace, frame: pd.DataFrame, frozen: dict) -> pd.DataFrame:
    """Settings inside the space: levels, whole numbers, bounds, frozen values."""
    frame = space.decode(space.encode(frame, "ordinal"), "ordinal")
    frame = _round_continuous(space, frame)
    for name, value in frozen.items():
        frame[name] = [value] * len(frame)
    return frame


def _setting_keys(space: ParameterSpace, frame: pd.DataFrame) -> list[tuple]:
    """Hashable identity of each setting: ordinal encoding scaled to [0, 1], rounded to
    1e-6 of each range (two settings closer than that are the same trial)."""
    X = space.encode(frame, "ordinal")
    b = space.encoded_bounds("ordinal")
    width = np.where(b[:, 1] > b[:, 0], b[:, 1] - b[:, 0], 1.0)
    Z = np.round((X - b[:, 0]) / width, 6) + 0.0  # + 0.0 folds -0.0 into 0.0
    return [tuple(row) for row in Z]


def _candidate_pool(trials, frozen: dict, n_pool: int, rng: np.random.Generator,
                    n_best: int = 5, spread: float = 0.1) -> pd.DataFrame:
    """Random settings plus perturbations of the best logged trials (our scheme).

    Half the pool is drawn uniformly from the space (``ParameterSpace.sample``); the
    other half perturbs the ``n_best`` best successful trials: numeric settings move by
    a normal step of ``spread`` times the (log10) range, a categorical setting is
    redrawn with probability 0.2.  Everything is then snapped into the space.
    """
    space = trials.space
    n_rand = n_pool - n_pool // 2
    parts = [space.sample(n_rand, rng)]
    best = trials.used.iloc[np.argsort(trials.y, kind="stable")[:n_best]]
    if len(best):
        X = space.encode(best, "ordinal")
        b = space.encoded_bounds("ordinal")
        reps = int(math.ceil((n_pool // 2) / len(best)))
        Xp = np.repeat(X, reps, axis=0)[: n_pool // 2]
        for j, p in enumerate(space):
            if p.kind == "categorical":
                redraw = rng.random(len(Xp)) < 0.2
                Xp[redraw, j] = rng.integers(0, len(p.levels), int(redraw.sum()))
            else:
                Xp[:, j] += rng.normal(0.0, spread * (b[j, 1] - b[j, 0]), len(Xp))
        parts.append(space.decode(np.clip(Xp, b[:, 0], b[:, 1]), "ordinal"))
    pool = pd.concat(parts, ignore_index=True)
    return _snap(space, pool, frozen)


def _distinct_new(space, pool: pd.DataFrame, logged: pd.DataFrame) -> pd.DataFrame:
    seen = set(_setting_keys(space, logged))
    keep = []
    for i, key in enumerate(_setting_keys(space, pool)):
        if key not in seen:
            seen.add(key)
            keep.append(i)
    return pool.iloc[keep].reset_index(drop=True)


class _WithinNextCampaign:
    """A fitted campaign-aware model as the acquisition sees the next campaign: the
    model's prediction for a campaign with no logged trials (``predict(X)``, no labels)
    for the mean, and for the sd the model's ``difference_std(X, x_ref)`` (optional
    protocol member; the campaign GP's): the sd of ``f(x) - f(x_ref)`` within one new
    campaign, ``x_ref`` the incumbent's setting.

    Our choice, and why.  The model was fitted with every trial's campaign (it has
    ``uses_groups``); the next campaign has no trials yet, so its settings are
    predicted without a campaign: the campaign GP's mean is then the population mean,
    and its sd includes the next campaign's *level* -- its unknown offset (``s_c^2``,
    [RW2006] Sec. 2.7; Laird & Ware 1982) and the population level, which the few
    logged campaigns pin down only to about ``s_c^2 / k``.  That level is one number
    for every setting tried in the next campaign, including the incumbent's (the
    plug-in incumbent, :func:`advisor.acquisition.incumbent`: the logged setting with
    the lowest population mean): the improvement of a candidate over it within the
    next campaign, ``(g(x_ref) + c) - (g(x) + c)``, does not contain it.  Left in the
    sd, it acts as independent noise on every candidate: EI, PI and UCB are widened
    alike everywhere (with a level sd well above the function's, EI ranks by the mean
    alone and ignores where the model is unsure about the *function*), the
    local-penalization radii shrink (``s_j``, [GDHL2016]), and independent Thompson
    draws add a separate level to each candidate where a joint draw adds the same one
    to all.  The sd of the difference is the one that keeps what differs between
    candidates (the function, and the campaign's random slopes, which tilt the next
    campaign's response) and drops what they share.  With it, EI against the plug-in
    incumbent ``m(x_ref)`` is the expected improvement over the incumbent's own latent
    value, ``E[max(f(x_ref) - f(x) - xi, 0)]`` for the joint Gaussian posterior -- the
    noisy EI of [LKOB2019] (eq. 7) with the best logged setting alone in place of the
    minimum over all of them (our simplification, one closed form instead of Monte
    Carlo).  ``predict`` (the batch's penalizer reads it) returns the same sd with the
    model's noise added back, as the protocol's ``predict`` includes noise.
    The proposals' 90% intervals are *not* computed from this view: a trial of the
    next campaign will carry its level, so they keep the model's full new-campaign sd.
    Joint draws (``sample_y``) and every other member are the model's own.

    Measured (``benchmarks/planning_groups.py``: sample logs, quick, EI xi=0.01, K = 5,
    seeds 0-4, batches scored by each data sheet's true response): against the full
    new-campaign sd in the acquisition, the batches were the same on the forecast log,
    better in their mean on fermentation (yield 3.06 against 1.03 g/L above 36) and
    worse on moulding (mean warpage 0.068 against 0.048 mm above 0.35, best of batch
    0.007 against 0.000), where the lot level's sd dwarfs the function's and the full
    sd made EI rank by the mean alone.  A one-shot score rewards exploitation by
    construction; the choice rests on the argument above.
    """

    def __init__(self, model, x_ref):
        self._model = model
        self._x_ref = np.asarray(x_ref, dtype=float)

    def __getattr__(self, name):
        if name.startswith("__") or name in ("_model", "_x_ref", "latent_predict"):
            raise AttributeError(name)
        return getattr(self._model, name)

    def predict_latent(self, X):
        mean, full = latent_predictions(self._model, X)
        diff = np.asarray(self._model.difference_std(X, self._x_ref), dtype=float)
        # zero at the reference itself: floored as latent_predictions floors (1e-12 of
        # the variance), so the protocol's positive sd holds
        return mean, np.maximum(diff, 1e-6 * full)

    def predict(self, X):
        mean, std = self.predict_latent(X)
        noise = float(getattr(self._model, "noise_std_", 0.0) or 0.0)
        return mean, np.sqrt(std ** 2 + noise ** 2)


def _acquisition_view(model, X_logged):
    """The model the acquisition and the batch read: :class:`_WithinNextCampaign`
    (reference: the logged setting with the lowest latent mean, the incumbent's) for a
    model with ``uses_groups`` and a ``difference_std`` method, otherwise the model
    itself (then called exactly as before)."""
    if not (_uses_groups(model) and callable(getattr(model, "difference_std", None))):
        return model
    mean, _ = latent_predictions(model, X_logged)
    return _WithinNextCampaign(model, np.asarray(X_logged, dtype=float)[int(np.argmin(mean))])


def _as_setting(setting) -> AcquisitionSetting:
    """An :class:`AcquisitionSetting` from itself, its text form (``"ei:xi=0.01"``) or
    its ``to_dict`` form."""
    if isinstance(setting, AcquisitionSetting):
        return setting
    if isinstance(setting, Mapping):
        return AcquisitionSetting.from_dict(dict(setting))
    parsed = parse_settings(str(setting))
    if len(parsed) != 1:
        raise UsageError(f"'{setting}' names {len(parsed)} acquisition settings; a batch "
                         "is proposed with exactly one", fix="give one setting, e.g. ei:xi=0.01")
    return parsed[0]


def propose_batch(trials, surrogate_name: str, setting, k: int, *, seed: int,
                  quick: bool = False, frozen: Mapping | None = None,
                  make: Callable = make_surrogate, n_pool: int | None = None,
                  campaign_label: str = "next",
                  success_probability: Callable | None = None,
                  fitted=None) -> pd.DataFrame:
    """The first ``k`` settings of the next campaign.

    The surrogate is fitted once on every successful logged trial (warm start); its
    hyperparameters stay fixed for the whole batch.  A model with ``uses_groups`` (the
    campaign GP) is told each trial's campaign and predicts the candidates as settings
    of a new campaign (no labels); the acquisition's sd is that of the difference to
    the incumbent within the next campaign, so the campaign's unknown level (common
    to all its settings) drops out of it, while the 90% intervals keep it
    (:class:`_WithinNextCampaign` gives the reason).  A candidate pool (random settings
    plus perturbations of the best logged trials, all snapped to levels, whole numbers,
    bounds and frozen values; logged settings and duplicates removed) is scored by the
    acquisition setting, and the batch is built by :func:`advisor.batching.build_batch`:
    local penalization [GDHL2016] for EI, PI and UCB, distinct joint posterior draws
    [KKSP2018] for Thompson sampling, so the proposals differ by construction.  Our
    choice: a finite candidate pool instead of a continuous inner optimizer (robust for
    integer and categorical spaces; no point is ever off a level or a whole number).

    By default every parameter varies; ``frozen`` holds the given parameters fixed
    (the assessment passes its freeze candidates only when asked to, ``freeze=True``).

    Predicted mean and 90% interval (mean +- 1.645 std of a new observation, noise
    included; for a campaign-aware model, of a new campaign, its level's variance
    included) come from the model fitted on the logged trials, converted to the
    user's units and direction.

    Parameters
    ----------
    trials : TrialTable
    surrogate_name : str
    setting : AcquisitionSetting, str or dict
        Anything with ``name`` and ``params`` (e.g. ``ei`` with ``xi``, ``ucb`` with
        ``beta``).
    k : int
        Batch size (at least 1).
    seed : int
    quick : bool
        Pool of 1000 candidates instead of 2000 (joint Thompson draws over the pool
        cost O(pool^3), so the pool stays modest).
    frozen : dict, optional
        ``{parameter: value}`` held fixed in every proposal.
    make : callable
    n_pool : int, optional
        Candidate-pool size.
    campaign_label : str
        Value written to the campaign column.
    success_probability : callable, optional
        ``settings frame -> P(success)`` from :mod:`advisor.feasibility`: the acquisition
        is weighted by it (candidates below ``batching.MIN_SUCCESS`` left out) and each
        proposal gets a ``p_success`` column.
    fitted : (model, encoding), optional
        The surrogate already fitted on every successful trial with ``make`` and
        ``quick`` (the assessment passes the relevance's full-data fit, so the plan fits
        the model once); None fits it here.

    Returns
    -------
    DataFrame
        The log's columns (without the internal ``_line``) in the log's order -- the
        parameters filled, the objective and status empty, campaign ``campaign_label``,
        order 1..k, other columns empty -- followed by ``predicted_mean``,
        ``predicted_low_90``, ``predicted_high_90`` and ``acquisition``.  Fewer than
        ``k`` rows (with a warning) when the space holds fewer new distinct settings.
        ``frame.attrs["batch"]`` says how the batch was built: ``method`` (a key of
        :data:`advisor.batching.BATCH_REFERENCES`), ``reference``, ``lipschitz``,
        ``draws``, ``separation`` (the guard of :func:`advisor.batching.build_batch`:
        ``{"max_correlation", "radius_length_scales"}``, or None when the model reports
        no length scales or the method is not local penalization), ``hyperparameters``
        and ``diversity`` (see :func:`batch_diversity`).
    """
    _check_trials(trials)
    if int(k) < 1:
        raise UsageError(f"k={k}: the batch needs at least one proposal", fix="pass k >= 1")
    k = int(k)
    setting = _as_setting(setting)
    space = trials.space
    frozen = _check_frozen(space, frozen)
    rng = np.random.default_rng(task_seed(seed, "propose", "pool"))
    pool = _candidate_pool(trials, frozen, n_pool or (1000 if quick else 2000), rng)
    pool = _distinct_new(space, pool, trials.used)
    if len(pool) < k:
        warnings.warn(f"only {len(pool)} new distinct settings found for a batch of {k}",
                      RuntimeWarning, stacklevel=2)
        k = len(pool)

    model, encoding = fitted if fitted is not None else _fit_all(
        make, surrogate_name, task_seed(seed, "propose", "fit", 0), quick, trials)
    X_pool = space.encode(pool, encoding)
    # A campaign-aware model is fitted with the logged campaigns and reads the pool as
    # a new campaign; its shared level is left out of the acquisition (_WithinNextCampaign).
    X_logged = space.encode(trials.used, encoding)
    acq_model = _acquisition_view(model, X_logged)
    # the plug-in incumbent (lowest posterior mean at the logged settings), as the
    # acquisition module prescribes for latent-std EI
    y_best = float(incumbent(acq_model, X_logged))
    y_scale = float(np.std(trials.y)) or 1.0
    acq_rng = np.random.default_rng(task_seed(seed, "propose", "acquisition"))
    p_pool = (None if success_probability is None else
              np.asarray(success_probability(pool), dtype=float))
    batch = (build_batch(acq_model, setting, X_pool, y_best, k, acq_rng, y_scale=y_scale,
                         bounds=space.encoded_bounds(encoding), p_success=p_pool)
             if k else None)
    chosen = [int(i) for i in batch.indices] if batch is not None else []
    # Reported utility: under the warm-start model (no penalty), so the column reads
    # the same for every row; for Thompson and random it is one more draw.
    acq_values = (acquisition_values(acq_model, setting, X_pool[chosen], y_best,
                                     np.random.default_rng(task_seed(seed, "propose", "value")),
                                     y_scale)[0] if chosen else np.zeros(0))
    picked = pool.iloc[chosen].reset_index(drop=True)
    mean, std = (model.predict(X_pool[chosen]) if chosen
                 else (np.zeros(0), np.zeros(0)))
    frame = _proposal_frame(trials, picked, np.asarray(mean, float), np.asarray(std, float),
                            acq_values, campaign_label)
    if p_pool is not None:
        frame["p_success"] = p_pool[chosen]
    method = batch.method if batch is not None else "single"
    frame.attrs["batch"] = {
        "method": method, "reference": BATCH_REFERENCES[method],
        "lipschitz": None if batch is None or batch.lipschitz is None
        else float(batch.lipschitz),
        "draws": None if batch is None else batch.draws,
        "separation": None if batch is None or batch.min_separation is None
        else {"max_correlation": float(MAX_CORRELATION),
              "radius_length_scales": separation_radius(MAX_CORRELATION)},
        "hyperparameters": "fitted once on the logged trials; fixed within the batch",
        "diversity": batch_diversity(space, picked, seed=seed, frozen=frozen)}
    return frame


def unit_coordinates(space: ParameterSpace, frame: pd.DataFrame) -> np.ndarray:
    """Settings as points of the unit cube: numeric parameters scaled to [0, 1] on their
    (log10) range, a categorical parameter as its one-hot block divided by sqrt(2), so
    two different levels are 1 apart (our convention for batch distances)."""
    X = space.encode(frame, "onehot")
    U = unit_cube(X, space.encoded_bounds("onehot"))
    j = 0
    for p in space:
        if p.kind == "categorical":
            U[:, j:j + len(p.levels)] /= math.sqrt(2.0)
            j += len(p.levels)
        else:
            j += 1
    return U


def batch_diversity(space: ParameterSpace, picked: pd.DataFrame, *, seed: int,
                    frozen: Mapping | None = None, n_random: int = 500) -> dict:
    """Smallest pairwise unit-cube distance of the batch (:func:`unit_coordinates`), and
    the mean of the same over ``n_random`` uniform random batches of the same size in
    the same space (frozen parameters held at the same values)."""
    k = len(picked)
    if k < 2:
        return {"min_distance": None, "random_batch_min_distance": None, "ratio": None}
    d = smallest_distance(unit_coordinates(space, picked[space.names]))
    rng = np.random.default_rng(task_seed(seed, "propose", "diversity"))
    ref = []
    for _ in range(n_random):
        r = space.sample(k, rng)
        for name, value in (frozen or {}).items():
            r[name] = [value] * k
        ref.append(smallest_distance(unit_coordinates(space, r)))
    ref_mean = float(np.mean(ref))
    return {"min_distance": d, "random_batch_min_distance": ref_mean,
            "ratio": d / ref_mean if ref_mean > 0 else None}


def _proposal_frame(trials, picked, mean, std, acq_values, campaign_label) -> pd.DataFrame:
    k = len(picked)
    sign = trials.sign
    lo_raw = sign * (mean - _Z90 * std)
    hi_raw = sign * (mean + _Z90 * std)
    data = {}
    for col in [c for c in trials.frame.columns if c != "_line"]:
        if col in trials.space.names:
            data[col] = picked[col].to_numpy()
        elif col == trials.objective:  # None, not NaN: empty in CSV, null in JSON
            data[col] = [None] * k
        elif col == trials.campaign:
            data[col] = [campaign_label] * k
        elif col == trials.order:
            data[col] = np.arange(1, k + 1)
        else:  # status and any other column: left for the team to fill in
            data[col] = [None] * k
    data["predicted_mean"] = sign * mean
    data["predicted_low_90"] = np.minimum(lo_raw, hi_raw)
    data["predicted_high_90"] = np.maximum(lo_raw, hi_raw)
    data["acquisition"] = np.asarray(acq_values, dtype=float)
    return pd.DataFrame(data)


