"""The next-campaign benchmark (benchmarks/next_campaign.py) at its small size: the
published test functions meet their stated minima, and the issue's claims hold --
the recommended acquisition setting is not worse than the default (EI xi=0.01) beyond
0.10 of normalized regret (one-sided 95% paired bootstrap), beats random and grid
search (one-sided Wilcoxon signed-rank, p < 0.05), and a q = 4 batch by local
penalization beats random search and is within 0.15 of sequential (see below).

Small size: Branin and Hartmann-3, 6 paired replicates of 24 trials (12 pairs for the
pooled tests); the batch campaign on Hartmann-3, 48 paired replicates of 30 trials."""

from __future__ import annotations

from pathlib import Path

import pytest
from conftest import load_script

ROOT = Path(__file__).resolve().parent.parent


def _bench():
    return load_script("benchmarks/next_campaign.py")


def test_test_functions_meet_their_published_minima():
    _bench()._check_minima()  # Surjanovic & Bingham (2013), values in the docstring


@pytest.fixture(scope="module")
def small():
    # two worker processes (the result does not depend on it; `make test` runs on 2 cores)
    return _bench().run("small", seed=0, progress=lambda *_: None, jobs=2)


# Measured 2026-12-02 at the small size: with the pooled paired test alone, the backtest
# found Thompson better than the default on Hartmann-3 and, run for real, it ended at
# 0.23 normalized regret against the default's 0.02 (this was a strict xfail).  Since a
# setting must also beat the default within each stand-in class (GP draws, forest
# functions; advisor/backtest/_decision.py), the default stands there and the check
# holds on every function of the small benchmark.
@pytest.mark.slow
def test_recommended_not_worse_than_default(small):
    t = small["tests"]["not_worse_than_default"]
    assert t["upper_95"] < t["margin"], t


@pytest.mark.slow
def test_recommended_beats_random_and_grid_search(small):
    t = small["tests"]
    assert t["beats_random"]["p"] < 0.05, t
    assert t["beats_grid"]["p"] < 0.05, t


# The batch check (GDHL2016 local penalization, advisor/batching.py): Hartmann-3, q = 4,
# 30 trials, paired replicates (same starts, candidates and noise as the sequential
# and random campaigns).  Before the per-axis penalizer (2026-12-02, 8 replicates of 24
# trials, one Lipschitz constant for every axis) batch 0.55 vs sequential 0.03 vs random
# 1.00, p = 0.125 -- the batches spread along the coordinate the GP ignored and agreed
# on the one it used.
#
# Beats random search: one-sided Wilcoxon signed-rank of batch < random at level 0.05.
# Measured 2026-12-03 with the MAP length-scale prior and the length-scale separation
# guard of advisor/batching.py (benchmarks/batch_margin.py, results/batch_margin.json,
# 64 replicates per seed): p <= 6e-11 at each of seeds 0-4 (before the guard 5e-10 to
# 7e-7); at 24 replicates p <= 3e-4 at seeds 0-2 (before the prior and the guard).
@pytest.mark.slow
def test_batch_campaign_beats_random_search(small):
    b = small["batch"]
    assert b["q"] == 4 and b["replicates"] >= 16
    assert b["beats_random"]["p"] < b["beats_random"]["level"], b


# Within the margin 0.15 of sequential (one-sided 95% paired-bootstrap upper bound of the
# mean of batch - sequential normalized regret), 48 paired replicates.  Measured
# 2026-12-03 with the GP on type-II maximum likelihood (the default) and the separation
# guard (benchmarks/batch_margin.py, 5 seeds x 64 paired replicates = 320 pairs):
# batch - sequential = 0.007, Monte-Carlo standard error 0.016, 95% bootstrap interval
# [-0.025, 0.039]; bound at 64 replicates 0.011, 0.072, 0.096, 0.049, 0.088 at seeds
# 0-4.  Chance of this check failing at another seed: resampling 48 of the 320 pairs,
# the bound's 95th percentile is 0.154, so about 5% (at 24 replicates the 90th
# percentile was 0.18, more than 10%: hence 48).  Before the guard (GP with the MAP
# prior) the gap was 0.110 +- 0.033 and the bound failed at 4 of 5 seeds.
@pytest.mark.slow
def test_batch_campaign_within_margin_of_sequential(small):
    b = small["batch"]
    assert b["replicates"] >= 48
    assert b["within_sequential"]["upper_95"] < b["within_sequential"]["margin"], b
