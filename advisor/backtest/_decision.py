"""The paired decision: does any acquisition setting beat the default on the same runs?

Every setting is compared with the default (EI, xi = 0.01) over the runs both completed
from the same start (a paired design), by the one-sided Wilcoxon signed-rank test of
"the setting's value is lower" (Wilcoxon 1945; the value is whatever the caller passes:
the assessment passes each run's final regret over random order's mean final regret on
the same stand-in since stop 29, the normalized-regret AUC before, see
``_choice._decide``; zero differences
dropped, Wilcoxon's own convention; exact conditional null distribution, equal to
scipy.stats.wilcoxon's exact and permutation p-values, see ``_one_sided_p``).  The grid's multiplicity is
controlled by Holm's step-down procedure (Holm 1979) at family-wise level ``alpha``.
A non-default setting is recommended only when its Holm-adjusted p-value is below
``alpha``; otherwise the default stands and the logs give no reason to change it.

When the runs come from stand-ins of more than one model class (``strata``: GP draws
and forest functions), a setting must *also* beat the default within every class on
its own (one-sided Wilcoxon, Holm over the grid within the class, each at ``alpha``):
an intersection-union test (Berger 1982), whose level stays ``alpha`` without a further
correction.  Why: a setting's advantage that holds on one class of stand-ins only is an
artefact of how that class extrapolates (GP draws fitted to a clustered log reward
exploration far from the data), not a property of the user's process.  Measured on the
next-campaign benchmark (``benchmarks/next_campaign.py``).

The same test compares *surrogates* (:func:`paired_surrogate_test`): each candidate's
default-setting runs against the reference model's over the same stand-ins and starts
(the simulated campaigns give every surrogate the same starts and noise), one-sided
"the candidate's value is lower" (in the unit the caller passes), Holm over the
candidates.  The ranking uses it to let
the backtest break a calibration tie, and the recommendation to name a pair (one model
for calibration, another for optimization), only when it is significant.

Power (:func:`paired_power`): the chance that a true mean difference of ``delta`` in
normalized regret is detected at the Holm level of the grid, measured by simulation:
the observed paired differences, centred and shifted by ``-delta``, resampled with
replacement (a bootstrap of the null spread) and tested as above; the AUC's power.  In
a non-negative unit where many runs end tied at the optimum (final regret) a shift is
no model of a gain: :func:`proportional_power` (the decision's power since stop 30).

References
----------
Wilcoxon, F. (1945). Individual comparisons by ranking methods. Biometrics Bulletin 1,
80-83.
Holm, S. (1979). A simple sequentially rejective multiple test procedure. Scandinavian
Journal of Statistics 6, 65-70.
Berger, R. L. (1982). Multiparameter hypothesis testing and acceptance sampling.
Technometrics 24, 295-300 (the intersection-union test; reference from memory).
"""

from __future__ import annotations

import numpy as np
from scipy.special import ndtr
from scipy.stats import rankdata

__all__ = ["paired_decision", "holm_adjust", "paired_power", "proportional_power",
           "detectable_gain", "paired_surrogate_test",
           "baseline_test", "ALPHA", "TEST_NAME", "SURROGATE_TEST_NAME", "BASELINE_TEST_NAME"]

ALPHA = 0.05
TEST_NAME = "one-sided Wilcoxon signed-rank vs the default, Holm-adjusted"
SURROGATE_TEST_NAME = ("one-sided Wilcoxon signed-rank of the default setting's runs "
                       "(in the unit the test states) vs the reference model over the "
                       "same simulated runs, Holm-adjusted over the candidates")
BASELINE_TEST_NAME = ("one-sided tests of the recommended setting against random search "
                      "(a stratified placement test among its shuffles from the same "
                      "start) and grid search (Wilcoxon signed-rank against the design "
                      "of the same start index), in AUC and in final regret, "
                      "Holm-adjusted over the four comparisons")


def holm_adjust(p) -> np.ndarray:
    """Holm (1979) step-down adjusted p-values (monotone, capped at 1)."""
    p = np.asarray(p, dtype=float)
    m = len(p)
    order = np.argsort(p, kind="stable")
    adj = np.empty(m)
    running = 0.0
    for rank, i in enumerate(order):
        running = max(running, (m - rank) * p[i])
        adj[i] = min(1.0, running)
    return adj


def _one_sided_p(diff: np.ndarray) -> float:
    """p of 'setting lower than default' from differences setting - default.

    The one-sided Wilcoxon signed-rank test (zero differences dropped, Wilcoxon's own
    convention) by its exact conditional null distribution: given the absolute
    differences, their mid-ranks are fixed and each sign is + or - with probability
    1/2, so ``W+`` (the sum of the ranks of positive differences) is a sum of
    independent two-point variables whose distribution is built by convolution.  This
    is the distribution scipy.stats.wilcoxon enumerates by permutation when there are
    ties or zeros and at most 13 runs, and its exact distribution when there are none;
    written by hand because scipy's permutation path evaluates the statistic once per
    sign pattern (about 2 s a call at 12 runs, 25 s of a 500-trial quick assessment)
    and falls back to the normal approximation beyond 13 runs with ties.  Mid-ranks
    are multiples of 1/2, so the convolution runs on twice the ranks, exactly.
    """
    d = np.asarray(diff, float)
    d = d[np.isfinite(d) & (d != 0)]
    if d.size == 0:
        return 1.0
    r2 = np.rint(2.0 * rankdata(np.abs(d))).astype(int)
    observed = int(r2[d > 0].sum())
    dist = np.zeros(int(r2.sum()) + 1)
    dist[0] = 1.0
    for v in r2:   # add one rank with sign + (shift by v) or - (no shift), each 1/2
        shifted = np.zeros_like(dist)
        shifted[v:] = dist[:-v]
        dist = 0.5 * (dist + shifted)
    return float(min(1.0, dist[:observed + 1].sum()))


def _placement_p(values, samples) -> float:
    """p of 'the runs are lower than the reference sample from their own start'.

    Each run ``x_i`` comes with a sample ``R_i`` of the reference procedure's values
    from the same start (random search: its shuffles).  Statistic: the sum over runs
    of the placement of ``x_i`` among ``R_i`` (values below plus half the ties).  Under
    the null that the run is exchangeable with its sample, ``x_i`` is equally likely
    to be any of the pooled ``|R_i| + 1`` values, so its placement is uniform over the
    pooled values' own placements among the others; the strata are independent, and the
    exact null distribution of the sum is the convolution of these (in half units,
    exact).  A stratified permutation test of the placement statistic (the one-sample-
    per-stratum case of van Elteren's 1960 stratified rank sum; from memory).  Why not
    the Wilcoxon signed-rank test of each run against the sample's *mean*: regret is
    right-skewed, so a random search run lies below random search's mean more often
    than not and that test calls random search better than itself (measured in
    ``tests/test_backtest.py``).  Written by hand: scipy has no stratified placement
    test.
    """
    observed, dist = 0, np.ones(1)
    for x, ref in zip(values, samples):
        pooled = np.append(np.asarray(ref, float), float(x))
        if not np.all(np.isfinite(pooled)) or pooled.size < 2:
            continue
        below = (pooled[:, None] > pooled[None, :]).sum(1)
        ties = (pooled[:, None] == pooled[None, :]).sum(1) - 1
        place2 = 2 * below + ties                     # twice the placement, an integer
        observed += int(place2[-1])
        step = np.bincount(place2) / pooled.size      # the null law of this stratum
        dist = np.convolve(dist, step)
    if dist.size == 1:
        return 1.0
    return float(min(1.0, dist[:observed + 1].sum()))


def _placement_row(runs: dict, samples: dict) -> dict:
    keys = sorted(set(runs) & set(samples))
    d = [runs[k] - float(np.mean(samples[k])) for k in keys]
    return {"runs": int(len(keys)), "mean_difference": float(np.mean(d)) if d else None,
            "p_value": _placement_p([runs[k] for k in keys], [samples[k] for k in keys])}


def _paired_row(runs: dict, base: dict, keep=None) -> dict:
    """Runs, mean difference (runs - base) and one-sided p over the shared run keys
    (those ``keep`` accepts, when given)."""
    keys = sorted(k for k in set(runs) & set(base) if keep is None or keep(k))
    d = np.array([runs[k] - base[k] for k in keys], float)
    return {"runs": int(len(keys)), "mean_difference": float(d.mean()) if d.size else None,
            "p_value": _one_sided_p(d)}


def paired_decision(values: dict, default: str, alpha: float = ALPHA,
                    strata: dict | None = None) -> dict:
    """Compare every setting with ``default`` over paired runs.

    Parameters
    ----------
    values : {label: {run key: float}}
        Lower is better (final regret over random's, or normalized-regret AUC); run
        keys pair the runs.
    default : str
        Label of the default setting (must be in ``values``).
    strata : {run key: str}, optional
        The stand-in class of each run.  With two or more classes a setting is
        significant only when it also beats the default within every class (see the
        module docstring); each comparison then carries ``by_class``:
        {class: {runs, mean_difference, p_value, p_holm}}.

    Returns
    -------
    dict
        ``test``, ``alpha``, ``default``, ``chosen`` (label; the default unless another
        setting beats it at the Holm level), ``beats_default`` (bool), ``comparisons``:
        [{label, runs, mean_difference (setting - default), p_value, p_holm,
        significant}].
    """
    if default not in values:
        return {"test": TEST_NAME, "alpha": alpha, "default": default, "chosen": None,
                "beats_default": False, "comparisons": [],
                "note": "the default setting has no completed runs"}
    base = values[default]
    rows = []
    for label, runs in values.items():
        if label == default:
            continue
        rows.append({"label": label, **_paired_row(runs, base)})
    adj = holm_adjust([r["p_value"] for r in rows]) if rows else []
    for r, a in zip(rows, adj):
        r["p_holm"] = float(a)
        r["significant"] = bool(a < alpha)
    classes = sorted(set((strata or {}).values()))
    if len(classes) >= 2 and rows:
        for c in classes:
            sub_rows = [_paired_row(values[r["label"]], base,
                                    keep=lambda k, c=c: strata.get(k) == c) for r in rows]
            sub_adj = holm_adjust([s["p_value"] for s in sub_rows])
            for r, s, a in zip(rows, sub_rows, sub_adj):
                s["p_holm"] = float(a)
                r.setdefault("by_class", {})[c] = s
                r["significant"] = bool(r["significant"] and a < alpha)
    winners = [r for r in rows if r["significant"]]
    chosen = min(winners, key=lambda r: r["mean_difference"])["label"] if winners else default
    out = {"test": TEST_NAME, "alpha": alpha, "default": default, "chosen": chosen,
           "beats_default": bool(winners), "comparisons": rows}
    if len(classes) >= 2:
        out["within_every_class"] = {
            "classes": classes,
            "rule": "a setting must also beat the default within every stand-in class "
                    "(one-sided Wilcoxon, Holm within the class, each at alpha): an "
                    "intersection-union test, Berger 1982"}
    return out


def baseline_test(setting: dict, baselines: dict, alpha: float = ALPHA) -> dict:
    """Does the recommended setting beat the classic baselines on the same runs?

    The claim behind every recommendation is that model-based search pays: that the
    setting ends better than random search (and grid search) would on the same
    stand-ins.  This tests it rather than assuming it, with the same one-sided
    Wilcoxon signed-rank test as :func:`paired_decision` ("the setting is lower"),
    paired by run, in both units the backtest records (``auc``, the decision's, and
    ``final``, the final regret: the real outcome's), Holm over all comparisons.

    Parameters
    ----------
    setting : {metric: {run key: float}}
        The recommended setting's runs, lower is better; metrics ``auc``, ``final``.
    baselines : {name: {metric: {run key: float or sequence of floats}}}
        The baselines' values paired with the same run keys: one value (grid search:
        its design for the run's start index) or a sample (random search: its shuffles
        after the run's start).

    Returns
    -------
    dict
        ``test``, ``alpha``, ``comparisons``: [{baseline, metric, test ("placement" or
        "signed-rank"), runs, mean_difference (setting - baseline mean), p_value, p_holm, significant,
        ratio_of_means (setting / baseline, for ``final``; the issue's "random search
        = 1" unit)}], ``beats``: {baseline: {metric: bool}}.
    """
    rows = []
    for name, by_metric in baselines.items():
        for metric in ("auc", "final"):
            runs, base = setting.get(metric) or {}, by_metric.get(metric) or {}
            sampled = any(np.ndim(v) > 0 for v in base.values())
            row = {"baseline": name, "metric": metric,
                   "test": "placement" if sampled else "signed-rank",
                   **(_placement_row(runs, base) if sampled else _paired_row(runs, base))}
            if row["runs"] == 0:
                continue
            keys = sorted(set(runs) & set(base))
            b = float(np.mean([np.mean(base[k]) for k in keys]))
            row["ratio_of_means"] = (float(np.mean([runs[k] for k in keys])) / b
                                     if metric == "final" and b > 0 else None)
            rows.append(row)
    adj = holm_adjust([r["p_value"] for r in rows]) if rows else []
    beats = {}
    for r, a in zip(rows, adj):
        r["p_holm"] = float(a)
        r["significant"] = bool(a < alpha)
        beats.setdefault(r["baseline"], {})[r["metric"]] = r["significant"]
    return {"test": BASELINE_TEST_NAME, "alpha": alpha, "comparisons": rows,
            "beats": beats}


def paired_power(diffs, n_settings: int, rng: np.random.Generator, delta: float = 0.1,
                 alpha: float = ALPHA, reps: int = 400, n_classes: int = 1
                 ) -> float | None:
    """Simulated power to detect a true improvement of ``delta`` over the default.

    ``diffs``: observed paired differences (setting - default) pooled over settings,
    one array per setting or one flat array; their centred spread is the null noise.
    The test level is the strictest Holm step, ``alpha / n_settings`` (conservative).
    Runs per replicate = the median number of paired runs.  With ``n_classes`` >= 2
    stand-in classes the replicate's runs are split evenly between the classes and the
    improvement must be found in every one (the intersection-union rule).
    """
    arrays = [np.asarray(d, float) for d in diffs] if isinstance(diffs, (list, tuple)) \
        else [np.asarray(diffs, float)]
    arrays = [a for a in arrays if a.size >= 2]
    if not arrays:
        return None
    n = int(np.median([a.size for a in arrays]))
    centred = np.concatenate([a - a.mean() for a in arrays])
    if n < 2:
        return None
    level = alpha / max(1, int(n_settings))
    k = max(1, int(n_classes))
    per = n // k
    if per < 2:
        return None
    hits = 0
    for _ in range(int(reps)):
        hits += all(_one_sided_p(rng.choice(centred, size=per, replace=True) - delta)
                    < level for _ in range(k))
    return hits / int(reps)


#: Above this many non-zero differences the power simulations use the normal
#: approximation of the signed-rank statistic (tie-corrected, no continuity correction,
#: as scipy.stats.wilcoxon(method="approx")); the exact convolution costs about 13 ms a
#: call at 190 runs, and a detectable-gain search makes thousands.  The decision itself
#: always uses the exact test.  Agreement checked in tests/test_backtest.py.
_EXACT_UP_TO = 50


def _one_sided_p_sim(diff: np.ndarray) -> float:
    """:func:`_one_sided_p`, by the normal approximation above ``_EXACT_UP_TO``."""
    d = np.asarray(diff, float)
    d = d[np.isfinite(d) & (d != 0)]
    n = d.size
    if n <= _EXACT_UP_TO:
        return _one_sided_p(d)
    r = rankdata(np.abs(d))
    w = float(r[d > 0].sum())
    _, t = np.unique(np.abs(d), return_counts=True)
    var = n * (n + 1) * (2 * n + 1) / 24.0 - float(np.sum(t ** 3 - t)) / 48.0
    return float(ndtr((w - n * (n + 1) / 4.0) / np.sqrt(var)))


class _ProportionalGain:
    """The resampled pairs of :func:`proportional_power` (see there), drawn once so that
    every gain is judged on the same replicates (common random numbers: the power is
    then monotone in the gain up to rank ties, which the gain search needs)."""

    def __init__(self, values, default, rng, alpha, reps, strata):
        self.ok = False
        base = values.get(default) or {}
        others = [lab for lab in values if lab != default]
        if not others or not base:
            return
        groups: dict = {}
        counts: dict = {}
        for lab in others:
            per: dict = {}
            for k in sorted(set(values[lab]) & set(base)):
                a, b = float(values[lab][k]), float(base[k])
                if not (np.isfinite(a) and np.isfinite(b)):
                    continue
                g = None if strata is None else strata.get(k)
                groups.setdefault(g, []).append((a, b))
                per[g] = per.get(g, 0) + 1
            for g, c in per.items():
                counts.setdefault(g, []).append(c)
        if not groups:
            return
        pairs = {g: np.asarray(v, float) for g, v in groups.items()}
        sizes = {g: int(np.median(counts[g])) for g in pairs}
        if min(sizes.values()) < 2:
            return
        self.mean = float(np.mean(np.concatenate([p.ravel() for p in pairs.values()])))
        self.level = alpha / len(others)
        self.reps = int(reps)
        # per stratum: (reps, size) challenger-side and default-side members
        self.draws = []
        for g, p in pairs.items():
            pick = p[rng.integers(0, len(p), size=(self.reps, sizes[g]))]
            swap = rng.random((self.reps, sizes[g])) < 0.5
            self.draws.append((np.where(swap, pick[..., 1], pick[..., 0]),
                               np.where(swap, pick[..., 0], pick[..., 1])))
        self.ok = True

    def power(self, kappa: float) -> float:
        hits = 0
        for r in range(self.reps):
            hits += all(_one_sided_p_sim(ch[r] * (1.0 - kappa) - de[r]) < self.level
                        for ch, de in self.draws)
        return hits / self.reps


def proportional_power(values: dict, default: str, rng: np.random.Generator,
                       delta: float = 0.1, alpha: float = ALPHA, reps: int = 400,
                       strata: dict | None = None) -> float | None:
    """Simulated power to find a setting whose runs end lower by ``delta`` on average,
    in a non-negative unit where many runs tie at 0 (final regret: both runs found the
    optimum), with the decision's own test and design.

    Why not :func:`paired_power`'s shift: final-regret differences are zero-inflated
    (about half the paired runs on the sample logs' stand-ins end at the same value,
    most at the optimum) and a shift by ``-delta`` turns every tie into a gain, which no
    setting can make on a run that already ends at the optimum.  Measured (stop 30, the
    case of ``tests/test_backtest.py``: half the runs at the optimum, the rest
    exponential, a true gain of 0.1, decided by :func:`paired_decision`): the decision
    found the gain 5% of the time at 192 runs and 16% at 384, where the shift model
    said 0.12-0.62 and 0.61-0.94 (over four null samples) and this model 0.01-0.05 and
    0.09-0.19.

    Model.  Null population: every pair (a setting's run, the default's run on the same
    key) in ``values``, pooled over the non-default settings.  Under the null the two
    members are exchangeable, so a replicate draws pairs with replacement and swaps
    each pair's members with probability 1/2.  Alternative: the challenger's member is
    multiplied by ``1 - kappa``, ``kappa = delta / m`` with ``m`` the population's mean
    value, so the challenger's mean is lower by ``delta``, runs at the optimum stay there
    and the spread shrinks with the level (a proportional improvement; our choice of
    model, checked against realized rates under it and under another shape of gain in
    ``tests/test_backtest.py``).  When ``m <= delta`` no setting can end lower by
    ``delta`` on average and the power is None.

    Design: as :func:`paired_decision`: per stratum (stand-in class) a replicate draws
    as many pairs as the median per-setting count of paired runs there, and the gain
    must be found in every stratum, each at the strictest Holm step ``alpha / k``
    (``k`` non-default settings); above ``_EXACT_UP_TO`` non-zero differences a
    replicate's test is the normal approximation.

    Parameters
    ----------
    values : {label: {run key: float}}
        Every setting's runs in the unit, non-negative, lower is better.
    default : str
        The default's label.
    strata : {run key: class}, optional
        The stand-in class of each run; None = one stratum.
    """
    sim = _ProportionalGain(values, default, rng, alpha, reps, strata)
    if not sim.ok or not sim.mean > delta:
        return None
    return sim.power(delta / sim.mean)


def detectable_gain(values: dict, default: str, rng: np.random.Generator,
                    target: float = 0.8, alpha: float = ALPHA, reps: int = 200,
                    strata: dict | None = None, steps: int = 7) -> dict | None:
    """The smallest proportional gain the runs find with probability ``target``.

    The model of :func:`proportional_power`; the gain ``delta = kappa * m`` (``m`` the
    runs' mean level in the unit) is found by bisection on ``kappa`` in (0, 1) over
    ``steps`` halvings, every candidate judged on the same replicates.  ``kappa = 1``
    (the challenger ends every run at the optimum, a gain of ``m``) is the largest gain
    there is.

    Returns
    -------
    dict or None
        ``{"gain": delta or None (not found even at kappa = 1), "power": the power at
        it, "largest_possible_gain": m, "power_at_largest": the power at kappa = 1,
        "target", "reps"}``; None when there are no paired runs.
    """
    sim = _ProportionalGain(values, default, rng, alpha, reps, strata)
    if not sim.ok or not sim.mean > 0:
        return None
    top = sim.power(1.0)
    out = {"gain": None, "power": None, "largest_possible_gain": sim.mean,
           "power_at_largest": top, "target": float(target), "reps": int(reps)}
    if top < target:
        return out
    lo, hi, p_hi = 0.0, 1.0, top
    for _ in range(int(steps)):
        mid = 0.5 * (lo + hi)
        p = sim.power(mid)
        if p >= target:
            hi, p_hi = mid, p
        else:
            lo = mid
    out.update(gain=hi * sim.mean, power=p_hi)
    return out


def paired_surrogate_test(values: dict, reference: str, candidates,
                          alpha: float = ALPHA) -> dict:
    """Does another surrogate optimize better than ``reference`` on the same runs?

    Parameters
    ----------
    values : {surrogate: {run key: float}}
        Each model's value with the default setting, lower is better (the assessment
        passes final regret over random search's since stop 29, the AUC before); run
        keys (stand-in, start) pair the runs across models.
    reference : str
        The model to beat (the calibration leader).
    candidates : iterable of str
        Models compared with ``reference`` (the reference itself is skipped).

    Returns
    -------
    dict
        ``test``, ``alpha``, ``reference``, ``comparisons``: [{surrogate, runs,
        mean_difference (candidate - reference), p_value (one-sided Wilcoxon, zero
        differences dropped), p_holm, significant}], ``better``: the significant
        candidate with the lowest mean difference, or None.  A candidate without paired
        runs gets p = 1.
    """
    base = values.get(reference) or {}
    rows = []
    for name in dict.fromkeys(candidates):
        if name == reference:
            continue
        rows.append({"surrogate": name, **_paired_row(values.get(name) or {}, base)})
    adj = holm_adjust([r["p_value"] for r in rows]) if rows else []
    for r, a in zip(rows, adj):
        r["p_holm"] = float(a)
        r["significant"] = bool(a < alpha and r["runs"] > 0)
    winners = [r for r in rows if r["significant"]]
    better = min(winners, key=lambda r: r["mean_difference"])["surrogate"] if winners else None
    return {"test": SURROGATE_TEST_NAME, "alpha": alpha, "reference": reference,
            "comparisons": rows, "better": better}
