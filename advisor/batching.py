"""Batches of trials that differ by construction, from one fitted model.

A batch of ``q`` settings is chosen from a finite candidate set with the model fitted
once: its hyperparameters stay fixed within the batch and nothing is refitted on
fantasized observations (the kriging believer refits q - 1 times and, on noisy logs,
its fantasies barely move the model, so its batches cluster).

Methods, by acquisition setting:

* **EI, PI, UCB: local penalization** [GDHL2016]_.  The first point maximizes the
  (positive) acquisition ``g(a(x))``; every chosen point ``x_j`` then multiplies the
  acquisition by a *penalizer* ``phi(x; x_j)``, the probability that ``x`` lies outside
  the ball around ``x_j`` that cannot hold the minimum given a Lipschitz constant
  ``L`` (their Sec. 3.1, Eq. 3, mirrored for minimization)::

      r_j = (f(x_j) - M) / L,   f(x_j) ~ N(mu_j, s_j^2)
      phi(x; x_j) = P(||x - x_j|| > r_j) = Phi((M + L ||x - x_j|| - mu_j) / s_j)

  with ``M`` the lowest value of ``f`` (estimated as the incumbent or the lowest
  predicted mean on the candidates, whichever is lower) and ``(mu_j, s_j)`` the
  posterior mean and std of ``f`` at ``x_j`` from the ``moments`` callable (the latent
  std when the model offers one: see :func:`latent_moments`).  The penalized
  acquisition is maximized greedily, ``q`` times (their Alg. 1), in log space.
  Transform ``g`` (their Sec. 3.2): EI and PI are already >= 0 and are used as they
  are; for UCB ``g(a) = softplus((best - LCB) / y_scale)`` (the paper's
  ``log(1 + e^z)``; the shift by the incumbent and the division by ``y_scale`` are our
  choices, so that the transform does not depend on the objective's units).
  ``L`` and the distance: the paper (Sec. 3.3) takes one constant, the largest
  gradient norm of the mean, and the Euclidean distance.  We use a per-axis form
  (our choice): ``g_k``, the *mean* absolute slope of the posterior mean along unit-cube
  axis ``k`` (forward differences with step 0.001 of the axis, at most 400 candidates,
  no gradients needed, so it works for every surrogate; for a piecewise-constant model
  such as a forest it is the mean variation per unit length), and
  ``L ||x - x_j||`` becomes ``||g * (x - x_j)||``.  With equal slopes on every axis this
  is the paper's form with ``L = g``; we report ``L`` = the mean of ``g_k`` and the
  weights ``g_k / L`` (:attr:`Batch.axis_weights`).  Why per axis: with one constant,
  a batch escapes the penalty by moving along parameters the model finds irrelevant,
  and four proposals that differ only there are one experiment four times.  Measured
  with ``benchmarks/next_campaign.py``'s loop (EI xi=0.01, q = 4, 24 trials, GP, 32
  paired replicates, seed 0; normalized regret, random search = 1): on Hartmann-3 the
  batches shared the relevant coordinate to within 0.03 and spread along the one the
  model ignored, and the batch campaign ended at 0.34 against sequential EI's 0.02;
  per axis, 0.12.  On Branin, where both axes matter, 0.30 and 0.29.  Why the mean
  and not the largest slope: the largest picks up the wiggles a model fits to noise,
  and the exclusion radii ``(mu_j - M) / L`` shrink to nothing (on the three sample
  logs the largest pairwise slope left batches whose closest pair was 2-23% as far
  apart as a random batch's); the root-mean-square slope did worse than the mean on
  two of three functions (16 replicates: Hartmann-3 0.18 vs 0.13, Branin 0.54 vs
  0.22; log Goldstein-Price 0.43 vs 0.59).  A step of 0.001 measured no worse than
  0.01 (Branin 0.29 vs 0.39).  A flat mean on every axis gives
  ``g_k = 1e-7 * y_scale``.  Distances are in the unit cube: each encoded column scaled
  by its bounds.

  **Separation guard** (our addition, for models that report fitted length scales,
  ``length_scales_``, as the Matérn GP does, or wrap a GP that does, ``gp_``, as the
  warped GP does; the campaign GP does not report them yet): a candidate closer to a chosen member than
  ``separation_radius()`` ~= 0.37 length scales (``||(x - x_j) / ell|| < 0.37``, where
  the fitted Matérn-5/2 kernel's prior correlation exceeds :data:`MAX_CORRELATION` =
  0.9) cannot join the batch; when every candidate is that close (length scales longer
  than the cube), or when the only candidates beyond it are worth less than the median
  candidate (their penalized utility below the median raw utility of the open
  candidates), the closer half is left out instead.  The second condition came with stop
  29: on the fermentation sample log the campaign GP's length scales are 2-44 unit
  cubes, the guard's radius then leaves only a far corner of the two shortest axes, and
  the second of five proposals had EI 2.6e-20 (predicted yield 23.6 g/l against the
  first's 41.7, its 90% interval 19-28) where the next three, taken after the fallback,
  had 0.003-0.006; a batch member worse than half of all random candidates is not a
  trial worth running.  Why: the published penalizer
  cannot keep a near-duplicate out at the model's minimum.  There ``mu_j`` is ``M``,
  the radius ``(mu_j - M) / L`` is 0 and a point next to ``x_j`` keeps
  ``Phi(0) = 1/2`` of its acquisition, so when the acquisition is flat near ``x_j`` the
  next pick repeats the first.  This is
  the method as published, not a slip: ``M`` (the paper's best value of the model; ours
  is the lower of it and the incumbent, so our radii are never smaller) and the latent
  ``s_j`` (the paper's posterior std of ``f``) follow the paper, and its ``L``, the
  largest gradient norm, is at least our mean slope, which would shrink the radii
  further.  Measured on the next-campaign loop (Hartmann-3, EI xi=0.01, q = 4, 30
  trials, 320 paired campaigns, ``benchmarks/batch_margin.py``): without the guard the
  first pick's radius had median 0.028 and lower quartile 0.0009 (per-axis weighted
  unit cube), and 207 of 2,240 batches had two members closer than 0.02 in the unit
  cube (a random batch's closest pair: median 0.34), 25 closer than 0.002; with the
  guard none, and batch minus sequential normalized regret fell from 0.110 +- 0.033 to
  0.002 +- 0.025 (campaigns left in a local basin: 18% -> 14%; sequential 11%).  On the
  three sample logs the proposals' closest pair went from 7-37% of a random batch's to
  44-107% (GP, quick, K = 5, EI and UCB, seeds 0 and 1).  A guard in length scales
  rather than in the unit cube, because the length scale is the model's own measure of
  how far apart two trials must be to tell it different things; the bound 0.9 was set
  before measuring (common practice for "nearly the same experiment", not tuned).
  Sensitivity on the same 320 pairs: 0.75 (0.63 length scales) 0.028 +- 0.029, 0.97
  (0.19 length scales) 0.109 +- 0.033, as without the guard although only 1 of 2,240
  batches then had a pair nearer than 0.02: the gap came from members within about a
  third of a length scale, not only from literal duplicates.
* **Thompson sampling: distinct joint draws** [KKSP2018]_ [HLRPA2017]_.  Each member
  of the batch minimizes its own joint posterior draw over the candidates (a fresh call
  of :func:`advisor.acquisition.acquisition_values`), among candidates not yet taken.
* **Random search**: ``q`` distinct candidates uniformly at random.

References
----------
.. [GDHL2016] González, J., Dai, Z., Hennig, P. & Lawrence, N. D. (2016). Batch
   Bayesian optimization via local penalization. AISTATS, PMLR 51, 648-657 (Eq. 3 the
   penalizer, Alg. 1, Sec. 3.3 the Lipschitz constant).
.. [KKSP2018] Kandasamy, K., Krishnamurthy, A., Schneider, J. & Póczos, B. (2018).
   Parallelised Bayesian optimisation via Thompson sampling. AISTATS, PMLR 84, 133-142
   (synchronous batch: one posterior draw per batch member).
.. [HLRPA2017] Hernández-Lobato, J. M., Requeima, J., Pyzer-Knapp, E. O. &
   Aspuru-Guzik, A. (2017). Parallel and distributed Thompson sampling for large-scale
   accelerated exploration of chemical space. ICML, PMLR 70, 1470-1479.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
from scipy.optimize import brentq
from scipy.special import log_ndtr

from .acquisition import AcquisitionSetting, acquisition_values
from .surrogates.base import check_predictions

__all__ = ["Batch", "build_batch", "latent_moments", "lipschitz_estimate", "axis_slopes",
           "penalizer_log", "unit_cube", "smallest_distance", "BATCH_REFERENCES",
           "weight_by_success", "MIN_SUCCESS", "MAX_CORRELATION", "separation_radius"]

#: method name -> short citation, for the report.
BATCH_REFERENCES = {
    "local_penalization": "local penalization (González, Dai, Hennig & Lawrence 2016)",
    "thompson_draws": "distinct joint Thompson draws (Kandasamy, Krishnamurthy, "
                      "Schneider & Póczos 2018)",
    "random": "distinct uniform random picks",
    "single": "the acquisition's argmax (a batch of one)",
}

_LIPSCHITZ_POINTS = 400


@dataclass
class Batch:
    """Indices chosen (into the candidates, in pick order) and how.

    ``method`` is a key of :data:`BATCH_REFERENCES`; ``lipschitz`` the constant used by
    local penalization (in objective units per unit-cube distance: the mean of the
    per-axis slopes), else None; ``axis_weights`` each unit-cube axis's slope divided by
    ``lipschitz`` (the penalizer's distance is ``||axis_weights * (x - x_j)||``), else
    None; ``draws`` how Thompson draws were made (``"joint"``/``"independent"``), else
    None.
    """

    indices: np.ndarray
    method: str
    lipschitz: float | None = None
    draws: str | None = None
    axis_weights: np.ndarray | None = None
    min_separation: np.ndarray | None = None


#: Separation guard of local penalization: no two members of a batch whose prior
#: correlation under the model's fitted Matérn-5/2 kernel exceeds this (see
#: :func:`separation_radius` and the module docstring).
MAX_CORRELATION = 0.9


def separation_radius(max_correlation: float = MAX_CORRELATION) -> float:
    """Distance ``r`` in length-scale units at which the Matérn-5/2 correlation
    ``(1 + sqrt5 r + 5 r^2 / 3) exp(-sqrt5 r)`` (Rasmussen & Williams 2006, Eq. 4.17)
    falls to ``max_correlation`` (0.9 -> about 0.37)."""
    c = float(max_correlation)
    if not 0.0 < c < 1.0:
        raise ValueError(f"max_correlation={c} must be in (0, 1)")
    s5 = np.sqrt(5.0)
    return float(brentq(lambda r: (1 + s5 * r + 5 * r * r / 3) * np.exp(-s5 * r) - c,
                        0.0, 50.0))


def latent_moments(model) -> Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]]:
    """Posterior mean and std of the latent function, as a callable ``X -> (mean, std)``.

    Uses the model's ``latent_predict`` when it has one (the GP: std without observation
    noise), otherwise its ``predict`` (noise included: all the protocol guarantees).
    """
    fn = getattr(model, "latent_predict", None)
    return fn if callable(fn) else model.predict


def unit_cube(X: np.ndarray, bounds: np.ndarray | None) -> np.ndarray:
    """Columns of ``X`` scaled to [0, 1] by ``bounds`` (d, 2); constant columns -> 0."""
    X = np.asarray(X, dtype=float)
    if bounds is None:
        return X
    b = np.asarray(bounds, dtype=float).reshape(-1, 2)
    width = np.where(b[:, 1] > b[:, 0], b[:, 1] - b[:, 0], 1.0)
    return (X - b[:, 0]) / width


def smallest_distance(U: np.ndarray) -> float:
    """Smallest Euclidean distance between two rows of ``U`` (inf for fewer than 2)."""
    U = np.asarray(U, dtype=float)
    if len(U) < 2:
        return float("inf")
    D = np.sqrt(((U[:, None, :] - U[None, :, :]) ** 2).sum(-1))
    return float(D[np.triu_indices(len(U), 1)].min())


def lipschitz_estimate(U: np.ndarray, mean: np.ndarray, rng: np.random.Generator,
                       floor: float = 0.0, quantile: float = 0.5) -> float:
    """The ``quantile`` (default the median; 1 = the largest) of the slopes
    ``|mean_a - mean_b| / ||U_a - U_b||`` between rows (a subset of at most 400 drawn
    with ``rng``), a finite-difference stand-in for the gradient norm of [GDHL2016]_
    Sec. 3.3: one constant for every direction.  :func:`build_batch` now uses the
    per-axis :func:`axis_slopes` instead (module docstring); kept for comparisons.
    Pairs closer than 1e-9 are skipped; the result is at least ``floor``."""
    U = np.asarray(U, dtype=float)
    mean = np.asarray(mean, dtype=float)
    if len(U) > _LIPSCHITZ_POINTS:
        idx = rng.choice(len(U), size=_LIPSCHITZ_POINTS, replace=False)
        U, mean = U[idx], mean[idx]
    D = np.sqrt(((U[:, None, :] - U[None, :, :]) ** 2).sum(-1))
    dm = np.abs(mean[:, None] - mean[None, :])
    ok = D > 1e-9
    L = float(np.quantile(dm[ok] / D[ok], quantile)) if ok.any() else 0.0
    return max(L, floor)


#: Forward-difference step of :func:`axis_slopes`, as a fraction of each axis.
_SLOPE_STEP = 0.001


def axis_slopes(moments: Callable[[np.ndarray], tuple], X: np.ndarray, U: np.ndarray,
                bounds: np.ndarray | None, rng: np.random.Generator,
                floor: float = 0.0) -> np.ndarray:
    """Mean absolute slope of the posterior mean along each unit-cube axis.

    ``g_k = mean_i |mu(x_i + h e_k) - mu(x_i)| / h`` over the rows of ``X`` (a subset of
    at most 400 drawn with ``rng``), ``h`` = 0.001 of the axis (stepping down at the
    upper bound), in objective units per unit of the cube; one ``moments`` call on
    ``(d + 1)`` times the rows.  ``U`` are the rows in the unit cube.  Every ``g_k`` is
    at least ``floor`` when all of them are below it (a flat mean); otherwise axes the
    mean ignores keep a slope of 0.
    """
    X = np.asarray(X, dtype=float)
    U = np.asarray(U, dtype=float)
    n, d = X.shape
    if n > _LIPSCHITZ_POINTS:
        idx = rng.choice(n, size=_LIPSCHITZ_POINTS, replace=False)
        X, U = X[idx], U[idx]
        n = len(X)
    width = (np.ones(d) if bounds is None
             else np.diff(np.asarray(bounds, dtype=float).reshape(-1, 2), axis=1)[:, 0])
    h = np.where(U + _SLOPE_STEP <= 1.0, _SLOPE_STEP, -_SLOPE_STEP)   # (n, d)
    shifted = np.repeat(X[None], d, axis=0)                          # (d, n, d)
    k = np.arange(d)
    shifted[k, :, k] += (h * width).T
    mean = np.asarray(moments(np.vstack([X, shifted.reshape(-1, d)]))[0], float)
    base, moved = mean[:n], mean[n:].reshape(d, n)
    g = np.where(width > 0, (np.abs(moved - base) / _SLOPE_STEP).mean(axis=1), 0.0)
    g = np.where(np.isfinite(g), g, 0.0)
    return g if g.max() >= floor else np.full(d, float(floor))


def penalizer_log(U: np.ndarray, u_j: np.ndarray, mu_j: float, s_j: float, M: float,
                  L: float) -> np.ndarray:
    """``log phi(x; x_j)`` of [GDHL2016]_ Eq. 3 (minimization form, see module doc)."""
    d = np.sqrt(((np.asarray(U, float) - np.asarray(u_j, float)) ** 2).sum(-1))
    return log_ndtr((M + L * d - mu_j) / max(float(s_j), 1e-300))


def build_batch(model, setting: AcquisitionSetting, X_candidates: np.ndarray, best: float,
                q: int, rng: np.random.Generator, *, y_scale: float = 1.0,
                bounds: np.ndarray | None = None,
                moments: Callable[[np.ndarray], tuple] | None = None,
                p_success: np.ndarray | None = None) -> Batch:
    """Pick ``q`` distinct candidates from one fitted model (see the module docstring).

    Parameters
    ----------
    model : fitted surrogate (unused for ``random``)
    setting : AcquisitionSetting
    X_candidates : ndarray (n, d)
        In the model's encoding.
    best : float
        Incumbent (minimization), as for :func:`advisor.acquisition.acquisition_values`.
    q : int
        Batch size, 1 <= q <= n.
    rng : numpy Generator
    y_scale : float
        Standard deviation of the training objective (units of ``xi``, UCB transform,
        Lipschitz floor).
    bounds : ndarray (d, 2), optional
        Encoded bounds; distances are taken in the unit cube they define.
    moments : callable, optional
        ``X -> (mean, std)`` of the latent function for the penalizer; default
        :func:`latent_moments` of the model.
    p_success : ndarray (n,), optional
        Predicted probability that each candidate's trial succeeds; the acquisition is
        then weighted by it and candidates below :data:`MIN_SUCCESS` are left out
        (:func:`weight_by_success`, Gelbart, Snoek & Adams 2014).

    Returns
    -------
    Batch
    """
    X = np.asarray(X_candidates, dtype=float)
    n = len(X)
    q = int(q)
    if not 1 <= q <= n:
        raise ValueError(f"q={q} must be between 1 and the number of candidates ({n})")
    if setting.name == "random" and p_success is None:
        return Batch(rng.choice(n, size=q, replace=False), "random" if q > 1 else "single")
    if setting.name in ("thompson", "random"):
        return _thompson_draws(model, setting, X, best, q, rng, y_scale, p_success)
    values, _ = acquisition_values(model, setting, X, best, rng, y_scale)
    values = np.asarray(values, dtype=float)
    if p_success is not None:
        # weighted utility; excluded candidates get -inf and stay out of the batch
        w = weight_by_success(setting.name, values, p_success, best)
        log_g = np.where(np.isfinite(w), np.log(np.maximum(w, 1e-300)), -np.inf)
    elif setting.name == "ucb":
        # softplus((best - LCB) / y_scale): values = -LCB
        z = (values + best) / (y_scale or 1.0)
        log_g = np.log(np.logaddexp(0.0, z))
    else:
        log_g = np.log(np.maximum(values, 1e-300))
    if q == 1:
        return Batch(np.array([_argmax(log_g, rng)]), "single")
    moments = moments or latent_moments(model)
    mean, std = check_predictions(*moments(X), n)
    U = unit_cube(X, bounds)
    g = axis_slopes(moments, X, U, bounds, rng, floor=1e-7 * (y_scale or 1.0))
    L = float(g.mean())
    weights = g / L
    Uw = U * weights       # L * ||Uw - Uw_j|| = ||g * (U - U_j)||
    M = min(float(best), float(mean.min()))
    ell = _unit_length_scales(model, U.shape[1], bounds)
    Ul = None if ell is None else U / ell
    r_min = separation_radius(MAX_CORRELATION) if ell is not None else None
    score = log_g.copy()
    feasible = np.isfinite(log_g)
    floor = (float(np.median(log_g[feasible])) if feasible.any() and _GUARD_FLOOR
             else -np.inf)
    chosen: list[int] = []
    apart = np.full(n, np.inf)      # distance to the nearest chosen, in length scales
    for _ in range(q):
        s = score.copy()
        s[chosen] = -np.inf
        if chosen and Ul is not None:
            # the guard: nothing within r_min of a chosen point; when the fitted length
            # scales put every candidate that close, or leave beyond it only candidates
            # worth less than the median one, keep the farther half instead
            open_ = np.isfinite(s)
            far = open_ & (apart >= r_min)
            need = r_min if far.any() and s[far].max() >= floor else \
                float(np.median(apart[open_])) if open_.any() else 0.0
            s[apart < need] = -np.inf
        i = _argmax(s, rng)
        chosen.append(i)
        score += penalizer_log(Uw, Uw[i], mean[i], std[i], M, L)
        if Ul is not None:
            apart = np.minimum(apart, np.sqrt(((Ul - Ul[i]) ** 2).sum(-1)))
    return Batch(np.array(chosen, dtype=int), "local_penalization", lipschitz=L,
                 axis_weights=weights,
                 min_separation=None if ell is None else r_min * ell)


#: The guard's floor (module docstring): never force a member worth less than the
#: median candidate.  A switch only so that ``benchmarks/batch_floor.py`` can measure
#: the batches without it; not an option of the product.
_GUARD_FLOOR = True


def _unit_length_scales(model, d: int, bounds) -> np.ndarray | None:
    """The model's fitted length scales (``length_scales_``, raw encoded units; of its
    inner GP ``gp_`` for a model that wraps one, as the warped GP does) in unit-cube
    units, or None when it has none of the right shape."""
    ls = getattr(model, "length_scales_", None)
    if ls is None:
        ls = getattr(getattr(model, "gp_", None), "length_scales_", None)
    if ls is None:
        return None
    ls = np.asarray(ls, dtype=float).ravel()
    if ls.shape != (d,) or not np.all(np.isfinite(ls)) or np.any(ls <= 0):
        return None
    if bounds is None:
        return ls
    width = np.diff(np.asarray(bounds, dtype=float).reshape(-1, 2), axis=1)[:, 0]
    return ls / np.where(width > 0, width, 1.0)


def _thompson_draws(model, setting, X, best, q, rng, y_scale, p_success=None) -> Batch:
    free = np.ones(len(X), dtype=bool)
    chosen, kind = [], None
    for _ in range(q):
        values, k = acquisition_values(model, setting, X, best, rng, y_scale)
        if p_success is not None:
            values = weight_by_success(setting.name, values, p_success, best)
        kind = kind or k
        i = _argmax(np.where(free, values, -np.inf), rng)
        chosen.append(i)
        free[i] = False
    method = "random" if setting.name == "random" else "thompson_draws"
    return Batch(np.array(chosen, dtype=int), method if q > 1 else "single",
                 draws=kind)


def _argmax(values: np.ndarray, rng: np.random.Generator) -> int:
    """Argmax with exact ties broken at random (a model that cannot tell candidates
    apart must behave like random search, not replay the candidates' order)."""
    top = np.flatnonzero(values == values.max())
    return int(top[0] if len(top) == 1 else rng.choice(top))


#: Candidates below this probability of success are excluded from a weighted search
#: (see :mod:`advisor.feasibility`).
MIN_SUCCESS = 0.5


def weight_by_success(name: str, values: np.ndarray, p_success: np.ndarray,
                       best: float | None = None,
                       min_success: float = MIN_SUCCESS) -> np.ndarray:
    """Acquisition values weighted by P(success), larger = better.

    ``values`` are as :func:`advisor.acquisition.acquisition_values` returns them
    (larger is better: EI, PI, ``-LCB``, ``-draw`` for Thompson, uniform for random);
    ``best`` is the incumbent in minimization form, needed for ``ucb`` and ``thompson``,
    whose optimistic improvement ``max(best - value, 0) = max(best + values, 0)`` is
    weighted.  Candidates with P(success) below ``min_success`` get ``-inf`` unless no
    candidate reaches it.
    """
    values = np.asarray(values, dtype=float)
    p_success = np.asarray(p_success, dtype=float)
    if name in ("ei", "pi", "random"):
        out = values * p_success
    elif best is None:
        raise ValueError(f"weighting {name} needs the incumbent")
    else:
        out = np.maximum(best + values, 0.0) * p_success
    keep = p_success >= min_success
    if keep.any():
        out = np.where(keep, out, -np.inf)
    return out
