"""Grid search, the other classic baseline: a full-factorial design sized to the budget.

Levels per parameter ``m = max(2, floor(B ** (1 / d)))`` for a budget of ``B`` trials
and ``d`` parameters, at the midpoints of ``m`` equal cells of each range (on the log
scale for log parameters, rounded for integers); a categorical parameter with ``L``
levels takes ``min(m, L)`` of them, spread evenly over its level list.  When the full
factorial has more points than the budget (always beyond ``d = log2 B`` parameters),
the campaign runs a random subset of ``B`` distinct factorial points, drawn afresh for
each run (the fraction of a full factorial a team could afford; our choice over fixing
the extra parameters at their midpoints, which would leave them unexplored); when it
has fewer, the remaining trials are uniform random settings.  The run order is random.
Full-factorial designs as the baseline of response-surface practice: Box, Hunter &
Hunter (2005), *Statistics for Experimenters*, 2nd ed., ch. 5 (from memory).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

__all__ = ["grid_levels", "grid_design"]


def grid_levels(budget: int, d: int) -> int:
    """``max(2, floor(budget ** (1/d)))``, exact for perfect powers."""
    if d <= 0:
        return 1
    m = max(2, int(math.floor(budget ** (1.0 / d))))
    while (m + 1) ** d <= budget:  # floating-point guard for perfect powers
        m += 1
    while m > 2 and m ** d > budget:
        m -= 1
    return m


def _axis(p, m: int) -> list:
    """The grid values of one parameter (see the module docstring)."""
    if p.kind == "categorical":
        k = min(m, len(p.levels))
        idx = np.floor((np.arange(k) + 0.5) * len(p.levels) / k).astype(int)
        return [p.levels[i] for i in idx]
    u = (np.arange(m) + 0.5) / m
    if p.log:
        vals = 10.0 ** (math.log10(p.low) + u * (math.log10(p.high) - math.log10(p.low)))
    else:
        vals = p.low + u * (p.high - p.low)
    if p.kind == "integer":
        vals = np.clip(np.rint(vals), math.ceil(p.low), math.floor(p.high)).astype(int)
    return list(vals)


def grid_design(space, budget: int, rng: np.random.Generator) -> pd.DataFrame:
    """``budget`` settings of a grid-search campaign on ``space``, in run order."""
    rng = np.random.default_rng(rng)
    budget = int(budget)
    params = list(space)
    m = grid_levels(budget, len(params))
    axes = [_axis(p, m) for p in params]
    sizes = [len(a) for a in axes]
    total = math.prod(sizes)
    if total > 2 ** 62:
        # too many cells to index: independent levels per parameter (repeats are
        # then vanishingly rare)
        digits = np.column_stack([rng.integers(0, s, budget) for s in sizes])
    else:
        if total > budget:
            # distinct factorial cells by their mixed-radix index, without listing them
            chosen: set[int] = set()
            while len(chosen) < budget:
                chosen.update(int(i) for i in rng.integers(0, total, budget - len(chosen)))
            cells = np.array(sorted(chosen), dtype=np.int64)
        else:
            cells = np.arange(total, dtype=np.int64)
        digits = np.empty((len(cells), len(sizes)), dtype=np.int64)
        for j in range(len(sizes) - 1, -1, -1):
            digits[:, j] = cells % sizes[j]
            cells = cells // sizes[j]
    data = {p.name: [axis[int(i)] for i in digits[:, j]]
            for j, (p, axis) in enumerate(zip(params, axes))}
    frame = pd.DataFrame({p.name: data[p.name] for p in params})
    if len(frame) < budget:
        frame = pd.concat([frame, space.sample(budget - len(frame), rng)[frame.columns]],
                          ignore_index=True)
    return frame.iloc[rng.permutation(len(frame))].reset_index(drop=True)
