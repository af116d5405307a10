"""Acquisition functions: which point a surrogate says to try next.

Everything here *minimizes*: ``best`` is the lowest objective seen so far (the trial
table's ``y`` is already sign-flipped, see :mod:`advisor.logs`).  The closed forms take
``maximize=True`` for the mirrored problem; the setting-level functions
(:func:`acquisition_values`, :func:`select_batch`, :func:`optimize_acquisition`) always
minimize.

Closed forms (for minimization, with :math:`\\Phi, \\varphi` the standard normal cdf and
pdf, :math:`\\mu, \\sigma` the predictive mean and standard deviation):

* expected improvement [JSW1998]_ with the exploration margin :math:`\\xi` of [L2008]_:
  :math:`z = (f^* - \\mu - \\xi)/\\sigma`,
  :math:`\\mathrm{EI} = (f^* - \\mu - \\xi)\\,\\Phi(z) + \\sigma\\,\\varphi(z)`;
* probability of improvement [K1964]_: :math:`\\mathrm{PI} = \\Phi(z)`, same :math:`z`;
* lower confidence bound [SKKS2010]_: :math:`\\mu - \\sqrt{\\beta}\\,\\sigma` (to be
  minimized; the upper bound :math:`\\mu + \\sqrt{\\beta}\\,\\sigma` for maximization);
* Thompson sampling [T1933]_: minimize one posterior draw of the function; joint draws
  through the model's ``sample_y`` when it has one, otherwise independent normal draws
  per point (the result says which, ``"joint"`` or ``"independent"``);
* random search: a uniformly random candidate, the baseline every setting must beat.

**Latent values.**  EI, PI and the confidence bound use the posterior of the *latent*
function: :math:`\\sigma` is the std of :math:`f` with observation noise excluded
(:func:`advisor.surrogates.base.latent_predictions`; a model says which part of its std is
noise through ``predict_latent`` or ``noise_std_``).  With the noisy predictive std and the
noisy best observation as incumbent, every candidate's improvement is dominated by the
noise term and EI reduces to "lowest predicted mean" on noisy logs (measured on the
fermentation sample log: the top 20 of 2,000 candidates by EI were the top 20 by mean).

**Incumbent.**  :func:`incumbent` is the lowest posterior *mean* at the evaluated
settings (the "plug-in" incumbent), not the lowest noisy observation, which is biased low
by the noise (Letham, Karrer, Ottoni & Bakshy 2019, sec. 2.2; Picheny, Wagner &
Ginsbourger 2013 found the plug-in with the kriging mean among the robust choices, from
memory).  We chose it over noisy EI [LKOB2019]_ for the step-by-step loop because it
needs one predict call instead of joint draws over the whole history;
:func:`noisy_expected_improvement` (the Monte-Carlo form of [LKOB2019]_, eq. 7) is
available for models with joint draws and is checked against a closed form in the tests.

Our choices (not from the papers):

* **Units of xi.** ``xi`` in an :class:`AcquisitionSetting` is in units of the standard
  deviation of the training objective, so ``xi=0.01`` means the same on any scale
  (common practice); the closed-form functions take ``xi`` in the objective's own units,
  and :func:`acquisition_values` multiplies by ``y_scale`` before calling them.
* **Uniform sign.** :func:`acquisition_values` returns a *utility*, larger is better,
  for every setting (EI, PI, minus the lower bound, minus the draw, a uniform number).
* **Zero std.** Where :math:`\\sigma = 0`, EI is :math:`\\max(f^* - \\mu - \\xi, 0)` and PI
  the indicator of :math:`f^* - \\mu - \\xi > 0`, the limits as :math:`\\sigma \\to 0`.
* **Thompson fallback.** Without ``sample_y`` the independent draws use the latent std.
* **Batches.** For ``q > 1`` the batch is built greedily by the kriging believer or the
  constant liar (CL-min) of [GLC2010]_: pick the best point, append a fantasized
  observation there (the model's mean, or the lowest observed value), refit, repeat.

References
----------
.. [JSW1998] Jones, D. R., Schonlau, M. & Welch, W. J. (1998). Efficient global
   optimization of expensive black-box functions. J. Global Optim. 13, 455-492, eq. (15).
.. [L2008] Lizotte, D. J. (2008). Practical Bayesian optimization. PhD thesis,
   University of Alberta, sec. 3.2 (the xi margin).
.. [K1964] Kushner, H. J. (1964). A new method of locating the maximum point of an
   arbitrary multipeak curve in the presence of noise. J. Basic Eng. 86, 97-106.
.. [SKKS2010] Srinivas, N., Krause, A., Kakade, S. & Seeger, M. (2010). Gaussian process
   optimization in the bandit setting: no regret and experimental design. ICML, eq. (6).
.. [T1933] Thompson, W. R. (1933). On the likelihood that one unknown probability exceeds
   another in view of the evidence of two samples. Biometrika 25, 285-294.
.. [LKOB2019] Letham, B., Karrer, B., Ottoni, G. & Bakshy, E. (2019). Constrained
   Bayesian optimization with noisy experiments. Bayesian Analysis 14(2), 495-519,
   sec. 2.2 (incumbents under noise) and eq. (7) (noisy expected improvement).
.. [GLC2010] Ginsbourger, D., Le Riche, R. & Carraro, L. (2010). Kriging is well-suited
   to parallelize optimization. In Computational Intelligence in Expensive Optimization
   Problems, Springer, 131-162, sec. 3.2 (kriging believer, constant liar).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
from scipy.optimize import minimize
from scipy.stats import norm

from .errors import UsageError
from .surrogates.base import check_predictions, latent_predictions

__all__ = ["expected_improvement", "probability_of_improvement",
           "lower_confidence_bound", "upper_confidence_bound", "thompson_draw",
           "AcquisitionSetting", "ACQUISITIONS", "default_settings", "parse_settings",
           "acquisition_values", "Selection", "select_batch", "AcquisitionOptimum",
           "optimize_acquisition", "BATCH_METHODS", "incumbent",
           "noisy_expected_improvement"]

#: name -> (parameter name or None, default value, upper-case display name).
ACQUISITIONS: dict[str, tuple[str | None, float | None, str]] = {
    "ei": ("xi", 0.01, "EI"),
    "pi": ("xi", 0.01, "PI"),
    "ucb": ("beta", 4.0, "UCB"),
    "thompson": (None, None, "Thompson"),
    "random": (None, None, "random"),
}
_ALIASES = {"lcb": "ucb", "ts": "thompson", "rs": "random",
            "expected_improvement": "ei", "probability_of_improvement": "pi"}
BATCH_METHODS = ("kriging_believer", "constant_liar")


# -- closed forms ---------------------------------------------------------------------
def _improvement(mean, std, best, xi, maximize):
    mean = np.asarray(mean, dtype=float)
    std = np.asarray(std, dtype=float)
    gain = (mean - best - xi) if maximize else (best - mean - xi)
    return gain, std


def expected_improvement(mean, std, best: float, xi: float = 0.0,
                         maximize: bool = False) -> np.ndarray:
    """Expected improvement over ``best`` [JSW1998]_ with margin ``xi`` [L2008]_.

    For minimization :math:`\\mathrm{EI} = g\\,\\Phi(g/\\sigma) + \\sigma\\,\\varphi(g/\\sigma)`
    with :math:`g = f^* - \\mu - \\xi`; for maximization :math:`g = \\mu - f^* - \\xi`.

    Parameters
    ----------
    mean, std : array_like
        Predictive mean and standard deviation at the candidates.
    best : float
        Incumbent: lowest (or, with ``maximize``, highest) value observed.
    xi : float
        Margin in the objective's units; larger explores more.
    maximize : bool

    Returns
    -------
    ndarray
        EI >= 0, same shape as ``mean``.
    """
    gain, std = _improvement(mean, std, best, xi, maximize)
    pos = std > 0
    safe = np.where(pos, std, 1.0)
    z = gain / safe
    ei = gain * norm.cdf(z) + safe * norm.pdf(z)
    # sigma -> 0 limit; max(., 0) also removes round-off negatives
    return np.maximum(np.where(pos, ei, np.maximum(gain, 0.0)), 0.0)


def probability_of_improvement(mean, std, best: float, xi: float = 0.0,
                               maximize: bool = False) -> np.ndarray:
    """Probability of improving on ``best`` by at least ``xi`` [K1964]_.

    :math:`\\mathrm{PI} = \\Phi(g/\\sigma)` with :math:`g` as in
    :func:`expected_improvement`.
    """
    gain, std = _improvement(mean, std, best, xi, maximize)
    pos = std > 0
    z = gain / np.where(pos, std, 1.0)
    return np.where(pos, norm.cdf(z), (gain > 0).astype(float))


def lower_confidence_bound(mean, std, beta: float) -> np.ndarray:
    """:math:`\\mu - \\sqrt{\\beta}\\,\\sigma` [SKKS2010]_; the point to try minimizes it."""
    return np.asarray(mean, float) - math.sqrt(beta) * np.asarray(std, float)


def upper_confidence_bound(mean, std, beta: float) -> np.ndarray:
    """:math:`\\mu + \\sqrt{\\beta}\\,\\sigma` [SKKS2010]_; for maximization, maximize it."""
    return np.asarray(mean, float) + math.sqrt(beta) * np.asarray(std, float)


def thompson_draw(model, X: np.ndarray, rng: np.random.Generator) -> tuple[np.ndarray, str]:
    """One posterior draw of the function at the rows of ``X`` [T1933]_.

    Returns
    -------
    draw : ndarray (len(X),)
    kind : {"joint", "independent"}
        ``"joint"`` when the model's ``sample_y`` gave a joint latent draw; otherwise
        each point was drawn from its own predictive normal (noise included).
    """
    X = np.asarray(X, dtype=float)
    sampler = getattr(model, "sample_y", None)
    if callable(sampler):
        draw = np.asarray(sampler(X, 1, rng), dtype=float).reshape(-1)
        if draw.shape != (len(X),) or not np.all(np.isfinite(draw)):
            raise ValueError(f"sample_y returned shape {draw.shape} or non-finite values; "
                             f"expected ({len(X)},) finite")
        return draw, "joint"
    mean, std = latent_predictions(model, X)
    return mean + std * rng.standard_normal(len(X)), "independent"


def incumbent(model, X_evaluated: np.ndarray) -> float:
    """The plug-in incumbent: the lowest posterior mean at the evaluated settings.

    Under observation noise the lowest *observed* value is biased low (it is the minimum
    of noisy draws), so EI against it undervalues every candidate; the lowest posterior
    mean at evaluated points is the incumbent discussed in [LKOB2019]_, sec. 2.2.
    """
    X_evaluated = np.asarray(X_evaluated, dtype=float)
    mean, _ = latent_predictions(model, X_evaluated)
    return float(mean.min())


def noisy_expected_improvement(model, X_evaluated: np.ndarray, X: np.ndarray,
                               rng: np.random.Generator, n_draws: int = 256,
                               xi: float = 0.0) -> np.ndarray:
    """Noisy expected improvement [LKOB2019]_, eq. (7), by Monte Carlo over joint draws.

    :math:`\\mathrm{NEI}(x) = \\mathbb{E}\\,[\\max(\\min_j f(x_j) - f(x) - \\xi, 0)]`,
    the expectation over the joint posterior of the latent :math:`f` at the evaluated
    settings :math:`x_j` and the candidate :math:`x`: the incumbent is itself uncertain.
    [LKOB2019]_ integrate EI in closed form given each draw of :math:`f(x_j)`; drawing
    :math:`f(x)` jointly with them gives the same expectation (plain Monte Carlo, our
    choice: one ``sample_y`` call, no conditioning code per model).

    Needs the model's ``sample_y`` (joint latent draws).  Returns an (n,) array >= 0.
    """
    X_evaluated = np.asarray(X_evaluated, dtype=float)
    X = np.asarray(X, dtype=float)
    sampler = getattr(model, "sample_y", None)
    if not callable(sampler):
        raise ValueError("noisy expected improvement needs joint draws (sample_y)")
    k = len(X_evaluated)
    F = np.asarray(sampler(np.vstack([X_evaluated, X]), int(n_draws), rng), dtype=float)
    F = F.reshape(int(n_draws), k + len(X))
    best = F[:, :k].min(axis=1, keepdims=True)
    return np.maximum(best - F[:, k:] - xi, 0.0).mean(axis=0)


# -- settings -------------------------------------------------------------------------
def _fmt(v: float) -> str:
    return f"{v:g}"


@dataclass(frozen=True)
class AcquisitionSetting:
    """One acquisition function with its parameter.

    Attributes
    ----------
    name : {"ei", "pi", "ucb", "thompson", "random"}
    params : dict
        ``{"xi": float}`` for EI and PI (units of the training objective's std),
        ``{"beta": float}`` for UCB, empty otherwise.  Missing values take the defaults
        in :data:`ACQUISITIONS` (xi = 0.01, beta = 4).
    """

    name: str
    params: dict = field(default_factory=dict)

    def __post_init__(self):
        name = _ALIASES.get(self.name, self.name)
        if name not in ACQUISITIONS:
            raise UsageError(f"unknown acquisition '{self.name}'; known: "
                             + ", ".join(ACQUISITIONS),
                             fix="use one of the listed names")
        key, default, _ = ACQUISITIONS[name]
        params = dict(self.params)
        if key is None:
            if params:
                raise UsageError(f"acquisition '{name}' takes no parameters, got "
                                 + ", ".join(params), fix=f"write just '{name}'")
        else:
            extra = set(params) - {key}
            if extra:
                raise UsageError(f"acquisition '{name}' has no parameter "
                                 + ", ".join(sorted(extra)), fix=f"use {name}:{key}=...")
            value = float(params.get(key, default))
            if not math.isfinite(value) or value < 0:
                raise UsageError(f"acquisition '{name}': {key}={value} must be finite "
                                 "and >= 0", fix=f"e.g. {name}:{key}={_fmt(default)}")
            params = {key: value}
        object.__setattr__(self, "name", name)
        object.__setattr__(self, "params", params)

    def __hash__(self):
        return hash((self.name, tuple(sorted(self.params.items()))))

    @property
    def label(self) -> str:
        """Display text: ``"EI xi=0.01"``, ``"UCB beta=4"``, ``"Thompson"``."""
        key, _, shown = ACQUISITIONS[self.name]
        return shown if key is None else f"{shown} {key}={_fmt(self.params[key])}"

    def to_dict(self) -> dict:
        return {"name": self.name, "params": {k: float(v) for k, v in self.params.items()}}

    @classmethod
    def from_dict(cls, d: dict) -> "AcquisitionSetting":
        return cls(d["name"], dict(d.get("params") or {}))


def default_settings(quick: bool = False) -> list[AcquisitionSetting]:
    """The grid of settings to backtest.

    Full: EI xi in {0, 0.01, 0.1}, PI xi in {0.01, 0.1}, UCB beta in {1, 4, 9},
    Thompson (9 settings).  Quick: EI xi=0.01, PI xi=0.01, UCB beta=4, Thompson.
    The values are common practice (xi = 0.01 as in [L2008]_; beta = 4 is a
    two-standard-deviation bound); random search is the separate baseline.
    """
    S = AcquisitionSetting
    if quick:
        return [S("ei", {"xi": 0.01}), S("pi", {"xi": 0.01}), S("ucb", {"beta": 4.0}),
                S("thompson")]
    return ([S("ei", {"xi": x}) for x in (0.0, 0.01, 0.1)]
            + [S("pi", {"xi": x}) for x in (0.01, 0.1)]
            + [S("ucb", {"beta": b}) for b in (1.0, 4.0, 9.0)] + [S("thompson")])


_SYNTAX = "e.g. 'ei:xi=0,0.01;ucb:beta=1,4;thompson'"


def parse_settings(text: str) -> list[AcquisitionSetting]:
    """Read the ``--acquisitions`` flag.

    Syntax: items separated by ``;``; each item is ``name`` or ``name:key=v1,v2,...``.
    A list of values makes one setting per value.  Names: ``ei``, ``pi``, ``ucb``
    (alias ``lcb``), ``thompson`` (alias ``ts``), ``random``; keys: ``xi`` for EI/PI (in
    units of the training objective's standard deviation), ``beta`` for UCB.  A bare
    ``ei``/``pi``/``ucb`` takes the default (xi=0.01, beta=4).  Whitespace is ignored,
    duplicates are dropped, order is kept.  The words ``default`` and ``quick`` stand
    for :func:`default_settings`.

    Example: ``"ei:xi=0,0.01;ucb:beta=1,4;thompson"`` gives EI xi=0, EI xi=0.01,
    UCB beta=1, UCB beta=4, Thompson.

    Raises
    ------
    UsageError
        On an unknown name or key, a value that is not a number >= 0, or an empty list.
    """
    text = re.sub(r"\s+", "", text or "")
    items = [t for t in text.split(";") if t]
    if not items:
        raise UsageError("--acquisitions is empty", fix=f"give settings, {_SYNTAX}")
    out: list[AcquisitionSetting] = []
    for item in items:
        low = item.lower()
        if low in ("default", "quick"):
            new = default_settings(quick=low == "quick")
        else:
            new = _parse_item(item)
        for s in new:
            if s not in out:
                out.append(s)
    return out


def _parse_item(item: str) -> list[AcquisitionSetting]:
    name, _, rest = item.partition(":")
    name = _ALIASES.get(name.lower(), name.lower())
    if name not in ACQUISITIONS:
        raise UsageError(f"--acquisitions: unknown acquisition '{name}' in '{item}'; known: "
                         + ", ".join(ACQUISITIONS), fix=_SYNTAX)
    if not rest:
        return [AcquisitionSetting(name)]
    key, eq, values = rest.partition("=")
    if not eq or not values:
        raise UsageError(f"--acquisitions: '{item}' should be name:key=v1,v2",
                         fix=_SYNTAX)
    expected = ACQUISITIONS[name][0]
    if key != expected:
        want = f"'{expected}'" if expected else "no parameter"
        raise UsageError(f"--acquisitions: '{name}' takes {want}, not '{key}'",
                         fix=f"write {name}:{expected}=..." if expected else f"write {name}")
    out = []
    for v in values.split(","):
        try:
            x = float(v)
        except ValueError:
            raise UsageError(f"--acquisitions: '{v}' in '{item}' is not a number",
                             fix=_SYNTAX) from None
        out.append(AcquisitionSetting(name, {key: x}))
    return out


# -- using a fitted model -------------------------------------------------------------
def acquisition_values(model, setting: AcquisitionSetting, X: np.ndarray, best: float,
                       rng: np.random.Generator, y_scale: float = 1.0
                       ) -> tuple[np.ndarray, str | None]:
    """Utility of each candidate row of ``X`` under ``setting`` (larger is better).

    Parameters
    ----------
    model : fitted surrogate (unused for ``random``)
    setting : AcquisitionSetting
    X : ndarray (n, d)
        Candidates in the model's encoding.
    best : float
        The incumbent (minimization); :func:`incumbent` gives the plug-in value.
    rng : numpy Generator
        For Thompson draws and random search.
    y_scale : float
        Standard deviation of the training objective; ``xi`` is multiplied by it.

    Returns
    -------
    values : ndarray (n,)
    draws : {"joint", "independent"} or None
        How Thompson draws were made; None for the other settings.
    """
    X = np.asarray(X, dtype=float)
    n = len(X)
    if setting.name == "random":
        return rng.random(n), None
    if setting.name == "thompson":
        draw, kind = thompson_draw(model, X, rng)
        return -draw, kind
    mean, std = latent_predictions(model, X)   # latent std: noise excluded
    if setting.name == "ei":
        return expected_improvement(mean, std, best, setting.params["xi"] * y_scale), None
    if setting.name == "pi":
        return probability_of_improvement(mean, std, best,
                                          setting.params["xi"] * y_scale), None
    return -lower_confidence_bound(mean, std, setting.params["beta"]), None


@dataclass
class Selection:
    """Indices chosen by :func:`select_batch` (into the candidate array, in pick order)
    and how Thompson draws were made (None for other settings)."""

    indices: np.ndarray
    draws: str | None = None
    method: str | None = None


def select_batch(model, setting: AcquisitionSetting, X_candidates: np.ndarray, best: float,
                 q: int = 1, rng: np.random.Generator | None = None,
                 method: str = "kriging_believer", *, y_scale: float = 1.0,
                 X_train: np.ndarray | None = None, y_train: np.ndarray | None = None,
                 refit: Callable[[np.ndarray, np.ndarray], object] | None = None,
                 weight: Callable[[np.ndarray, float, np.ndarray], np.ndarray] | None = None
                 ) -> Selection:
    """Pick ``q`` distinct candidates.

    ``q = 1``: the argmax of :func:`acquisition_values` (exact ties broken at random).
    ``q > 1``: greedy fantasies [GLC2010]_, sec. 3.2: after each pick a fantasized
    observation is appended to ``(X_train, y_train)`` and ``refit(X, y)`` returns the
    model used for the next pick.  ``method="kriging_believer"`` fantasizes the model's
    mean at the pick; ``"constant_liar"`` the lowest observed value (CL-min, the liar
    the paper reports as most exploratory among its constants).  ``best`` is updated to
    include the fantasies.  ``random`` draws ``q`` distinct indices and needs no model.

    Parameters
    ----------
    model, setting, X_candidates, best, rng, y_scale
        As in :func:`acquisition_values`.
    q : int
        Batch size, at most ``len(X_candidates)``.
    method : {"kriging_believer", "constant_liar"}
    X_train, y_train, refit
        Needed when ``q > 1`` and the setting uses a model.
    weight : callable, optional
        ``weight(values, best, free)`` -> the acquisition values of the candidates
        still free (``free`` a boolean mask), reweighted before each pick; used to weight
        by a probability of success (:func:`advisor.batching.weight_by_success`).

    Returns
    -------
    Selection
    """
    rng = np.random.default_rng(rng)
    X_candidates = np.asarray(X_candidates, dtype=float)
    n = len(X_candidates)
    if not 1 <= q <= n:
        raise ValueError(f"q={q} must be between 1 and the number of candidates ({n})")
    if method not in BATCH_METHODS:
        raise ValueError(f"unknown batch method {method!r}; use one of {BATCH_METHODS}")
    if setting.name == "random":
        return Selection(rng.choice(n, size=q, replace=False), None, None)
    if q > 1 and (X_train is None or y_train is None or refit is None):
        raise ValueError("q > 1 needs X_train, y_train and refit for the fantasies")
    chosen: list[int] = []
    draws = None
    free = np.ones(n, dtype=bool)
    if q > 1:
        X_aug = np.asarray(X_train, dtype=float)
        y_aug = np.asarray(y_train, dtype=float).ravel()
        lie = float(np.min(y_aug))
    for k in range(q):
        values, kind = acquisition_values(model, setting, X_candidates, best, rng, y_scale)
        draws = draws or kind
        if weight is not None:
            w = np.full(n, -np.inf)
            w[free] = weight(values[free], best, free)
            values = w
        values = np.where(free, values, -np.inf)
        # ties broken at random, not by position: a model that cannot tell candidates
        # apart must behave like random search, not replay the candidates' order
        top = np.flatnonzero(values == values.max())
        i = int(top[0] if len(top) == 1 else rng.choice(top))
        chosen.append(i)
        free[i] = False
        if k == q - 1:
            break
        x = X_candidates[i:i + 1]
        if method == "kriging_believer":
            fantasy = float(check_predictions(*model.predict(x), 1)[0][0])
        else:
            fantasy = lie
        X_aug = np.vstack([X_aug, x])
        y_aug = np.append(y_aug, fantasy)
        best = min(best, fantasy)
        model = refit(X_aug, y_aug)
    return Selection(np.array(chosen, dtype=int), draws, method if q > 1 else None)


@dataclass
class AcquisitionOptimum:
    """Result of :func:`optimize_acquisition`: the point, its utility, how found."""

    x: np.ndarray
    value: float
    draws: str | None = None
    refined: bool = False


def optimize_acquisition(model, setting: AcquisitionSetting, bounds: np.ndarray,
                         best: float, rng: np.random.Generator, *, y_scale: float = 1.0,
                         candidates: np.ndarray | None = None, n_candidates: int = 2000,
                         n_local: int = 3, continuous: np.ndarray | None = None,
                         ) -> AcquisitionOptimum:
    """Maximize the utility over a box: a random candidate pool, then local refinement.

    1. Score ``candidates`` (default: ``n_candidates`` uniform points in ``bounds``).
    2. From the best ``n_local`` of them, run L-BFGS-B (scipy) on minus the utility over
       the ``continuous`` columns (all by default), the other columns held fixed, with
       forward-difference gradients; keep the best point found.

    Thompson sampling and random search skip step 2: a posterior draw exists only at the
    points it was drawn on, and random search has nothing to refine.  The pool-then-
    polish scheme is common practice; the pool size and number of starts are our
    choices (2,000 points and 3 starts keep one call well under a second for a GP on a
    few hundred points).

    Parameters
    ----------
    model : fitted surrogate
    setting : AcquisitionSetting
    bounds : ndarray (d, 2)
        Low/high per encoded column (e.g. :meth:`ParameterSpace.encoded_bounds`).
    best, rng, y_scale
        As in :func:`acquisition_values`.
    candidates : ndarray (m, d), optional
        Use these instead of uniform points (e.g. encoded :meth:`ParameterSpace.sample`
        rows, so categorical and integer columns are valid).
    continuous : bool array (d,), optional
        Columns the local search may move.

    Returns
    -------
    AcquisitionOptimum
    """
    bounds = np.asarray(bounds, dtype=float).reshape(-1, 2)
    d = len(bounds)
    if candidates is None:
        candidates = rng.uniform(bounds[:, 0], bounds[:, 1], size=(n_candidates, d))
    candidates = np.asarray(candidates, dtype=float)
    values, draws = acquisition_values(model, setting, candidates, best, rng, y_scale)
    order = np.argsort(-values, kind="stable")
    x_best, v_best = candidates[order[0]].copy(), float(values[order[0]])
    if setting.name in ("thompson", "random") or n_local <= 0:
        return AcquisitionOptimum(x_best, v_best, draws, False)
    free = np.ones(d, bool) if continuous is None else np.asarray(continuous, bool)
    free &= bounds[:, 1] > bounds[:, 0]
    if not free.any():
        return AcquisitionOptimum(x_best, v_best, draws, False)
    refined = False
    for i in order[:n_local]:
        x0 = candidates[i].copy()
        res = minimize(_loss_and_gradient, x0[free], jac=True, method="L-BFGS-B",
                       bounds=bounds[free], options={"maxiter": 50},
                       args=(x0, free, bounds[free], model, setting, best, rng, y_scale))
        if np.isfinite(res.fun) and -res.fun > v_best:
            x_best = x0.copy()
            x_best[free] = np.clip(res.x, bounds[free, 0], bounds[free, 1])
            v_best = float(-res.fun)
            refined = True
    return AcquisitionOptimum(x_best, v_best, draws, refined)


def _loss_and_gradient(z, x0, free, box, model, setting, best, rng, y_scale):
    """Minus the utility at ``z`` and its forward-difference gradient, from ONE predict
    call on 1 + k points (scipy's own differencing would call predict k + 1 times, and
    per-call overhead dominates for small models).  Steps are 1e-7 of each column's
    range, taken backwards at an upper bound so the points stay inside the box."""
    k = len(z)
    pts = np.repeat(x0[None, :], k + 1, axis=0)
    pts[:, free] = z
    h = 1e-7 * (box[:, 1] - box[:, 0])
    h = np.where(z + h > box[:, 1], -h, h)
    cols = np.flatnonzero(free)
    pts[1 + np.arange(k), cols] += h
    vals = -acquisition_values(model, setting, pts, best, rng, y_scale)[0]
    return float(vals[0]), (vals[1:] - vals[0]) / h
