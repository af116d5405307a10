"""Failed trials in the simulated campaigns, and acquisitions weighted by P(success).

When the log holds enough failed trials for a model of failure
(:func:`advisor.feasibility.assess_feasibility` chose one), each simulated campaign's
stand-in gets a failure region as well as an objective:

* **Where trials fail.**  The chosen classifier, fitted on every logged trial, gives
  ``P(failure | x)`` on the stand-ins' candidate set.  For each stand-in one uniform
  number per candidate decides once and for all whether a trial there fails
  (``u < P(failure | x)``): common random numbers, so every surrogate and setting that
  picks the same candidate of the same stand-in meets the same outcome (a paired
  design, as the objective's noise draw already is).
* **What a run sees.**  A failed trial gives no objective value: the surrogate is fitted
  on the run's successful trials only.  The run's starting trials are drawn among the
  stand-in's successful candidates (a campaign starts from measured points; the picks
  after the start may fail).
* **How a run weights.**  Every model-based setting's acquisition is weighted by
  P(success) from a classifier refitted on the run's own observed successes and
  failures (never on the log: the log defines the truth here), with the rule the
  proposals use (:func:`advisor.batching.weight_by_success`: EI and PI times
  P(success), a bound or a Thompson draw as the optimistic improvement over the
  incumbent times P(success), candidates below ``MIN_SUCCESS`` left out while any
  reaches it) -- expected improvement with constraints, Gelbart, Snoek & Adams (2014)
  Eq. 4; Gardner et al. (2014) Sec. 3.  The run's classifier is a GP classifier (the
  model of the constraint in Gelbart et al.) whose kernel (Matérn-5/2, one length
  scale per feature) is held fixed at a fit on the whole log (``optimizer=None``): only
  its Laplace posterior is refitted, at every pick (cheap: a dozen points), never
  within a batch (a fantasy has no outcome).  So the run borrows the log's length
  scales -- how fast failure can change along each parameter -- but not where failures
  are.  We first used the chosen family itself, refitted with the surrogate: a forest
  on the ten or so trials of a run could not learn anything (on the synthetic region of
  ``tests/test_feasibility.py``, seed 0, it wasted 21 of 80 picks, 19 when refitted at
  every pick, against 22 unweighted; the fixed-kernel GP classifier 10).  A run that has
  seen only successes predicts the smoothed rate ``1 / (n + 2)`` of failure everywhere,
  so the weighting starts to act after the first failure.  ``random`` stays unweighted:
  it is the reference of knowing nothing.
* **How a run is scored.**  Regret counts successful trials only: a failed trial is
  scored as the stand-in's worst successful value (it cannot lower the best so far),
  and the stand-in's optimum, worst value and best-5 % threshold are taken over its
  successful candidates (the best *feasible* value, as in the constrained-optimization
  works above).  Each run records ``failed_picks``, the trials it spent in failures.

Measured (``tests/test_feasibility.py``, 3 synthetic logs x 8 paired runs of 10 picks,
EI): 40 picks wasted in failures with the weighting against 81 without (one-sided
Wilcoxon signed-rank p = 0.0005) at the same regret (mean normalized-regret AUC 0.243
against 0.242): the weighting saves trials; it did not find better settings.

With no failure model (a log without failures, or too few to model) nothing here runs
and the backtest is exactly the unconstrained one (checked byte for byte against the
code before this module on a moulding slice).

References
----------
Gelbart, M. A., Snoek, J. & Adams, R. P. (2014). Bayesian optimization with unknown
constraints. UAI, 250-259.
Gardner, J. R., Kusner, M. J., Xu, Z., Weinberger, K. Q. & Cunningham, J. P. (2014).
Bayesian optimization with inequality constraints. ICML, 937-945.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..acquisition import Selection, select_batch
from ..batching import weight_by_success
from ..execution import task_seed
from ..feasibility import make_classifier, unit_cube

__all__ = ["FailureModel", "FailureRegion", "RunFailures", "failure_region", "REFIT_RULE"]

#: How a run's own classifier is refitted (said in the JSON).
REFIT_RULE = ("GP classifier, kernel fixed at a fit on the whole log, Laplace posterior "
              "refitted at every pick on the run's own successes and failures")


@dataclass
class RunFailures:
    """One stand-in's failure outcomes and the run-side classifier (one per task)."""

    failed: np.ndarray          # (n_pool,) bool: a trial at this candidate fails
    kind: str
    bounds: np.ndarray
    kernel: object = None
    seed: int = 0
    weighted: bool = True
    _unit: np.ndarray | None = field(default=None, repr=False)
    _p_success: np.ndarray | None = field(default=None, repr=False)

    def successful(self, rows) -> list[int]:
        """The rows whose trials gave an objective value."""
        return [int(i) for i in rows if not self.failed[int(i)]]

    def refit(self, space, frame, used) -> None:
        """Refit the run's classifier on the trials ``used`` so far (all outcomes)."""
        if not self.weighted:
            return
        if self._unit is None:
            self._unit = unit_cube(space.encode(frame, "onehot"), self.bounds)
        used = np.asarray(used, dtype=int)
        clf = make_classifier(self.kind, self.seed, self._unit.shape[1], self.kernel)
        clf.fit(self._unit[used], self.failed[used].astype(int))
        self._p_success = 1.0 - np.clip(clf.predict_fail(self._unit), 1e-4, 1 - 1e-4)

    def selector(self, cand: np.ndarray):
        """A function with :func:`advisor.acquisition.select_batch`'s signature that
        picks among the pool members ``cand`` (the rows of its ``X_candidates``)."""
        return lambda *args, **kw: self._select(cand, *args, **kw)

    def _select(self, cand, model, setting, Xc: np.ndarray, best: float, q: int,
                rng: np.random.Generator, method: str, *, y_scale: float,
                X_train: np.ndarray, y_train: np.ndarray, refit) -> Selection:
        """The acquisition weighted by the run's P(success); greedy fantasies for a
        batch (kriging believer / constant liar) through
        :func:`advisor.acquisition.select_batch`'s ``weight`` hook.
        Indices returned are rows of ``Xc``."""
        if not self.weighted or self._p_success is None:
            return select_batch(model, setting, Xc, best, q, rng, method, y_scale=y_scale,
                                X_train=X_train, y_train=y_train, refit=refit)
        p = self._p_success[cand]
        return select_batch(model, setting, Xc, best, q, rng, method, y_scale=y_scale,
                            X_train=X_train, y_train=y_train, refit=refit,
                            weight=lambda v, b, free: weight_by_success(
                                setting.name, v, p[free], b))


@dataclass
class FailureRegion:
    """Failure outcomes of every stand-in's candidates and how runs model failure."""

    failed: np.ndarray          # (n_functions, n_pool) bool
    p_fail: np.ndarray          # (n_pool,) from the whole-log classifier
    kind: str
    bounds: np.ndarray
    kernel: object = None
    weighted: bool = True
    source: str = ""

    def for_function(self, f: int, seed: int) -> RunFailures:
        return RunFailures(self.failed[f].copy(), self.kind, self.bounds, self.kernel,
                           seed, self.weighted)

    def scored_values(self, f: int, values: np.ndarray) -> np.ndarray:
        """The stand-in's values as a run is scored: failed candidates at the worst
        successful value (no gain), so the optimum is the best feasible value."""
        ok = ~self.failed[f]
        worst = float(values[ok].max()) if ok.any() else float(values.max())
        return np.where(ok, values, worst)

    def allowed_starts(self, f: int) -> np.ndarray:
        return np.flatnonzero(~self.failed[f])

    def info(self) -> dict:
        return {"region_classifier": self.source, "run_classifier_family": self.kind,
                "weighted": bool(self.weighted),
                "mean_failure_probability": float(self.p_fail.mean()),
                "failed_share": [float(r.mean()) for r in self.failed],
                "outcomes": "one uniform draw per candidate and stand-in, shared by every "
                            "setting (common random numbers)",
                "weighting": ("EI/PI x P(success); UCB/Thompson: optimistic improvement x "
                              "P(success); candidates below P(success) 0.5 left out; "
                              "random unweighted" if self.weighted else "none"),
                "run_classifier": REFIT_RULE,
                "scoring": "regret over successful trials only; a failed trial counts as "
                           "the stand-in's worst successful value"}


def failure_region(model, frame, n_functions: int, seed: int, *,
                   weighted: bool = True) -> FailureRegion:
    """Draw the failure outcomes of ``n_functions`` stand-ins on ``frame``.

    ``model`` is the chosen :class:`advisor.feasibility.FeasibilityModel` fitted on
    every logged trial; outcome ``u < P(failure)`` with one uniform ``u`` per candidate
    and stand-in from ``task_seed(seed, "sim-fail", f)``.
    """
    p_fail = 1.0 - np.asarray(model.success_probability(frame), dtype=float)
    failed = np.array([np.random.default_rng(task_seed(seed, "sim-fail", f))
                       .random(len(p_fail)) < p_fail for f in range(int(n_functions))],
                      dtype=bool)
    failed = failed.reshape(int(n_functions), len(p_fail))
    kernel = model.gp_kernel() if weighted else None
    return FailureRegion(failed, p_fail, "gp" if kernel is not None else "constant",
                         model.encoding_bounds, kernel, weighted, model.kind)


@dataclass
class FailureModel:
    """What :func:`advisor.backtest.run_backtest` takes as ``failures``: the chosen
    failure model fitted on every logged trial, and whether runs weight their
    acquisition by P(success) (``False`` only to measure what the weighting buys)."""

    model: object
    weighted: bool = True

    def region(self, frame, n_functions: int, seed: int) -> FailureRegion:
        return failure_region(self.model, frame, n_functions, seed, weighted=self.weighted)
