"""Splitters that decide which trials a surrogate is fitted on and which it is scored on.

All splitters follow scikit-learn's protocol: ``split(X, y=None, groups=None)`` yields
``(train_index, test_index)`` pairs and ``get_n_splits`` counts them, so any of
scikit-learn's own splitters can be used too.

Why three schemes.  Shuffled k-fold is optimistic on optimization logs: the trials of a
campaign cluster near its optimum, so a random test row almost always has a near twin in
training.  Forward chaining tests what a surrogate does inside a campaign — predict the
next trials from the ones so far.  Leaving one campaign out tests whether what a model
learned on past campaigns carries to a new one (the analogue of leaving one optimizer's
runs out in Eggensperger, Hutter, Hoos & Leyton-Brown 2015).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from sklearn.model_selection import KFold, LeaveOneGroupOut

from .errors import UsageError

__all__ = ["ShuffledKFold", "ForwardChaining", "SequentialCampaignChaining",
           "LeaveOneCampaignOut", "choose_scheme", "SCHEMES"]

SCHEMES = ("auto", "kfold", "forward", "campaign")


class ShuffledKFold:
    """Shuffled k-fold: every row is a test row exactly once.

    A thin wrapper of :class:`sklearn.model_selection.KFold` that accepts (and ignores)
    ``groups`` and carries a name for the report.
    """

    name = "kfold"

    def __init__(self, n_splits: int = 5, seed: int = 0):
        self.n_splits = n_splits
        self.seed = seed

    def get_n_splits(self, X=None, y=None, groups=None) -> int:
        return self.n_splits

    def split(self, X, y=None, groups=None):
        n = len(X)
        if n < 2 * self.n_splits:
            raise UsageError(f"{self.n_splits}-fold cross-validation needs at least "
                             f"{2 * self.n_splits} trials, got {n}",
                             fix="use fewer folds or add trials")
        yield from KFold(self.n_splits, shuffle=True, random_state=self.seed).split(X)

    def describe(self) -> str:
        return (f"shuffled {self.n_splits}-fold cross-validation (every trial is held out "
                "once; optimistic on logs that cluster near an optimum)")


class ForwardChaining:
    """Forward chaining within each campaign, by trial order.

    Each campaign's trials are sorted by ``order``; its first ``initial_fraction`` are
    only ever trained on, and the rest is cut into ``n_splits`` consecutive blocks.
    Fold *j* tests block *j* of every campaign and trains on every trial that precedes
    that block in its own campaign.  Campaigns too short to give each fold at least one
    test trial contribute training rows only.

    Parameters
    ----------
    order : array of float
        Trial order within its campaign (the log's order column), one per row.
    n_splits : int
    initial_fraction : float
        Share of each campaign that is never tested (the first trials, often random).
    """

    name = "forward"

    def __init__(self, order, n_splits: int = 4, initial_fraction: float = 0.4):
        self.order = np.asarray(order, dtype=float)
        self.n_splits = n_splits
        self.initial_fraction = initial_fraction

    def get_n_splits(self, X=None, y=None, groups=None) -> int:
        return self.n_splits

    def _blocks(self, groups):
        groups = np.asarray(groups if groups is not None else np.zeros(len(self.order)))
        # For each campaign: the rows in order, and the boundaries of the test blocks.
        plan = []
        for g in _unique_in_order(groups):
            rows = np.flatnonzero(groups == g)
            rows = rows[np.argsort(self.order[rows], kind="stable")]
            start = int(np.ceil(self.initial_fraction * len(rows)))
            start = max(start, 2)
            rest = len(rows) - start
            if rest < self.n_splits:
                plan.append((rows, None))
                continue
            edges = start + np.linspace(0, rest, self.n_splits + 1).round().astype(int)
            plan.append((rows, edges))
        return plan

    def split(self, X, y=None, groups=None):
        if len(self.order) != len(X):
            raise ValueError("order must have one value per row")
        plan = self._blocks(groups)
        if all(edges is None for _, edges in plan):
            raise UsageError("forward chaining needs campaigns of at least "
                             f"{self.n_splits + 2} ordered trials",
                             fix="use --validation kfold, or log more trials per campaign")
        for j in range(self.n_splits):
            train, test = [], []
            for rows, edges in plan:
                if edges is None:
                    train.append(rows)
                    continue
                train.append(rows[:edges[j]])
                test.append(rows[edges[j]:edges[j + 1]])
            yield np.sort(np.concatenate(train)), np.sort(np.concatenate(test))

    def describe(self) -> str:
        return (f"forward chaining within each campaign: {self.n_splits} consecutive test "
                f"blocks after the first {self.initial_fraction:.0%} of its trials; each "
                "block is predicted from the trials before it (and the other campaigns' "
                "trials before theirs), as a surrogate is used during a campaign")


class SequentialCampaignChaining(ForwardChaining):
    """Forward chaining in time across campaigns that ran one after another.

    ``campaign_order`` lists the campaigns in the order they ran.  Each campaign's
    trials, sorted by ``order``, are cut as in :class:`ForwardChaining`; fold (c, j)
    tests block j of campaign c and trains on every trial of the campaigns before c in
    full plus campaign c's trials before that block, so no training trial is later than
    any test trial of its fold.  The folds are yielded campaign by campaign (``n_splits``
    per campaign long enough to be tested).

    Parameters
    ----------
    order : array of float
        Trial order within its campaign, one per row.
    campaign_order : sequence
        Campaign labels, earliest first; every campaign of ``groups`` must appear.
    n_splits, initial_fraction : as in :class:`ForwardChaining`.
    """

    name = "forward"

    def __init__(self, order, campaign_order, n_splits: int = 4,
                 initial_fraction: float = 0.4):
        super().__init__(order, n_splits=n_splits, initial_fraction=initial_fraction)
        self.campaign_order = campaign_order

    def _plan(self, groups):
        groups = np.asarray(groups).astype(str)
        ranks = {str(c): i for i, c in enumerate(self.campaign_order)}
        missing = sorted(set(groups) - set(ranks))
        if missing:
            raise UsageError(f"campaign order does not list campaign(s) {', '.join(missing)}",
                             fix="list every campaign, earliest first")
        plan = dict(zip(_unique_in_order(groups), self._blocks(groups)))
        return sorted(plan.items(), key=lambda kv: ranks[kv[0]])

    def get_n_splits(self, X=None, y=None, groups=None) -> int:
        if groups is None:
            return self.n_splits
        return self.n_splits * sum(edges is not None for _, (_, edges) in self._plan(groups))

    def split(self, X, y=None, groups=None):
        if len(self.order) != len(X):
            raise ValueError("order must have one value per row")
        if groups is None:
            yield from super().split(X, y, groups)
            return
        plan = self._plan(groups)
        if all(edges is None for _, (_, edges) in plan):
            raise UsageError("forward chaining needs campaigns of at least "
                             f"{self.n_splits + 2} ordered trials",
                             fix="use --validation kfold, or log more trials per campaign")
        earlier: list[np.ndarray] = []
        for _, (rows, edges) in plan:
            if edges is not None:
                for j in range(self.n_splits):
                    train = np.concatenate(earlier + [rows[:edges[j]]])
                    yield np.sort(train), np.sort(rows[edges[j]:edges[j + 1]])
            earlier.append(rows)

    def describe(self) -> str:
        return (f"forward chaining across campaigns in the order they ran "
                f"({', '.join(map(str, self.campaign_order))}): each of {self.n_splits} "
                "consecutive test blocks of a campaign is predicted from every earlier "
                "campaign in full and the trials before it in its own campaign")


class LeaveOneCampaignOut:
    """Hold out one whole campaign per fold (needs at least three campaigns)."""

    name = "campaign"

    def get_n_splits(self, X=None, y=None, groups=None) -> int:
        return len(np.unique(groups)) if groups is not None else 0

    def split(self, X, y=None, groups=None):
        if groups is None or len(np.unique(groups)) < 3:
            raise UsageError("leave-one-campaign-out needs at least three campaigns",
                             fix="name the campaign column with --campaign, or use "
                                 "--validation kfold")
        yield from LeaveOneGroupOut().split(X, y, groups)

    def describe(self) -> str:
        return ("leave one campaign out: each campaign is predicted from all the others, "
                "which tests whether what a model learned on past campaigns carries to "
                "the next one")


@dataclass
class SchemeChoice:
    splitter: object
    name: str
    reason: str


def choose_scheme(requested: str, *, order=None, groups=None, n_rows: int,
                  seed: int = 0, quick: bool = False,
                  campaign_order=None) -> SchemeChoice:
    """Pick the validation scheme and say why.

    With ``campaign_order`` (campaigns earliest first) forward chaining runs across
    campaigns (:class:`SequentialCampaignChaining`); without it, campaign order is not
    inferred and each campaign is chained on its own.
    ``auto`` takes forward chaining when the log has an order column, else
    leave-one-campaign-out with at least three campaigns, else shuffled k-fold.
    """
    if requested not in SCHEMES:
        raise UsageError(f"unknown validation scheme '{requested}'",
                         fix="use one of " + ", ".join(SCHEMES))
    n_groups = len(np.unique(groups)) if groups is not None else 1
    k = 5 if n_rows >= 50 else max(2, min(5, n_rows // 4))
    if requested == "auto":
        if order is not None:
            requested, why = "forward", "the log has an order column (default)"
        elif n_groups >= 3:
            requested, why = "campaign", f"no order column, {n_groups} campaigns"
        else:
            requested, why = "kfold", "no order column and fewer than three campaigns"
    else:
        why = "chosen with --validation"
    if requested == "forward":
        if order is None:
            raise UsageError("forward chaining needs an order column",
                             fix="name it with --order, or use --validation kfold")
        if campaign_order is not None and groups is not None:
            return SchemeChoice(SequentialCampaignChaining(order, list(campaign_order),
                                                           n_splits=4),
                                "forward", why + "; campaigns in the given order")
        return SchemeChoice(ForwardChaining(order, n_splits=4), "forward", why)
    if requested == "campaign":
        return SchemeChoice(LeaveOneCampaignOut(), "campaign", why)
    return SchemeChoice(ShuffledKFold(k, seed=seed), "kfold", why)


def _unique_in_order(values):
    seen, out = set(), []
    for v in values:
        if v not in seen:
            seen.add(v)
            out.append(v)
    return out
