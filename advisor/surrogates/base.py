"""The surrogate protocol and the input/output scaling every model shares.

A surrogate is any object with

* ``fit(X, y) -> self`` on a float matrix ``X`` (n × d, raw encoded units, see
  :mod:`advisor.space`) and a float vector ``y`` (n,), and
* ``predict(X) -> (mean, std)``: the predictive mean and the predictive standard
  deviation of a *new observation* (observation noise included), both in ``y``'s units.

Optional members a model may offer, which the tool uses when present:

* ``input_encoding``: ``"onehot"`` (default) or ``"ordinal"`` for categorical settings;
* ``noise_std_``: the fitted observation-noise standard deviation, in ``y``'s units;
* ``predict_latent(X) -> (mean, std_f)``: the posterior mean and standard deviation of
  the *latent* function (observation noise excluded).  Acquisition functions use it
  (:func:`latent_predictions`); a model without it gets the documented default there;
* ``sample_y(X, n_samples, rng) -> (n_samples, len(X))``: *joint* draws of the latent
  function at ``X`` (for Thompson sampling); without it, draws are independent per point;
* ``uses_groups = True`` with ``fit(X, y, groups=None)`` / ``predict(X, groups=None)``:
  the model is told which campaign each row belongs to; with it, optionally,
  ``difference_std(X, x_ref)``: the sd of the latent difference ``f(x) - f(x_ref)``
  between settings of one new campaign, whose unknown level cancels from it (the
  first batch's acquisition reads it, :mod:`advisor.planning`);
* ``predict_dist(X)``: a predictive distribution beyond the Gaussian (e.g.
  :class:`advisor.distributions.WarpedNormal`) with ``nll(y)`` (Jacobian included),
  ``crps(y)``, ``cdf(y)``, ``ppf(u)``; when present, held-out NLL, CRPS and coverage are
  scored from it, while ``predict`` still returns its mean and sd;
* ``info_``: a dict of plain facts for the report (e.g. an approximation used).

:class:`ScaledSurrogate` standardizes inputs and outputs once, so subclasses work on
unit-scale data and never repeat that code.

Every built-in model also follows scikit-learn's estimator conventions through
:class:`EstimatorMixin` (which :class:`ScaledSurrogate` includes): ``get_params`` /
``set_params`` and :func:`sklearn.base.clone` work, and ``predict`` takes
``return_std``.  The two conventions meet like this (backward compatible: the project's
protocol is the default)::

    predict(X)                    -> (mean, std)   the project's protocol
    predict(X, return_std=True)   -> (mean, std)   scikit-learn's spelling, same pair
    predict(X, return_std=False)  -> mean          scikit-learn's mean-only form

So code written for either convention that asks for the standard deviation gets the
same numbers; only a caller that wants the mean alone must say ``return_std=False``.
"""

from __future__ import annotations

import functools
import inspect
from typing import Protocol, runtime_checkable

import numpy as np
from sklearn.base import BaseEstimator

__all__ = ["Surrogate", "ScaledSurrogate", "EstimatorMixin", "check_fit_inputs",
           "check_predictions", "latent_predictions"]


@runtime_checkable
class Surrogate(Protocol):
    def fit(self, X: np.ndarray, y: np.ndarray) -> "Surrogate": ...

    def predict(self, X: np.ndarray) -> tuple[np.ndarray, np.ndarray]: ...


def check_fit_inputs(X, y) -> tuple[np.ndarray, np.ndarray]:
    X = np.asarray(X, dtype=float)
    y = np.asarray(y, dtype=float).ravel()
    if X.ndim != 2 or X.shape[0] != y.shape[0]:
        raise ValueError(f"X must be (n, d) and y (n,), got {X.shape} and {y.shape}")
    if X.shape[0] < 2:
        raise ValueError("at least two training points are needed")
    if not (np.all(np.isfinite(X)) and np.all(np.isfinite(y))):
        raise ValueError("X and y must be finite")
    return X, y


def check_predictions(mean, std, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Validate a model's output; raise ValueError on shape or non-finite values."""
    mean = np.asarray(mean, dtype=float).ravel()
    std = np.asarray(std, dtype=float).ravel()
    if mean.shape != (n,) or std.shape != (n,):
        raise ValueError(f"predict returned shapes {mean.shape}, {std.shape}; expected ({n},)")
    if not (np.all(np.isfinite(mean)) and np.all(np.isfinite(std))):
        raise ValueError("predict returned non-finite values")
    if np.any(std <= 0):
        raise ValueError("predict returned a non-positive standard deviation")
    return mean, std


def latent_predictions(model, X) -> tuple[np.ndarray, np.ndarray]:
    """Posterior mean and latent standard deviation (noise excluded) of ``model`` at ``X``.

    In order of preference:

    1. the model's own ``predict_latent(X)`` (or ``latent_predict(X)``, the project GP's
       older name);
    2. from ``predict`` and a fitted ``noise_std_``:
       :math:`\\sigma_f = \\sqrt{\\max(\\sigma^2 - \\sigma_n^2,\\ 10^{-12}\\sigma^2)}`
       (the predictive variance of a new observation is latent variance plus noise
       variance for a Gaussian likelihood, Rasmussen & Williams 2006, eq. 2.24); the
       floor keeps the std positive where the model's noise estimate exceeds its
       predictive variance;
    3. otherwise ``predict``'s std is taken as latent (a model that reports no noise is
       assumed to report the uncertainty of the function).

    Returns arrays validated by :func:`check_predictions`.
    """
    n = len(X)
    own = getattr(model, "predict_latent", None) or getattr(model, "latent_predict", None)
    if callable(own):
        return check_predictions(*own(X), n)
    mean, std = check_predictions(*model.predict(X), n)
    noise = getattr(model, "noise_std_", None)
    if noise is None:
        return mean, std
    noise = float(noise)
    if not np.isfinite(noise) or noise <= 0:
        return mean, std
    var = std ** 2
    return mean, np.sqrt(np.maximum(var - noise ** 2, 1e-12 * var))


def _with_return_std(predict):
    """Wrap a protocol ``predict(X, ...) -> (mean, std)`` so that it also takes
    ``return_std`` (None or True: the pair; False: the mean alone)."""
    if getattr(predict, "_takes_return_std", False):
        return predict

    @functools.wraps(predict)
    def wrapper(self, X, *args, return_std=None, **kwargs):
        mean, std = predict(self, X, *args, **kwargs)
        return mean if return_std is False else (mean, std)

    # the signature users (and inspect) see names return_std, keyword-only
    sig = inspect.signature(predict)
    params = list(sig.parameters.values())
    extra = inspect.Parameter("return_std", inspect.Parameter.KEYWORD_ONLY, default=None)
    at = len(params) - (params[-1].kind is inspect.Parameter.VAR_KEYWORD if params else 0)
    wrapper.__signature__ = sig.replace(parameters=params[:at] + [extra] + params[at:])
    wrapper._takes_return_std = True
    return wrapper


class EstimatorMixin(BaseEstimator):
    """scikit-learn's estimator conventions for a protocol model.

    ``get_params`` / ``set_params`` come from :class:`sklearn.base.BaseEstimator` (a
    library rather than our own code: it reads the constructor's signature, so every
    constructor argument must be stored under its own name, unchanged, as
    scikit-learn requires).  Each subclass's own ``predict`` is wrapped when the class
    is defined so that it also takes ``return_std`` (see the module docstring); the
    model's code keeps writing the protocol's ``predict(X) -> (mean, std)``.
    """

    @classmethod
    def _get_param_names(cls):
        """The constructor's parameter names, read once per class.  scikit-learn reads
        them with ``inspect.signature`` at every ``get_params`` call; the backtest's
        cheap updates (``with_fixed_hyperparameters()``, ``warm_started()``) call it
        thousands of times a run, 6% of the quick backtest's CPU on the moulding log
        (cProfile, stop 29).  The names are a function of the class alone."""
        names = cls.__dict__.get("_param_names_read")
        if names is None:
            names = tuple(super()._get_param_names())
            cls._param_names_read = names
        return list(names)

    def __init_subclass__(cls, **kwargs):
        own = cls.__dict__.get("predict")
        if callable(own):
            cls.predict = _with_return_std(own)
        super().__init_subclass__(**kwargs)


class ScaledSurrogate(EstimatorMixin):
    """Base class: standardize X columns and y, then call ``_fit`` / ``_predict``.

    Constant input columns are left unscaled (unit divisor) rather than divided by zero.
    Subclasses implement ``_fit(Xs, ys)`` and ``_predict(Xs) -> (mean_s, std_s)`` on
    standardized data; std_s must include observation noise.  Models that can draw
    joint latent functions add ``sample_y`` themselves (the neural models share
    :class:`advisor.surrogates.nets.LatentSamplerMixin`).
    """

    input_encoding = "onehot"

    def __init__(self, seed: int = 0, quick: bool = False):
        self.seed = seed
        self.quick = quick

    # -- scaling ------------------------------------------------------------------
    def _scale_fit(self, X, y):
        X, y = check_fit_inputs(X, y)
        self.x_mean_ = X.mean(axis=0)
        sd = X.std(axis=0)
        self.x_scale_ = np.where(sd > 1e-12, sd, 1.0)
        self.y_mean_ = float(y.mean())
        ysd = float(y.std())
        self.y_scale_ = ysd if ysd > 1e-12 else 1.0
        return (X - self.x_mean_) / self.x_scale_, (y - self.y_mean_) / self.y_scale_

    def _scale_x(self, X):
        X = np.asarray(X, dtype=float)
        if X.ndim != 2:
            raise ValueError(f"X must be 2-D, got shape {X.shape}")
        return (X - self.x_mean_) / self.x_scale_

    # -- protocol -----------------------------------------------------------------
    def fit(self, X, y):
        Xs, ys = self._scale_fit(X, y)
        self._fit(Xs, ys)
        return self

    def predict(self, X):
        Xs = self._scale_x(X)
        mean_s, std_s = self._predict(Xs)
        mean = self.y_mean_ + self.y_scale_ * np.asarray(mean_s, dtype=float)
        std = self.y_scale_ * np.asarray(std_s, dtype=float)
        return mean, std

    @property
    def noise_std_(self):
        s = getattr(self, "_noise_std_s", None)
        return None if s is None else float(s) * self.y_scale_

    # -- hooks --------------------------------------------------------------------
    def _fit(self, Xs, ys):  # pragma: no cover - abstract
        raise NotImplementedError

    def _predict(self, Xs):  # pragma: no cover - abstract
        raise NotImplementedError
