"""Backtest acquisition settings on the user's own logs.

Private modules: ``_campaigns`` (pool replay on the logged campaigns, the diagnostic,
and simulated campaigns on stand-in functions, the evidence; plan, runs and summaries),
``_failures`` (failed trials in the simulated campaigns and the acquisition weighted by
P(success), when the log has a model of failure) and ``_decision`` (the paired test of
every setting against the default, Holm's multiplicity control and the simulated
power).  The method, budgets and output schema
are in :mod:`advisor.backtest._campaigns`'s docstring.
"""

from ._campaigns import (BacktestPlan, StandIns, campaign_pools, choose_setting, plan_for,
                         posterior_standins, replay_pool, run_backtest)
from ._failures import FailureModel
from ._decision import (ALPHA, SURROGATE_TEST_NAME, TEST_NAME, holm_adjust, paired_decision,
                        paired_power, paired_surrogate_test)

__all__ = ["BacktestPlan", "plan_for", "run_backtest", "choose_setting", "replay_pool",
           "posterior_standins", "StandIns", "campaign_pools", "paired_decision",
           "holm_adjust", "paired_power", "paired_surrogate_test", "ALPHA", "TEST_NAME",
           "SURROGATE_TEST_NAME", "FailureModel"]
