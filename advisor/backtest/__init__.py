"""Backtest acquisition settings on the user's own logs.

Private modules: ``_campaigns`` (the orchestration, :func:`run_backtest`, and the
method's description), ``_plan`` (budgets), ``_pool`` (the pool campaign every experiment
runs), ``_replay`` (pool replay on the logged campaigns, the diagnostic), ``_simulated``
and ``_standins`` (simulated campaigns on stand-in functions of two model classes, the
evidence), ``_grid`` (the grid-search baseline),
``_failures`` (failed trials in the simulated campaigns and the acquisition weighted
by P(success), when the log has a model of failure),
``_summaries`` (regret curves and summaries), ``_choice`` (the best setting per
surrogate and the per-surrogate paired decision) and ``_decision`` (the paired test of
every setting against the default, Holm's multiplicity control and the simulated
power).  The method, budgets and output schema
are in :mod:`advisor.backtest._campaigns`'s docstring.
"""

from ._campaigns import (BacktestPlan, StandIns, campaign_pools, choose_setting, plan_for,
                         posterior_standins, replay_pool, run_backtest)
from ._grid import grid_design, grid_levels
from ._replay import replay_paired_test
from ._standins import STANDIN_CLASSES, mixed_standins
from ._failures import FailureModel
from ._decision import (ALPHA, BASELINE_TEST_NAME, SURROGATE_TEST_NAME, TEST_NAME,
                        baseline_test, holm_adjust, paired_decision, paired_power,
                        proportional_power, detectable_gain,
                        paired_surrogate_test)

__all__ = ["BacktestPlan", "plan_for", "run_backtest", "choose_setting", "replay_pool",
           "posterior_standins", "StandIns", "campaign_pools", "paired_decision",
           "holm_adjust", "paired_power", "proportional_power", "detectable_gain", "paired_surrogate_test", "ALPHA", "TEST_NAME",
           "SURROGATE_TEST_NAME", "BASELINE_TEST_NAME", "baseline_test", "grid_design", "grid_levels", "mixed_standins",
           "STANDIN_CLASSES", "replay_paired_test", "FailureModel"]
