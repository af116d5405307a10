"""A user's model named on the command line: its options, and scikit-learn regressors.

A user's model is named ``module:Class`` (or ``path/to/file.py:Class``), optionally
followed by constructor options, each as ``:name=value``::

    sklearn.gaussian_process:GaussianProcessRegressor:normalize_y=true:n_restarts_optimizer=2

A value is read as a Python literal by :func:`ast.literal_eval` (numbers, quoted
strings, tuples, lists; ``literal_eval`` evaluates literals only, never code), with
``true`` / ``false`` / ``none`` in any case accepted for the shell's sake; anything else
is taken as a plain string (``solver=lbfgs``).  The colon separates options, so a value
cannot contain one; an object (a kernel, say) needs a small Python file instead.

Two conventions give a predictive standard deviation, and both are accepted:

* the project's protocol, ``predict(X) -> (mean, std)``;
* scikit-learn's, ``predict(X, return_std=True) -> (mean, std)`` (GaussianProcessRegressor,
  BayesianRidge, ARDRegression, ...).  Such a model is wrapped in
  :class:`ReturnStdAdapter`, which asks for the std and otherwise leaves it as it is.

A scikit-learn regressor whose ``predict`` has no ``return_std`` (Ridge,
RandomForestRegressor, ...) gives a mean only; it is refused before any fit
(:func:`check_uncertainty`), since a surrogate is judged on its predictive distribution.
"""

from __future__ import annotations

import ast
import inspect
import keyword

from ..errors import UsageError

__all__ = ["parse_model_spec", "check_options", "check_uncertainty", "takes_return_std",
           "validate_sklearn_params", "ReturnStdAdapter"]

_SYNTAX = "write options as module:Class:name=value:name=value"
_WORDS = {"true": True, "false": False, "none": None, "null": None}


def _value(text: str):
    word = text.strip()
    if word.lower() in _WORDS:
        return _WORDS[word.lower()]
    try:
        return ast.literal_eval(word)
    except Exception:  # not a literal (or too deep for the parser): a plain string
        return word


def parse_model_spec(name: str) -> tuple[str, dict]:
    """Split ``module:Class[:name=value...]`` into ``("module:Class", options)``.

    Raises :class:`UsageError` for an option that is not ``name=value`` with an
    identifier for a name, an empty value, or a name given twice.
    """
    parts = name.split(":")
    if len(parts) < 2 or not parts[0] or not parts[1]:
        raise UsageError(f"surrogate '{name}' is not of the form module:Class",
                         fix="write e.g. mypackage.models:MyModel or ./my_model.py:MyModel")
    target = f"{parts[0]}:{parts[1]}"
    options: dict = {}
    for item in parts[2:]:
        key, eq, raw = item.partition("=")
        key = key.strip()
        if not eq or not key.isidentifier() or keyword.iskeyword(key):
            raise UsageError(f"surrogate '{name}': option '{item}' is not name=value",
                             fix=_SYNTAX + ", e.g. :alpha=0.01:normalize_y=true")
        if not raw.strip():
            raise UsageError(f"surrogate '{name}': option '{key}' has no value",
                             fix=_SYNTAX + f", e.g. :{key}=1")
        if key in options:
            raise UsageError(f"surrogate '{name}': option '{key}' is given twice",
                             fix="give each option once")
        options[key] = _value(raw)
    return target, options


def check_options(name: str, cls, options: dict) -> None:
    """Refuse options the constructor does not take (unless it takes ``**kwargs``)."""
    if not options:
        return
    try:
        params = inspect.signature(cls).parameters
    except (TypeError, ValueError):
        return
    if any(p.kind is p.VAR_KEYWORD for p in params.values()):
        return
    known = [k for k, p in params.items()
             if p.kind in (p.POSITIONAL_OR_KEYWORD, p.KEYWORD_ONLY)]
    for key in options:
        if key not in known:
            raise UsageError(f"surrogate '{name}': {cls.__name__} has no option '{key}' "
                             f"(its options: {', '.join(known) or 'none'})",
                             fix="check the option's spelling")


def takes_return_std(cls) -> bool:
    """Whether ``cls.predict`` names a ``return_std`` argument."""
    try:
        params = inspect.signature(cls.predict).parameters
    except (TypeError, ValueError):
        return False
    return "return_std" in params


def _is_sklearn_regressor(model) -> bool:
    try:
        from sklearn.base import is_regressor
        return bool(is_regressor(model))
    except Exception:  # an object scikit-learn cannot read tags from is not one of its
        return False


def check_uncertainty(name: str, model) -> None:
    """Refuse a scikit-learn regressor that gives a mean only.

    A class that is not a scikit-learn regressor and has no ``return_std`` is taken to
    follow the project's protocol, ``predict(X) -> (mean, std)``, and is checked on its
    first prediction instead.
    """
    cls = type(model)
    if takes_return_std(cls) or not _is_sklearn_regressor(model):
        return
    raise UsageError(
        f"surrogate '{name}': {cls.__name__} gives no predictive uncertainty (its "
        "predict has no return_std, and it returns the mean only)",
        fix="use a regressor whose predict takes return_std=True (e.g. "
            "sklearn.linear_model:BayesianRidge, sklearn.gaussian_process:"
            "GaussianProcessRegressor), or a class whose predict(X) returns (mean, std)")


def validate_sklearn_params(name: str, model) -> None:
    """Run scikit-learn's own check of constructor values before any fit, so that a bad
    option is a usage error rather than a failure on every fold.

    ``_validate_params`` is scikit-learn's (private) hook, present since 1.2; when it is
    missing nothing is checked here and the fit reports the problem.
    """
    check = getattr(model, "_validate_params", None)
    if not callable(check) or not _is_sklearn_regressor(model):
        return
    try:
        check()
    except (ValueError, TypeError) as exc:
        raise UsageError(f"surrogate '{name}': " + " ".join(str(exc).split())[:240].rstrip("."),
                         fix="give the option a value the estimator accepts") from None


class ReturnStdAdapter:
    """A scikit-learn-style regressor seen through the project's protocol.

    ``predict(X)`` returns ``estimator.predict(X, return_std=True)``: the predictive mean
    and standard deviation, taken as the model gives them.  The tool scores that std as
    the spread of a *new observation*; BayesianRidge and ARDRegression include the noise
    in it, GaussianProcessRegressor only when its kernel has a ``WhiteKernel`` (its
    ``alpha`` is not added back), as scikit-learn's documentation says.

    Parameters
    ----------
    estimator : object
        Unfitted; it is fitted in place.
    """

    def __init__(self, estimator):
        self.estimator = estimator

    @property
    def input_encoding(self) -> str:
        return getattr(self.estimator, "input_encoding", "onehot")

    def fit(self, X, y):
        self.estimator.fit(X, y)
        return self

    def predict(self, X, return_std=None):
        mean, std = self.estimator.predict(X, return_std=True)
        return mean if return_std is False else (mean, std)
