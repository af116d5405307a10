"""Figures of the report: each on small inputs and on the edge cases the report meets."""

import itertools
import struct

import numpy as np
import pandas as pd
import pytest
from matplotlib.colors import to_rgb
from matplotlib.figure import Figure
from scipy import stats

from advisor.report import figures as F


# -- helpers -----------------------------------------------------------------------------
def _cie_lightness(colour) -> float:
    """CIE 1976 L* of an sRGB colour (D65): the sRGB transfer function of IEC 61966-2-1
    and L* = 116 f(Y) - 16 of CIE 15:2004 (Eq. 8.1); luminance weights of ITU-R BT.709."""
    rgb = np.array(to_rgb(colour))
    lin = np.where(rgb <= 0.04045, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)
    y = float(lin @ [0.2126, 0.7152, 0.0722])
    return 116 * np.cbrt(y) - 16 if y > (6 / 29) ** 3 else y * (29 / 3) ** 3


def _labelled(fig: Figure) -> None:
    assert isinstance(fig, Figure)
    axes = fig.get_axes()
    assert axes
    for ax in axes:
        assert ax.get_xlabel().strip() and ax.get_ylabel().strip() or not ax.get_visible()
    fig.canvas.draw()  # layout must not raise either


def _predictions(names, n=40, seed=0):
    rng = np.random.default_rng(seed)
    rows = []
    for k, name in enumerate(names):
        y = rng.normal(size=n)
        mean = y + rng.normal(scale=0.5, size=n)
        std = np.full(n, 0.5 + 0.2 * k)
        for i in range(n):
            rows.append((name, i % 4, i, y[i], mean[i], std[i]))
    return pd.DataFrame(rows, columns=["surrogate", "fold", "row", "y", "mean", "std"])


def _fold_metrics(names):
    rows = [{"surrogate": n, "fold": f, "n": 10, "crps": 0.1 * (k + 1) + 0.01 * f}
            for k, n in enumerate(names) for f in range(4)]
    return pd.DataFrame(rows)


def _metrics(names, nan_for=()):
    out = {}
    for k, n in enumerate(names):
        vals = {"coverage_50": 0.5 - 0.05 * k, "coverage_90": 0.88, "coverage_95": 0.93}
        out[n] = {key: (np.nan if n in nan_for else v) for key, v in vals.items()}
    return out


def _band(values):
    v = [float(x) for x in values]
    return {"median": v, "q25": [x * 0.8 for x in v], "q75": [min(1, x * 1.2) for x in v]}


def _backtest(names, simulated_error=None):
    curve = _band(np.linspace(0.8, 0.0, 12))
    res = [{"surrogate": n, "label": "EI xi=0.01", "error": None, "curve": curve,
            "trials_to_best5": {"median": 8, "q25": 6, "q75": 9, "censored": 0, "n": 3}}
           for n in names]
    part = {"results": res, "random": {"label": "random order", "curve": _band(
        np.linspace(0.9, 0.2, 12))}}
    sim = ({"error": simulated_error, "results": []} if simulated_error
           else dict(part, random=part["random"]))
    return {"surrogates": list(names), "replay": dict(part, actual={
        "label": "actual order", "curve": _band(np.linspace(0.9, 0.1, 12))}),
        "simulated": sim,
        "per_surrogate": {n: {"label": "EI xi=0.01"} for n in names}}


def _relevance(d):
    rows = []
    for i in range(d):
        t = 0.5 / (i + 1)
        rows.append({"name": f"parameter_with_a_long_name_{i:02d}", "first_order": t * 0.8,
                     "first_order_interval": [t * 0.6, t], "total": t,
                     "total_interval": [t * 0.7, t * 1.3], "freeze": t * 1.3 < 0.05})
    return {"parameters": rows, "thresholds": {"total_upper_below": 0.05}}


# -- palette and styles ------------------------------------------------------------------
def test_palette_lightness_separates_in_greyscale():
    # Each pair of palette colours differs by at least 6 L* units (about twice the
    # just-noticeable difference of ~2.3 ΔE*ab, Sharma 2003 Digital Color Imaging
    # Handbook, from memory), so a greyscale print still separates them.
    light = [_cie_lightness(c) for c in F.PALETTE]
    gaps = [abs(a - b) for a, b in itertools.combinations(light, 2)]
    assert min(gaps) >= 6.0
    assert len(set(F.PALETTE)) == len(F.PALETTE)


def test_model_styles_are_stable_and_distinct():
    names = ["gp", "forest", "user:A", "baseline", "dngo", "user:B", "ensemble", "bnn",
             "neural_process", "user:C", "user:D"]
    styles = F.model_styles(names)
    assert F.model_styles(["baseline", "gp"])["gp"] == styles["gp"]  # fixed slot
    combos = {(s.color, s.marker, str(s.linestyle)) for s in styles.values()}
    assert len(combos) == len(names)
    # Up to eight models (the palette size) never share a colour, whatever the mix.
    builtins = ["gp", "forest", "dngo", "bnn", "ensemble", "neural_process", "baseline"]
    for mix in (builtins + ["user:A"], ["gp"] + [f"user:{i}" for i in range(7)],
                ["baseline", "user:A", "forest", "user:B", "user:C"]):
        assert len({s.color for s in F.model_styles(mix).values()}) == len(mix)


# -- evidence figures --------------------------------------------------------------------
def test_reliability_matches_exact_quantiles():
    # y placed at the predictive quantiles (i - 0.5)/n: the PIT values are exactly
    # uniform, so the observed frequency at p is the share of (i - 0.5)/n <= p
    # (closed form), i.e. the diagonal up to 1/n.
    n = 200
    q = (np.arange(1, n + 1) - 0.5) / n
    mean, std = np.zeros(n), np.ones(n)
    y = stats.norm.ppf(q)
    preds = pd.DataFrame({"surrogate": "m", "fold": 0, "row": np.arange(n), "y": y,
                          "mean": mean, "std": std})
    fig = F.reliability_figure(preds)
    _labelled(fig)
    line = [ln for ln in fig.axes[0].get_lines() if ln.get_label() == "m"][0]
    p, obs = line.get_data()
    np.testing.assert_allclose(obs, np.floor(p * n + 0.5) / n, atol=1e-12)  # exact count
    np.testing.assert_allclose(obs, p, atol=1 / n)


def test_coverage_and_fold_spread_with_a_failed_model():
    names = ["gp", "user:Broken", "baseline"]
    fig = F.coverage_figure(_metrics(names, nan_for=["user:Broken"]), {}, F.model_styles(names),
                            order=names)
    _labelled(fig)
    heights = sorted(round(p.get_height(), 6) for p in fig.axes[0].patches)
    expected = sorted(round(v, 6) for n in ("gp", "baseline")
                      for v in _metrics(names)[n].values())
    assert heights == expected
    _labelled(F.fold_spread_figure(_fold_metrics(["gp", "baseline"]), order=names))


def test_predicted_observed_uses_user_units():
    preds = _predictions(["gp", "forest", "baseline", "x"])
    fig = F.predicted_observed_figure(preds, ["gp", "forest", "baseline", "x"], sign=-1.0,
                                      objective_label="yield [%]")
    _labelled(fig)
    assert len(fig.axes) == 3  # at most three panels
    inside, outside = [ln for ln in fig.axes[0].get_lines()][:2]
    xs = np.sort(np.concatenate([inside.get_xdata(), outside.get_xdata()]))
    y = preds.loc[preds.surrogate == "gp", "y"].to_numpy()
    np.testing.assert_allclose(xs, np.sort(-y))  # maximization shown in user direction
    assert "yield [%]" in fig.axes[0].get_xlabel()


@pytest.mark.parametrize("make", [
    lambda: F.reliability_figure(pd.DataFrame(columns=["surrogate", "y", "mean", "std"])),
    lambda: F.coverage_figure({"a": {"coverage_50": np.nan}}),
    lambda: F.predicted_observed_figure(None, ["a"]),
    lambda: F.fold_spread_figure(pd.DataFrame()),
    lambda: F.fold_spread_figure(pd.DataFrame({"surrogate": ["a"], "crps": [np.nan]})),
])
def test_evidence_figures_without_working_models(make):
    _labelled(make())


# -- backtest and planning figures -------------------------------------------------------
@pytest.mark.parametrize("bt", [None, {}, _backtest(["gp"]),
                                _backtest(["gp", "user:A"], simulated_error="no sampler")])
def test_backtest_figure(bt):
    fig = F.backtest_figure(bt, F.model_styles(["gp", "user:A"]))
    _labelled(fig)
    assert len(fig.axes) == 2


def test_backtest_figure_draws_reference_and_models():
    fig = F.backtest_figure(_backtest(["gp", "forest"]))
    labels = [ln.get_label() for ln in fig.axes[0].get_lines()]
    assert "random order" in labels and "actual order" in labels
    assert sum("EI" in lab for lab in labels) == 2


@pytest.mark.parametrize("d", [0, 1, 6, 20])
def test_relevance_figure_scales_with_parameters(d):
    fig = F.relevance_figure(_relevance(d) if d else None)
    _labelled(fig)
    if d:
        assert len(fig.axes[0].get_yticklabels()) == d
        assert fig.get_size_inches()[1] >= 0.2 * d  # taller for more parameters
        marked = sum(t.get_text().startswith("*") for t in fig.axes[0].get_yticklabels())
        assert marked == sum(r["freeze"] for r in _relevance(d)["parameters"])


def test_relevance_with_nan_indices():
    rel = _relevance(3)
    rel["parameters"][1].update(total=None, first_order=float("nan"),
                                total_interval=[None, None])
    _labelled(F.relevance_figure(rel))


def test_learning_cost_and_proposals():
    learn = {"surrogate": "gp", "flat_from_n": 40, "points": [
        {"n_train": m, "crps_mean": 1 / np.sqrt(m), "crps_sd": 0.01} for m in (10, 20, 40, 80)]}
    _labelled(F.learning_curve_figure(learn, "warpage [mm]"))
    cost = {"max_fit_seconds": 1.0, "surrogates": {
        "gp": {"sizes": [10, 20, 40], "fit_seconds": [0.01, 0.04, 0.16],
               "predict_seconds": [0.001] * 3, "projected_size": 80,
               "projected_seconds_per_iteration": 0.64, "error": None},
        "user:A": {"error": "RuntimeError: boom"}}}
    _labelled(F.cost_figure(cost))
    props = pd.DataFrame({"predicted_mean": [1.0, 1.2], "predicted_low_90": [0.5, 0.9],
                          "predicted_high_90": [1.5, 1.6]})
    _labelled(F.proposals_figure(props, "y", best_logged=0.8))


@pytest.mark.parametrize("make", [
    lambda: F.learning_curve_figure(None), lambda: F.learning_curve_figure(
        {"points": [{"n_train": 5, "crps_mean": None}]}),
    lambda: F.cost_figure(None), lambda: F.cost_figure({"surrogates": {"a": {"error": "x"}}}),
    lambda: F.proposals_figure(None), lambda: F.proposals_figure(pd.DataFrame()),
])
def test_planning_figures_when_planning_did_not_run(make):
    _labelled(make())


def test_figure_png_resolution():
    fig = F.coverage_figure(_metrics(["gp"]))
    w_in, h_in = fig.get_size_inches()
    data = F.figure_png(fig, dpi=200)
    assert data[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948, Sec. 5.2)
    width, height = struct.unpack(">II", data[16:24])  # IHDR width, height
    # savefig rounds the pixel size; one pixel of slack.
    assert abs(width - w_in * 200) <= 1 and abs(height - h_in * 200) <= 1
