"""Choose a surrogate model and an acquisition setting for the next Bayesian-optimization
campaign, from your own trial logs.

Public API::

    from advisor import load_trials, surrogate_names, make_surrogate, score_predictions, assess
"""

from __future__ import annotations

from ._version import __version__

__all__ = ["load_trials", "surrogate_names", "make_surrogate", "score_predictions",
           "assess", "Assessment", "__version__"]


def __getattr__(name):
    # Lazy re-exports: `import advisor` stays cheap (no torch, no matplotlib) so the CLI
    # can report bad input before the heavy imports.
    if name == "load_trials":
        from .logs import load_trials
        return load_trials
    if name in ("surrogate_names", "make_surrogate"):
        from . import surrogates
        return getattr(surrogates, name)
    if name == "score_predictions":
        from .scoring import score_predictions
        return score_predictions
    if name in ("assess", "Assessment"):
        from . import assessment as _assess
        return getattr(_assess, name)
    raise AttributeError(f"module 'advisor' has no attribute {name!r}")
