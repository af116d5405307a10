"""Candidate surrogate models behind one protocol, and the registry that names them.

Built-in models are registered here by name and import path and imported only when
made, so that a model whose module is missing or broken never stops the others.
A user's own model is named ``module:Class`` (or ``path/to/file.py:Class``), with
constructor options as ``:name=value`` after it; a scikit-learn regressor that offers
``predict(X, return_std=True)`` joins unchanged (:mod:`advisor.surrogates.adapter`).
"""

from __future__ import annotations

import importlib
import importlib.util
import inspect
import sys
from pathlib import Path

from ..errors import UsageError
from .adapter import (ReturnStdAdapter, check_options, check_uncertainty, parse_model_spec,
                      takes_return_std, validate_sklearn_params)
from .base import EstimatorMixin, ScaledSurrogate, Surrogate, check_predictions

__all__ = ["surrogate_names", "make_surrogate", "describe_surrogate", "Surrogate",
           "ScaledSurrogate", "check_predictions", "BUILTIN"]

#: name -> (import path, one-line description).  Order is the display order.
BUILTIN: dict[str, tuple[str, str]] = {
    "gp": ("advisor.surrogates.gp:MaternGP",
           "Gaussian process, Matérn-5/2 ARD kernel, MAP under a length-scale prior (RW2006; "
           "Hvarfner et al. 2024)"),
    "campaign_gp": ("advisor.surrogates.gp_campaign:CampaignGP",
                    "GP plus a per-campaign random offset and linear slopes (Laird & Ware 1982; "
                    "RW2006 Sec. 2.7)"),
    "warped_gp": ("advisor.surrogates.warping:WarpedGP",
                  "GP on a log / Yeo-Johnson warp of the objective (Snelson et al. 2004)"),
    "forest": ("advisor.surrogates.forest:RandomForestSurrogate",
               "random forest, variance by the law of total variance (Hutter et al. 2014)"),
    "dngo": ("advisor.surrogates.dngo:DNGO",
             "network + Bayesian linear regression on its last layer (Snoek et al. 2015)"),
    "bnn": ("advisor.surrogates.bnn:SGHMCBayesianNet",
            "Bayesian neural network sampled by adaptive SGHMC (Springenberg et al. 2016)"),
    "ensemble": ("advisor.surrogates.ensemble:DeepEnsemble",
                 "deep ensemble of Gaussian-head networks (Lakshminarayanan et al. 2017)"),
    "neural_process": ("advisor.surrogates.neural_process:NeuralProcess",
                       "neural process, deterministic + latent path (Garnelo et al. 2018)"),
    "baseline": ("advisor.surrogates.baseline:MeanBaseline",
                 "training mean and standard deviation everywhere (knowing nothing)"),
}


#: The built-ins' ``input_encoding`` where it is not "onehot" (the classes' attribute,
#: kept here too so that choosing each model's encoding imports no model module: the
#: networks' modules import torch, seconds of a run's main process, which never fits a
#: network when the cross-validation runs in worker processes).
#: ``tests/test_surrogate_contract.py`` checks it against the classes.
_BUILTIN_ENCODING = {"forest": "ordinal"}


def _builtin_encoding(name: str) -> str | None:
    """Input encoding of built-in model ``name`` without importing it; None for any
    other name (a user model: ask the model itself)."""
    return _BUILTIN_ENCODING.get(name, "onehot") if name in BUILTIN else None

def _module_available(spec: str) -> bool:
    module = spec.split(":")[0]
    try:
        return importlib.util.find_spec(module) is not None
    except ModuleNotFoundError:
        return False


def surrogate_names() -> list[str]:
    """Names of the built-in candidates whose modules are installed, in display order."""
    return [name for name, (spec, _) in BUILTIN.items() if _module_available(spec)]


def describe_surrogate(name: str) -> str:
    if name in BUILTIN:
        return BUILTIN[name][1]
    return f"user model {name}"


def _load_class(spec: str):
    """Import ``module:Class`` or ``file.py:Class``; raise UsageError with a fix."""
    if spec.count(":") != 1 or not all(spec.split(":")):
        raise UsageError(f"surrogate '{spec}' is not of the form module:Class",
                         fix="write e.g. mypackage.models:MyModel or ./my_model.py:MyModel")
    module_name, class_name = spec.split(":")
    try:
        if module_name.endswith(".py"):
            file = Path(module_name)
            if not file.is_file():
                raise UsageError(f"surrogate '{spec}': no file {file}",
                                 fix="check the path to the .py file")
            mod_id = f"_advisor_user_{abs(hash(str(file.resolve())))}"
            loader_spec = importlib.util.spec_from_file_location(mod_id, file)
            module = importlib.util.module_from_spec(loader_spec)
            sys.modules[mod_id] = module
            loader_spec.loader.exec_module(module)
        else:
            module = importlib.import_module(module_name)
    except UsageError:
        raise
    except Exception as exc:  # any import failure of the user's module is bad input
        raise UsageError(f"surrogate '{spec}': cannot import {module_name} "
                         f"({type(exc).__name__}: {exc})",
                         fix="check the module name and that it is on PYTHONPATH") from None
    cls = getattr(module, class_name, None)
    if cls is None:
        raise UsageError(f"surrogate '{spec}': module {module_name} has no {class_name}",
                         fix="check the class name")
    if not (callable(getattr(cls, "fit", None)) and callable(getattr(cls, "predict", None))):
        raise UsageError(f"surrogate '{spec}': {class_name} lacks fit(X, y) and predict(X)",
                         fix="give the class fit(X, y) -> self and predict(X) -> (mean, std)")
    return cls


def make_surrogate(name: str, seed: int = 0, quick: bool = False, **options):
    """An unfitted surrogate.

    Parameters
    ----------
    name : str
        A name from :func:`surrogate_names`, or ``module:Class[:option=value...]`` for a
        user's model (syntax in :mod:`advisor.surrogates.adapter`).
    seed : int
        Seeds every random choice inside the model.
    quick : bool
        Use the quick budget (fewer restarts, epochs, samples).
    **options
        Passed to the constructor.

    Constructor arguments ``seed`` and ``quick`` are passed only when the class
    accepts them, so a user's model needs neither; a class taking ``random_state``
    (scikit-learn's name) but not ``seed`` gets the seed there unless an option sets it.
    A user's model whose ``predict`` takes ``return_std`` comes back wrapped in
    :class:`ReturnStdAdapter`.

    Raises
    ------
    UsageError
        Unknown name, unimportable class, an option the constructor does not take or
        scikit-learn rejects, or a scikit-learn regressor that gives no uncertainty.
    """
    if name in BUILTIN:
        spec, user = BUILTIN[name][0], False
    elif ":" in name:
        spec, given = parse_model_spec(name)
        options = {**given, **options}
        user = True
    else:
        raise UsageError(f"unknown surrogate '{name}'; known: " + ", ".join(surrogate_names()),
                         fix="pick a listed name or give module:Class")
    cls = _load_class(spec)
    if user:
        check_options(name, cls, options)
    kwargs = dict(options)
    try:
        accepted = inspect.signature(cls).parameters
    except (TypeError, ValueError):
        accepted = {}
    has_var_kw = any(p.kind is p.VAR_KEYWORD for p in accepted.values())
    if "seed" in accepted or has_var_kw:
        kwargs.setdefault("seed", seed)
    elif "random_state" in accepted:
        kwargs.setdefault("random_state", int(seed) % 2 ** 32)
    if "quick" in accepted or has_var_kw:
        kwargs.setdefault("quick", quick)
    if not user:
        return cls(**kwargs)
    try:
        model = cls(**kwargs)
    except Exception as exc:  # a constructor refusing its options is a usage problem
        raise UsageError(f"surrogate '{name}': {cls.__name__}(...) refused its options "
                         f"({type(exc).__name__}: {' '.join(str(exc).split())[:200]})",
                         fix="check the options' values") from None
    validate_sklearn_params(name, model)
    check_uncertainty(name, model)
    # our own estimators (a user's subclass of a built-in) keep the protocol and their
    # optional members (sample_y, noise_std_, info_): only foreign ones are wrapped
    foreign = takes_return_std(cls) and not isinstance(model, EstimatorMixin)
    return ReturnStdAdapter(model) if foreign else model
