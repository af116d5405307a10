"""Splitter invariants (closed properties of each scheme)."""

import numpy as np
import pytest

from advisor.errors import UsageError
from advisor.validation import (ForwardChaining, LeaveOneCampaignOut, ShuffledKFold,
                                choose_scheme)


def test_kfold_tests_every_row_exactly_once():
    X = np.zeros((37, 2))
    seen = np.concatenate([test for _, test in ShuffledKFold(5, seed=3).split(X)])
    assert sorted(seen.tolist()) == list(range(37))


def test_kfold_refuses_too_few_rows():
    with pytest.raises(UsageError, match="at least 10"):
        list(ShuffledKFold(5).split(np.zeros((7, 1))))


def _campaign_log(rng):
    groups = np.repeat(["a", "b", "c"], [30, 22, 5])
    order = np.concatenate([rng.permutation(30), rng.permutation(22), np.arange(5)]) + 1.0
    return groups, order


def test_forward_chaining_never_tests_before_training():
    rng = np.random.default_rng(0)
    groups, order = _campaign_log(rng)
    sp = ForwardChaining(order, n_splits=4)
    folds = list(sp.split(np.zeros((len(order), 1)), groups=groups))
    assert len(folds) == 4
    for train, test in folds:
        assert len(set(train) & set(test)) == 0
        for g in np.unique(groups):
            tr = order[train][groups[train] == g]
            te = order[test][groups[test] == g]
            if len(te):
                assert tr.size and te.min() > tr.max()
    # campaign c (5 trials) is too short to test: it never appears as a test row
    tested = np.concatenate([t for _, t in folds])
    assert not np.any(groups[tested] == "c")
    assert len(tested) == len(set(tested))


def test_leave_one_campaign_out_holds_out_exactly_one_campaign():
    groups = np.repeat(["x", "y", "z", "w"], [5, 6, 7, 8])
    folds = list(LeaveOneCampaignOut().split(np.zeros((26, 1)), groups=groups))
    assert len(folds) == 4
    for train, test in folds:
        assert len(np.unique(groups[test])) == 1
        assert groups[test][0] not in set(groups[train])


def test_leave_one_campaign_out_needs_three():
    with pytest.raises(UsageError, match="three campaigns"):
        list(LeaveOneCampaignOut().split(np.zeros((10, 1)), groups=np.repeat([0, 1], 5)))


def test_auto_scheme_choice():
    g = np.repeat(["a", "b", "c"], 10)
    assert choose_scheme("auto", order=np.arange(30.0), groups=g, n_rows=30).name == "forward"
    assert choose_scheme("auto", order=None, groups=g, n_rows=30).name == "campaign"
    assert choose_scheme("auto", order=None, groups=None, n_rows=30).name == "kfold"
    with pytest.raises(UsageError):
        choose_scheme("forward", order=None, groups=g, n_rows=30)


def test_sequential_campaign_chaining_never_trains_on_a_later_trial():
    # Issue 13's check: with campaigns run one after another, a fold's training trials
    # are all earlier (in global time) than every test trial of that fold.
    from advisor.validation import SequentialCampaignChaining
    rng = np.random.default_rng(0)
    camps = np.repeat(["b", "a", "c"], [20, 15, 25])
    order = np.concatenate([rng.permutation(20), rng.permutation(15), rng.permutation(25)])
    ran = ["a", "b", "c"]                       # campaign a ran first, then b, then c
    global_time = np.array([ran.index(c) for c in camps]) * 1000 + order
    sp = SequentialCampaignChaining(order.astype(float), ran, n_splits=3)
    folds = list(sp.split(np.zeros((60, 1)), groups=camps))
    assert len(folds) == sp.get_n_splits(groups=camps) == 9
    for train, test in folds:
        assert global_time[train].max() < global_time[test].min()
        assert len(set(camps[test])) == 1
    # the last campaign's folds train on both earlier campaigns in full
    train, test = folds[-3]
    assert set(np.flatnonzero(np.isin(camps, ["a", "b"]))) <= set(train)
