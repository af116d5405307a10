"""The :class:`Assessment` record: everything an assessment found."""

from __future__ import annotations

import platform
import sys
from dataclasses import dataclass, field

import pandas as pd

from .._version import __version__
from ..logs import TrialTable


@dataclass
class Assessment:
    """Everything an assessment found; the report and the JSON read only this."""

    trials: TrialTable
    seed: int
    quick: bool
    surrogates: list[str]
    validation: dict
    predictions: pd.DataFrame
    fold_metrics: pd.DataFrame
    metrics: dict
    intervals: dict
    failures: dict
    recalibration: dict
    ranking: pd.DataFrame
    recommendation: dict
    reasons: dict
    noise: dict
    model_info: dict
    backtest: dict | None = None
    planning: dict | None = None
    proposals: pd.DataFrame | None = None
    feasibility: dict | None = None
    timing: dict = field(default_factory=dict)
    versions: dict = field(default_factory=dict)
    command: str | None = None
    created: str = ""
    ranking_rule: str = ""

    def to_dict(self) -> dict:
        from ..report.export import assessment_to_dict
        return assessment_to_dict(self)

    # The report package sits above this module; these thin delegations import it at
    # call time only (as to_dict does), so importing assessment never pulls it in.
    def _repr_html_(self) -> str:
        """Jupyter's rich display: a compact HTML summary (recommendation, ranking
        table, calibration figure) from the same section content as the PDF."""
        from ..report.notebook import to_html
        return to_html(self)

    def figure(self, name: str):
        """The report's figure ``name`` as a :class:`matplotlib.figure.Figure`; names
        in :meth:`figure_names` (e.g. ``"calibration"``, ``"coverage"``)."""
        from ..report.notebook import figure
        return figure(self, name)

    @staticmethod
    def figure_names() -> list[str]:
        """Names :meth:`figure` accepts, in the report's order."""
        from ..report.notebook import figure_names
        return figure_names()


def _package_versions() -> dict:
    """Versions of the libraries the run used: the loaded module's ``__version__``, or
    for one this process never imported (torch, when every network ran in a worker
    process) its installed distribution's version, read without importing it (an
    import of torch costs seconds)."""
    from importlib import metadata

    out = {"advisor": __version__, "python": platform.python_version()}
    for mod, dist in (("numpy", "numpy"), ("scipy", "scipy"), ("sklearn", "scikit-learn"),
                      ("pandas", "pandas"), ("torch", "torch"), ("joblib", "joblib")):
        m = sys.modules.get(mod)
        if m is not None:
            out[dist] = getattr(m, "__version__", "?")
            continue
        try:
            out[dist] = metadata.version(dist)
        except metadata.PackageNotFoundError:
            continue
    return out

