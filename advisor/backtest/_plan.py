"""The backtest's budgets (:class:`BacktestPlan`); the table is in ``_campaigns``'s docstring."""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

__all__ = ["BacktestPlan", "plan_for"]

@dataclass(frozen=True)
class BacktestPlan:
    """Every budget of a backtest; see the module docstring for the defaults."""

    replay_seeds: int = 3
    replay_max_picks: int | None = None
    refit_every: int = 1
    reoptimize_every: int | None = None
    random_orders: int = 200
    sim_functions: int = 8
    sim_seeds: int = 2
    sim_extra_candidates: int = 1000
    sim_max_budget: int | None = None
    n_init: int | None = None
    batch_method: str = "kriging_believer"
    simulate: bool = True
    replay: bool = True
    sim_classes: tuple = ("gp", "forest")
    grid: bool = True

    def to_dict(self) -> dict:
        d = dataclasses.asdict(self)
        d["sim_classes"] = list(d["sim_classes"])
        return d


def plan_for(quick: bool, **changes) -> BacktestPlan:
    """The quick or full plan, with any field overridden by keyword."""
    base = (BacktestPlan(replay_seeds=1, replay_max_picks=10, refit_every=1,
                         reoptimize_every=5, random_orders=32, sim_functions=8,
                         sim_seeds=3, sim_extra_candidates=200, sim_max_budget=30)
            if quick else BacktestPlan(replay_seeds=2, replay_max_picks=24, refit_every=1,
                                       reoptimize_every=5, sim_functions=8, sim_seeds=4,
                                       sim_extra_candidates=400, sim_max_budget=30))
    return dataclasses.replace(base, **changes)


def _n_init(n: int, plan: BacktestPlan) -> int:
    if plan.n_init is not None:
        return int(plan.n_init)
    return int(np.clip(n // 8, 2, 5))
