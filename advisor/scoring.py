"""Scores of a Gaussian predictive distribution against held-out observations.

Every function takes plain arrays: the observed values ``y``, the predictive means and
the predictive standard deviations (of a new observation, noise included).  Lower is
better for ``nll``, ``crps``, ``calibration_error`` and ``sharpness``; a coverage is
good when it is near its nominal level; higher is better for the rank correlations.

References
----------
.. [GR2007] Gneiting, T. & Raftery, A. E. (2007). Strictly proper scoring rules,
   prediction, and estimation. JASA 102(477), 359-378.
.. [GRWG2005] Gneiting, T., Raftery, A. E., Westveld, A. H. & Goldman, T. (2005).
   Calibrated probabilistic forecasting using ensemble model output statistics and
   minimum CRPS estimation. Monthly Weather Review 133, 1098-1118 (Eq. 5).
.. [KFE2018] Kuleshov, V., Fenner, N. & Ermon, S. (2018). Accurate uncertainties for
   deep learning using calibrated regression. ICML (Eq. 9).
"""

from __future__ import annotations

import warnings

import numpy as np
from scipy import stats

__all__ = ["score_predictions", "gaussian_nll", "gaussian_crps", "interval_coverage",
           "calibration_error", "sharpness", "best_region_scores", "METRIC_KEYS",
           "point_scores", "block_bootstrap_means", "within_fold_rank_scores",
           "LOWER_IS_BETTER", "COVERAGE_LEVELS", "CALIBRATION_LEVELS"]

COVERAGE_LEVELS = (0.5, 0.9, 0.95)
#: Levels p at which the observed frequency F(y) <= p is compared with p ([KFE2018]).
CALIBRATION_LEVELS = np.linspace(0.05, 0.95, 19)

METRIC_KEYS = ("nll", "crps", "coverage_50", "coverage_90", "coverage_95",
               "calibration_error", "sharpness", "spearman", "kendall",
               "top_quarter_spearman", "top_hit_rate")
#: Direction of each metric for marking the best value (coverage: nearest nominal).
LOWER_IS_BETTER = {"nll": True, "crps": True, "calibration_error": True,
                   "sharpness": True, "spearman": False, "kendall": False,
                   "top_quarter_spearman": False, "top_hit_rate": False}


def _as_arrays(y, mean, std):
    y = np.asarray(y, dtype=float).ravel()
    mean = np.asarray(mean, dtype=float).ravel()
    std = np.asarray(std, dtype=float).ravel()
    if not (y.shape == mean.shape == std.shape):
        raise ValueError(f"y, mean and std must have one shape, got {y.shape}, "
                         f"{mean.shape}, {std.shape}")
    if np.any(~(std > 0)):
        raise ValueError("std must be positive and finite")
    return y, mean, std


def gaussian_nll(y, mean, std) -> np.ndarray:
    r"""Pointwise negative log-likelihood of ``y`` under N(mean, std²).

    .. math:: \mathrm{NLL} = \tfrac12\log(2\pi\sigma^2) + \frac{(y-\mu)^2}{2\sigma^2}
    """
    y, mean, std = _as_arrays(y, mean, std)
    return 0.5 * np.log(2 * np.pi * std**2) + 0.5 * ((y - mean) / std) ** 2


def gaussian_crps(y, mean, std) -> np.ndarray:
    r"""Pointwise continuous ranked probability score of N(mean, std²) at ``y``.

    Closed form ([GRWG2005] Eq. 5), with :math:`z = (y-\mu)/\sigma`:

    .. math:: \mathrm{CRPS} = \sigma\left[z\,(2\Phi(z)-1) + 2\varphi(z) - 1/\sqrt\pi\right]

    In the units of ``y``; it reduces to the absolute error for a point forecast.
    """
    y, mean, std = _as_arrays(y, mean, std)
    z = (y - mean) / std
    return std * (z * (2 * stats.norm.cdf(z) - 1) + 2 * stats.norm.pdf(z) - 1 / np.sqrt(np.pi))


def interval_coverage(y, mean, std, level: float) -> float:
    """Fraction of ``y`` inside the central ``level`` interval mean ± z·std."""
    y, mean, std = _as_arrays(y, mean, std)
    half = stats.norm.ppf(0.5 + level / 2) * std
    return float(np.mean(np.abs(y - mean) <= half))


def calibration_error(y, mean, std, levels=CALIBRATION_LEVELS) -> float:
    r"""Calibration error of [KFE2018] Eq. 9 with unit weights, averaged over levels.

    .. math:: \mathrm{cal} = \frac1m\sum_j (p_j - \hat p_j)^2,\qquad
              \hat p_j = \frac1n\,\#\{t : F_t(y_t) \le p_j\}

    where :math:`F_t` is the predictive CDF.  0 for perfect calibration; at most 1.
    (Kuleshov et al. sum over levels; we average so the value does not depend on the
    grid size.)
    """
    y, mean, std = _as_arrays(y, mean, std)
    pit = stats.norm.cdf((y - mean) / std)
    levels = np.asarray(levels, dtype=float)
    observed = np.mean(pit[None, :] <= levels[:, None], axis=1)
    return float(np.mean((levels - observed) ** 2))


def reliability_curve(y, mean, std, levels=CALIBRATION_LEVELS) -> tuple[np.ndarray, np.ndarray]:
    """Expected against observed frequency (the reliability diagram's points)."""
    y, mean, std = _as_arrays(y, mean, std)
    pit = stats.norm.cdf((y - mean) / std)
    levels = np.asarray(levels, dtype=float)
    return levels, np.mean(pit[None, :] <= levels[:, None], axis=1)


def sharpness(std) -> float:
    """Mean predictive variance (Kuleshov et al. 2018, §3.3): the smaller, the sharper.

    In squared units of ``y``; only meaningful beside calibration.
    """
    std = np.asarray(std, dtype=float).ravel()
    return float(np.mean(std**2))


def _rank_corr(a, b, fn) -> float:
    if len(a) < 3 or np.ptp(a) == 0 or np.ptp(b) == 0:
        return float("nan")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return float(fn(a, b).statistic)


def best_region_scores(y, mean, *, quantile: float = 0.25, top_k: int = 3) -> dict:
    """How well the predicted means order the promising (lowest) part of ``y``.

    * ``top_quarter_spearman``: Spearman correlation between ``mean`` and ``y`` over the
      observations in the best ``quantile`` of ``y`` (NaN with fewer than three);
    * ``top_hit_rate``: 1 if the observation with the best predicted mean is among the
      ``top_k`` truly best observations, else 0 (averaged over folds by the caller).

    Both assume minimization.  Why these: Foldager et al. (2023) find that calibration
    alone does not order surrogates by optimization performance within a model class;
    what the acquisition needs is the right order near the optimum.
    """
    y = np.asarray(y, dtype=float).ravel()
    mean = np.asarray(mean, dtype=float).ravel()
    cut = np.quantile(y, quantile) if len(y) else np.nan
    sel = y <= cut
    rho = _rank_corr(mean[sel], y[sel], stats.spearmanr) if sel.sum() >= 3 else float("nan")
    if len(y) == 0:
        hit = float("nan")
    else:
        best_true = np.argsort(y, kind="stable")[:min(top_k, len(y))]
        hit = float(int(np.argmin(mean)) in set(best_true.tolist()))
    return {"top_quarter_spearman": rho, "top_hit_rate": hit}


def score_predictions(y, mean, std, folds=None) -> dict:
    """All scores of Gaussian predictions ``(mean, std)`` against observations ``y``.

    Returns
    -------
    dict
        ``nll`` mean Gaussian negative log-likelihood (nats per point);
        ``crps`` mean CRPS ([GRWG2005] closed form; units of ``y``);
        ``coverage_50``, ``coverage_90``, ``coverage_95`` fraction of ``y`` inside the
        central intervals; ``calibration_error`` ([KFE2018], see
        :func:`calibration_error`); ``sharpness`` mean predictive variance;
        ``spearman``, ``kendall`` rank correlation of mean with ``y``
        (``scipy.stats``; NaN when undefined); ``top_quarter_spearman`` and
        ``top_hit_rate`` (see :func:`best_region_scores`, minimization).  With
        ``folds`` (pooled held-out predictions), those four rank metrics are taken
        within each fold and averaged (:func:`within_fold_rank_scores`), and their
        spread across folds is added as ``<metric>_fold_sd`` and ``<metric>_folds``.
    """
    y, mean, std = _as_arrays(y, mean, std)
    out = {
        "nll": float(np.mean(gaussian_nll(y, mean, std))),
        "crps": float(np.mean(gaussian_crps(y, mean, std))),
    }
    for level in COVERAGE_LEVELS:
        out[f"coverage_{int(round(level * 100))}"] = interval_coverage(y, mean, std, level)
    out["calibration_error"] = calibration_error(y, mean, std)
    out["sharpness"] = sharpness(std)
    out["spearman"] = _rank_corr(mean, y, stats.spearmanr)
    out["kendall"] = _rank_corr(mean, y, stats.kendalltau)
    out.update(best_region_scores(y, mean))
    if folds is not None:
        out.update(within_fold_rank_scores(y, mean, folds))
    return out


def stratified_bootstrap_index(folds, n_boot: int, rng: np.random.Generator) -> np.ndarray:
    """Index matrix (n_boot × n) that resamples points within each fold.

    Resampling within folds keeps every fold's share of the points, so a bootstrap
    replicate looks like another draw of the same cross-validation.
    """
    folds = np.asarray(folds)
    n = len(folds)
    idx = np.empty((n_boot, n), dtype=np.int64)
    for f in np.unique(folds):
        rows = np.flatnonzero(folds == f)
        idx[:, rows] = rows[rng.integers(0, len(rows), size=(n_boot, len(rows)))]
    return idx


def bootstrap_intervals(y, mean, std, idx, level: float = 0.95) -> dict:
    """Percentile bootstrap intervals of the main scores (Efron & Tibshirani 1993, §13.3).

    ``idx`` is an index matrix from :func:`stratified_bootstrap_index`.  Vectorized for
    every score but Kendall's tau, which is recomputed per replicate with scipy on at
    most 200 replicates.  Returns ``{metric: [low, high]}``.
    """
    y, mean, std = _as_arrays(y, mean, std)
    a = (1 - level) / 2
    Y, M, S = y[idx], mean[idx], std[idx]
    z = (Y - M) / S
    out = {
        "nll": np.mean(0.5 * np.log(2 * np.pi * S**2) + 0.5 * z**2, axis=1),
        "crps": np.mean(S * (z * (2 * stats.norm.cdf(z) - 1) + 2 * stats.norm.pdf(z)
                             - 1 / np.sqrt(np.pi)), axis=1),
        "sharpness": np.mean(S**2, axis=1),
    }
    for lv in COVERAGE_LEVELS:
        out[f"coverage_{int(round(lv * 100))}"] = np.mean(
            np.abs(z) <= stats.norm.ppf(0.5 + lv / 2), axis=1)
    pit = stats.norm.cdf(z)
    observed = np.mean(pit[:, None, :] <= CALIBRATION_LEVELS[None, :, None], axis=2)
    out["calibration_error"] = np.mean((CALIBRATION_LEVELS[None, :] - observed) ** 2, axis=1)
    ra = stats.rankdata(M, axis=1)
    rb = stats.rankdata(Y, axis=1)
    ra -= ra.mean(axis=1, keepdims=True)
    rb -= rb.mean(axis=1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        out["spearman"] = (ra * rb).sum(1) / np.sqrt((ra**2).sum(1) * (rb**2).sum(1))
    taus = [_rank_corr(M[b], Y[b], stats.kendalltau) for b in range(min(200, len(idx)))]
    out["kendall"] = np.asarray(taus)
    res = {}
    for k, v in out.items():
        v = np.asarray(v, dtype=float)
        v = v[np.isfinite(v)]
        res[k] = [float(np.quantile(v, a)), float(np.quantile(v, 1 - a))] if v.size else [
            float("nan"), float("nan")]
    return res


def block_bootstrap_means(values, blocks, n_boot: int, rng: np.random.Generator,
                          strata=None) -> np.ndarray:
    """Replicate means of each row of ``values`` under a rescaled block bootstrap.

    Whole blocks (e.g. campaign × fold cells, whose held-out errors are correlated)
    are drawn with replacement, within each stratum when ``strata`` (one label per
    point, constant within a block) is given, and the same draws serve every row, so
    differences between rows are paired.  With few blocks per stratum the plain
    bootstrap variance is too small by the factor (G-1)/G; each stratum's deviation from
    its mean is therefore multiplied by sqrt(G/(G-1)), the rescaling bootstrap of Rao &
    Wu (1988), "Resampling inference with complex survey data", JASA 83, 231-241
    (their Eq. 2.4 with m_h = n_h - 1 in the form of §3).  A stratum with one block
    contributes no variance.

    Parameters
    ----------
    values : array (m, n)
        One row per model (per-point losses).
    blocks : array (n,)
        Block label of each point.
    n_boot : int
    rng : numpy Generator
    strata : array (n,), optional

    Returns
    -------
    array (m, n_boot)
        Replicate means; each stratum keeps its share of the points.
    """
    values = np.atleast_2d(np.asarray(values, float))
    blocks = np.asarray(blocks)
    n = values.shape[1]
    strata = np.zeros(n, dtype=int) if strata is None else np.asarray(strata)
    out = np.zeros((values.shape[0], n_boot))
    for h in np.unique(strata):
        in_h = strata == h
        labels, inv = np.unique(blocks[in_h], return_inverse=True)
        g = len(labels)
        sums = np.zeros((values.shape[0], g))
        np.add.at(sums.T, inv, values[:, in_h].T)
        counts = np.bincount(inv, minlength=g).astype(float)
        mean_h = sums.sum(axis=1) / counts.sum()
        share = in_h.sum() / n
        if g < 2:
            out += share * mean_h[:, None]
            continue
        draws = rng.integers(0, g, size=(n_boot, g))
        w = np.zeros((n_boot, g))
        np.add.at(w, (np.repeat(np.arange(n_boot), g), draws.ravel()), 1.0)
        rep = (sums @ w.T) / (counts @ w.T)[None, :]
        out += share * (mean_h[:, None] + np.sqrt(g / (g - 1)) * (rep - mean_h[:, None]))
    return out


#: Keys a model's pooled predictions may carry for a non-Gaussian predictive
#: distribution, each an array aligned with ``y`` computed at variance scale 1.
POINT_SCORE_KEYS = ("nll_pt", "crps_pt", "pit")


def has_point_scores(p: dict) -> bool:
    """True when ``p`` carries its own per-point scores (a non-Gaussian predictive)."""
    return all(p.get(k) is not None for k in POINT_SCORE_KEYS)


def point_scores(p: dict, scale=1.0) -> dict:
    """Per-point ``nll``, ``crps`` and ``pit`` of one model's pooled predictions.

    ``p`` has ``y``, ``mean``, ``std`` and optionally ``nll_pt``, ``crps_pt``, ``pit``
    (a non-Gaussian predictive distribution's own scores at variance scale 1); when
    present those are returned as they are and ``scale`` is ignored.  Otherwise the
    Gaussian closed forms ([GRWG2005] Eq. 5 for CRPS) at std·scale (``scale`` a number
    or one value per point).
    """
    if has_point_scores(p):
        return {"nll": np.asarray(p["nll_pt"], float), "crps": np.asarray(p["crps_pt"], float),
                "pit": np.asarray(p["pit"], float)}
    y = np.asarray(p["y"], float)
    std = np.asarray(p["std"], float) * np.broadcast_to(np.asarray(scale, float), y.shape)
    return {"nll": gaussian_nll(y, p["mean"], std), "crps": gaussian_crps(y, p["mean"], std),
            "pit": stats.norm.cdf((y - np.asarray(p["mean"], float)) / std)}


def within_fold_rank_scores(y, mean, folds) -> dict:
    """Rank metrics computed within each fold, then averaged, with their spread.

    For each fold with at least three points: Spearman's rho and Kendall's tau of
    ``mean`` with ``y`` (scipy), and :func:`best_region_scores`.  Returns, per metric,
    the mean over the folds where it is defined (``spearman`` …), the standard
    deviation across those folds (``spearman_fold_sd``, ddof=1, NaN with one fold) and
    the number of folds it rests on (``spearman_folds``).  Averaging within folds keeps
    a model from scoring by shifting its level between folds (each fold has its own
    training set), and ``top_hit_rate`` becomes the share of folds whose predicted best
    is among the three truly best.
    """
    y = np.asarray(y, float).ravel()
    mean = np.asarray(mean, float).ravel()
    folds = np.asarray(folds).ravel()
    per = {k: [] for k in ("spearman", "kendall", "top_quarter_spearman", "top_hit_rate")}
    for f in np.unique(folds):
        sel = folds == f
        if sel.sum() < 3:
            continue
        per["spearman"].append(_rank_corr(mean[sel], y[sel], stats.spearmanr))
        per["kendall"].append(_rank_corr(mean[sel], y[sel], stats.kendalltau))
        for k, v in best_region_scores(y[sel], mean[sel]).items():
            per[k].append(v)
    out = {}
    for k, vals in per.items():
        v = np.asarray(vals, float)
        v = v[np.isfinite(v)]
        out[k] = float(v.mean()) if v.size else float("nan")
        out[f"{k}_fold_sd"] = float(v.std(ddof=1)) if v.size > 1 else float("nan")
        out[f"{k}_folds"] = int(v.size)
    return out
