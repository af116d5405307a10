"""Figures of the design-review report (matplotlib, Agg), one function each.

Every function takes plain data (the :class:`~advisor.assessment.Assessment` parts or
the JSON payload of :func:`advisor.report.export.assessment_to_dict`), returns a
:class:`matplotlib.figure.Figure` built without pyplot's global state (so nothing leaks
between reports and no display is needed), and never raises on missing or NaN values:
a panel with nothing to show says so in words.  :func:`figure_png` renders a figure to
PNG bytes and closes it.

Styles
------
One mapping, :func:`model_styles`, gives every model a colour, a marker, a line style
and a hatch, used by every figure so that a model looks the same throughout a report.
Built-in models keep a fixed slot (the registry order), so ``gp`` looks the same in
every report; other models take the free slots in the order given.  The palette is our
own: eight hues chosen so that (a) neighbouring slots differ in hue family for the
common colour-vision deficiencies (no red/green pair at equal lightness) and (b) their
CIE L* lightness values are spread from about 22 to 85, at least 6 apart, so a
greyscale print still separates them; markers, dashes and hatches separate them a second time.
"""

from __future__ import annotations

import io
import math
from dataclasses import dataclass
from typing import Mapping, Sequence

import numpy as np
from matplotlib.figure import Figure
from matplotlib.backends.backend_agg import FigureCanvasAgg

from ..scoring import CALIBRATION_LEVELS, COVERAGE_LEVELS

__all__ = ["PALETTE", "ModelStyle", "model_styles", "figure_png", "reliability_figure",
           "coverage_figure", "predicted_observed_figure", "fold_spread_figure",
           "backtest_figure", "relevance_figure", "learning_curve_figure", "cost_figure",
           "proposals_figure", "failure_map_figure", "REFERENCE_STYLE"]

#: Our palette, ordered so that consecutive slots alternate dark/light and warm/cool.
#: Approximate CIE L* (D65) in the comment; checked in tests/test_figures.py.
PALETTE = (
    "#1d2f6f",  # deep indigo, L* ~ 22
    "#d9902a",  # amber, L* ~ 66
    "#2f8fc4",  # cerulean, L* ~ 56
    "#7b2d5b",  # plum, L* ~ 31
    "#8ec3dc",  # pale sky, L* ~ 76
    "#bf5a1e",  # rust, L* ~ 50
    "#5f5f5f",  # graphite, L* ~ 40
    "#f2cf8a",  # sand, L* ~ 85
)
_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "h")
_DASHES = ("-", "--", "-.", ":", (0, (6, 2, 1, 2, 1, 2)), (0, (1, 1)), (0, (8, 3)),
           (0, (3, 1, 3, 3)))
_HATCHES = ("", "//", "..", "xx", "\\\\", "oo", "--", "++")
# Registry order of the built-in surrogates (advisor.surrogates.BUILTIN); the
# baseline takes the graphite slot so "knowing nothing" reads as neutral grey.
_FIXED = {"gp": 0, "forest": 1, "dngo": 2, "bnn": 3, "ensemble": 5, "neural_process": 7,
          "baseline": 6}
_FREE_ORDER = (4, 2, 3, 5, 7, 1, 0, 6)

_TEXT = 7.5  # base font size (points) of figure text; figures print at ~16 cm wide
_WIDTH = 6.3  # inches, the text width of an A4 page with 18 mm margins


@dataclass(frozen=True)
class ModelStyle:
    """How one model is drawn: colour, marker, line style and bar hatch."""

    color: str
    marker: str
    linestyle: object
    hatch: str

    def line(self) -> dict:
        # A dark marker edge keeps the light slots (sky, sand) visible on white.
        return {"color": self.color, "marker": self.marker, "linestyle": self.linestyle,
                "markeredgecolor": "#222222", "markeredgewidth": 0.4}


#: The random-search / reference curve: black, dotted, light grey band.
REFERENCE_STYLE = ModelStyle("#000000", "", ":", "")


def model_styles(names: Sequence[str]) -> dict[str, ModelStyle]:
    """One :class:`ModelStyle` per model name, stable across figures and reports.

    Built-in names take their fixed slot; the others take free slots in the order
    given.  Past eight models, slots repeat with a different marker and dash offset so
    that no two models share all four attributes.
    """
    out: dict[str, ModelStyle] = {}
    taken = {_FIXED[n] for n in names if n in _FIXED}
    free = [s for s in _FREE_ORDER if s not in taken]
    extra = 0
    for n in dict.fromkeys(names):
        if n in _FIXED:
            slot, shift = _FIXED[n], 0
        elif free:
            slot, shift = free.pop(0), 0
        else:
            slot, shift = extra % len(PALETTE), 1 + extra // len(PALETTE)
            extra += 1
        k = len(_MARKERS)
        out[n] = ModelStyle(PALETTE[slot], _MARKERS[(slot + 3 * shift) % k],
                            _DASHES[(slot + shift) % len(_DASHES)],
                            _HATCHES[(slot + shift) % len(_HATCHES)])
    return out


def _style(styles: Mapping[str, ModelStyle] | None, name: str, i: int) -> ModelStyle:
    """The model's style, or slot ``i`` when the caller gave no mapping for it."""
    if styles and name in styles:
        return styles[name]
    s = i % len(PALETTE)
    return ModelStyle(PALETTE[s], _MARKERS[s], _DASHES[s], _HATCHES[s])


# -- plumbing ---------------------------------------------------------------------------
def _figure(width: float = _WIDTH, height: float = 2.6) -> Figure:
    fig = Figure(figsize=(width, height), layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _axes_style(ax) -> None:
    ax.tick_params(labelsize=_TEXT - 0.5)
    ax.xaxis.label.set_size(_TEXT)
    ax.yaxis.label.set_size(_TEXT)
    ax.title.set_size(_TEXT + 0.5)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.grid(True, color="#e4e4e4", linewidth=0.5)
    ax.set_axisbelow(True)


def _empty(ax, text: str, xlabel: str = "", ylabel: str = "") -> None:
    """A panel with nothing to plot: axes labelled, a sentence in the middle."""
    ax.text(0.5, 0.5, text, ha="center", va="center", fontsize=_TEXT, wrap=True,
            transform=ax.transAxes, color="#444444")
    ax.set_xticks([])
    ax.set_yticks([])
    ax.set_xlabel(xlabel or " ")
    ax.set_ylabel(ylabel or " ")


def _legend(ax, **kw) -> None:
    handles, labels = ax.get_legend_handles_labels()
    if handles:
        ax.legend(fontsize=_TEXT - 1, frameon=False, **kw)


def _plain_log_ticks(ax) -> None:
    """Log axes labelled 40, 80, 0.002 instead of 4×10¹ (easier to read at a review)."""
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

    fmt = FuncFormatter(lambda v, _: f"{v:g}")
    for axis in (ax.xaxis, ax.yaxis):
        axis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
        axis.set_major_formatter(fmt)
        axis.set_minor_formatter(NullFormatter())


def _finite(v) -> bool:
    try:
        return v is not None and math.isfinite(float(v))
    except (TypeError, ValueError):
        return False


def _short(name: str, width: int = 22) -> str:
    """Tick labels: user models drop their module path (``module:Class:opt=v`` →
    ``Class:opt=v``); long names are cut."""
    text = name.split(":", 1)[1] if ":" in name else name
    return text if len(text) <= width else text[: width - 1] + "…"


def figure_png(fig: Figure, dpi: int = 200) -> bytes:
    """Render ``fig`` to PNG bytes at ``dpi`` and release it."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    fig.clear()
    return buf.getvalue()


def _predictions_by_model(predictions) -> dict[str, dict[str, np.ndarray]]:
    out = {}
    if predictions is None or len(predictions) == 0:
        return out
    for name, grp in predictions.groupby("surrogate", sort=False):
        arr = {k: grp[k].to_numpy(dtype=float) for k in ("y", "mean", "std")}
        ok = np.isfinite(arr["y"]) & np.isfinite(arr["mean"]) & (arr["std"] > 0)
        out[str(name)] = {k: v[ok] for k, v in arr.items()}
    return out


# -- evidence -----------------------------------------------------------------------------
def reliability_figure(predictions, styles=None, order: Sequence[str] | None = None,
                       levels=CALIBRATION_LEVELS) -> Figure:
    r"""Reliability diagram: expected against observed frequency of :math:`F(y) \le p`.

    For each model and level :math:`p`, the observed frequency is the share of held-out
    trials whose predictive CDF value :math:`F_t(y_t)` is at most :math:`p`
    (Kuleshov, Fenner & Ermon 2018, Sec. 3.1); a calibrated model lies on the diagonal.

    Parameters
    ----------
    predictions : DataFrame
        Columns ``surrogate``, ``y``, ``mean``, ``std`` (held-out, any one direction).
    styles : dict, optional
        From :func:`model_styles`.
    order : sequence of str, optional
        Models to draw, in legend order (default: all, as they appear).
    """
    from scipy import stats

    fig = _figure(3.4, 3.1)
    ax = fig.add_subplot()
    _axes_style(ax)
    by = _predictions_by_model(predictions)
    names = [n for n in (order or list(by)) if n in by and len(by[n]["y"])]
    ax.plot([0, 1], [0, 1], color="#999999", linewidth=0.8, zorder=1,
            label="perfect calibration")
    levels = np.asarray(levels, dtype=float)
    for i, n in enumerate(names):
        p = by[n]
        pit = stats.norm.cdf((p["y"] - p["mean"]) / p["std"])
        observed = np.mean(pit[None, :] <= levels[:, None], axis=1)
        st = _style(styles, n, i)
        ax.plot(levels, observed, markersize=3, linewidth=1.1, label=_short(n), **st.line())
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1)
    ax.set_aspect("equal")
    ax.set_xlabel("expected frequency (nominal level p)")
    ax.set_ylabel("observed frequency of F(y) ≤ p")
    if not names:
        ax.text(0.5, 0.6, "no working model", ha="center", fontsize=_TEXT,
                transform=ax.transAxes)
    _legend(ax, loc="upper left")
    return fig


def coverage_figure(metrics: Mapping[str, Mapping], intervals: Mapping | None = None,
                    styles=None, order: Sequence[str] | None = None) -> Figure:
    """Held-out coverage of the central 50/90/95% intervals against nominal.

    Bars per model and level with 95% bootstrap intervals (from ``intervals``); the
    nominal level is a horizontal tick across each group.  Models whose coverage is
    NaN (failed) are left out.
    """
    fig = _figure(3.4, 3.1)
    ax = fig.add_subplot()
    _axes_style(ax)
    intervals = intervals or {}
    names = [n for n in (order or list(metrics))
             if any(_finite(metrics.get(n, {}).get(f"coverage_{int(lv * 100)}"))
                    for lv in COVERAGE_LEVELS)]
    xlabel, ylabel = "nominal level of the central interval", "observed coverage"
    if not names:
        _empty(ax, "no working model: nothing to show", xlabel, ylabel)
        return fig
    k = len(names)
    width = 0.8 / k
    for j, lv in enumerate(COVERAGE_LEVELS):
        key = f"coverage_{int(round(lv * 100))}"
        ax.hlines(lv, j - 0.45, j + 0.45, color="#222222", linewidth=1.0, zorder=3,
                  label="nominal" if j == 0 else None)
        for i, n in enumerate(names):
            v = metrics.get(n, {}).get(key)
            if not _finite(v):
                continue
            st = _style(styles, n, i)
            x = j - 0.4 + width * (i + 0.5)
            iv = (intervals.get(n) or {}).get(key)
            err = None
            if iv and all(_finite(e) for e in iv):
                err = [[max(0.0, v - iv[0])], [max(0.0, iv[1] - v)]]
            ax.bar(x, v, width * 0.92, color=st.color, hatch=st.hatch, edgecolor="#222222",
                   linewidth=0.4, yerr=err, error_kw={"elinewidth": 0.7, "capsize": 1.5},
                   label=_short(n) if j == 0 else None)
    ax.set_xticks(range(len(COVERAGE_LEVELS)), [f"{int(lv * 100)}%" for lv in COVERAGE_LEVELS])
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    ax.set_ylim(0, 1.25)
    ax.set_yticks([0, 0.25, 0.5, 0.75, 1.0])
    ax.legend(fontsize=_TEXT - 1, frameon=False, loc="upper left", ncol=2)
    return fig


def predicted_observed_figure(predictions, names: Sequence[str], sign: float = 1.0,
                              objective_label: str = "objective", styles=None,
                              level: float = 0.9) -> Figure:
    """Held-out predicted mean with its ``level`` interval against the observed value.

    One panel per model in ``names`` (at most three), values in the user's units and
    direction (``sign`` times the minimization-form values).
    """
    from scipy import stats

    by = _predictions_by_model(predictions)
    names = [n for n in names if n in by and len(by[n]["y"])][:3]
    fig = _figure(_WIDTH, 2.5)
    label_obs = f"observed {objective_label}"
    label_pred = f"predicted {objective_label}"
    if not names:
        ax = fig.add_subplot()
        _axes_style(ax)
        _empty(ax, "no working model: nothing to show", label_obs, label_pred)
        return fig
    z = stats.norm.ppf(0.5 + level / 2)
    axes = fig.subplots(1, len(names), squeeze=False)[0]
    lo_all = min(float(np.min(sign * by[n]["y"])) for n in names)
    hi_all = max(float(np.max(sign * by[n]["y"])) for n in names)
    pad = 0.05 * (hi_all - lo_all or 1.0)
    for i, (ax, n) in enumerate(zip(axes, names)):
        _axes_style(ax)
        p = by[n]
        st = _style(styles, n, i)
        yo, mu, half = sign * p["y"], sign * p["mean"], z * p["std"]
        inside = np.abs(p["y"] - p["mean"]) <= half
        ax.errorbar(yo, mu, yerr=half, fmt="none", ecolor=st.color, alpha=0.45,
                    elinewidth=0.6)
        ax.plot(yo[inside], mu[inside], linestyle="none", marker=st.marker, markersize=2.8,
                color=st.color, markeredgecolor="#222222", markeredgewidth=0.3,
                label=f"inside {int(level * 100)}% interval")
        ax.plot(yo[~inside], mu[~inside], linestyle="none", marker=st.marker,
                markersize=3.2, markerfacecolor="white", markeredgecolor="#000000",
                markeredgewidth=0.6, label="outside")
        ax.plot([lo_all - pad, hi_all + pad], [lo_all - pad, hi_all + pad], color="#888888",
                linewidth=0.7)
        ax.set_xlim(lo_all - pad, hi_all + pad)
        ax.set_title(_short(n, 30), fontsize=_TEXT + 0.5)
        ax.set_xlabel(label_obs)
        ax.set_ylabel(label_pred)
        if i == 0:
            _legend(ax, loc="upper left")
    return fig


def fold_spread_figure(fold_metrics, metric: str = "crps", styles=None,
                       order: Sequence[str] | None = None,
                       metric_label: str = "held-out CRPS per fold") -> Figure:
    """Spread over folds: one strip of per-fold values per model, with the median.

    A model whose fold values sit apart from another's on most folds differs from it
    reliably; overlapping strips mean the folds disagree.
    """
    fig = _figure(_WIDTH, 0.6 + 0.32 * max(2, len(order or []) or 2))
    ax = fig.add_subplot()
    _axes_style(ax)
    ok = (fold_metrics is not None and len(fold_metrics) and metric in fold_metrics)
    names = []
    if ok:
        present = list(dict.fromkeys(fold_metrics["surrogate"].astype(str)))
        names = [n for n in (order or present) if n in present]
    data = {}
    for n in names:
        v = fold_metrics.loc[fold_metrics["surrogate"].astype(str) == n, metric]
        v = v.to_numpy(dtype=float)
        v = v[np.isfinite(v)]
        if v.size:
            data[n] = v
    if not data:
        _empty(ax, "no per-fold scores", metric_label, "surrogate")
        return fig
    names = [n for n in names if n in data]
    rng = np.random.default_rng(0)  # jitter only; fixed so the figure is reproducible
    for i, n in enumerate(names):
        st = _style(styles, n, i)
        v = data[n]
        yj = i + rng.uniform(-0.15, 0.15, size=v.size)
        ax.plot(v, yj, linestyle="none", marker=st.marker, markersize=3.5, color=st.color,
                markeredgecolor="#222222", markeredgewidth=0.3)
        ax.vlines(np.median(v), i - 0.3, i + 0.3, color="#000000", linewidth=1.2)
    ax.set_yticks(range(len(names)), [_short(n) for n in names])
    ax.set_ylim(len(names) - 0.5, -0.5)
    ax.set_xlabel(metric_label + "  (bar: median over folds)")
    ax.set_ylabel("surrogate")
    return fig


# -- backtest -----------------------------------------------------------------------------
def _curve_arrays(curve):
    if not curve:
        return None
    med = np.asarray([np.nan if v is None else v for v in curve.get("median") or []], float)
    if med.size == 0 or not np.isfinite(med).any():
        return None
    q25 = np.asarray([np.nan if v is None else v for v in curve.get("q25") or med], float)
    q75 = np.asarray([np.nan if v is None else v for v in curve.get("q75") or med], float)
    return med, q25, q75


def _chosen_results(section: Mapping, backtest: Mapping) -> list[dict]:
    """Per surrogate, the result of its chosen setting (else its first working one)."""
    per = backtest.get("per_surrogate") or {}
    out = []
    for name in backtest.get("surrogates") or []:
        rows = [r for r in section.get("results") or [] if r.get("surrogate") == name
                and not r.get("error") and _curve_arrays(r.get("curve"))]
        if not rows:
            continue
        label = (per.get(name) or {}).get("label")
        best = next((r for r in rows if r.get("label") == label), rows[0])
        out.append(best)
    return out


def backtest_figure(backtest: Mapping | None, styles=None) -> Figure:
    """Best-so-far (replay) and simple-regret (simulated) curves against random search.

    Both experiments report the normalized regret of the best-so-far value,
    ``(best_t - f*) / (f_max - f*)``, 0 meaning the pool's best has been found; the line
    is the median over runs and the band the interquartile range.  Each surrogate is
    drawn with the acquisition setting the backtest chose for it; random order (the
    shuffled pool after the same start) is the dotted black reference with a grey band,
    in the simulated campaigns grid search (a full-factorial design sized to the budget)
    is dash-dotted black, and in the replay the campaign's actual order is dashed grey.
    """
    parts = [("replay", "replay on logged campaigns",
              "normalized best-so-far (0 = campaign best)"),
             ("simulated", "simulated campaigns",
              "normalized simple regret")]
    fig = _figure(_WIDTH, 2.7)
    axes = fig.subplots(1, 2, squeeze=False)[0]
    for ax, (key, title, ylabel) in zip(axes, parts):
        _axes_style(ax)
        sec = (backtest or {}).get(key)
        if key == "simulated" and (sec or {}).get("sampler"):
            title = f"simulated: {sec['sampler'].replace('+', ' + ')} stand-ins"
        ax.set_title(title, fontsize=_TEXT + 0.5)
        if not sec or sec.get("error") or not sec.get("results"):
            why = "did not run" if not sec else (sec.get("error") or "no results")
            _empty(ax, f"{key}: {str(why)[:60]}", "trials (start included)", ylabel)
            continue
        drawn = 0
        for i, r in enumerate(_chosen_results(sec, backtest)):
            med, q25, q75 = _curve_arrays(r["curve"])
            t = np.arange(1, med.size + 1)
            st = _style(styles, r["surrogate"], i)
            ax.fill_between(t, q25, q75, color=st.color, alpha=0.18, linewidth=0)
            ax.plot(t, med, color=st.color, linestyle=st.linestyle, linewidth=1.2,
                    marker=st.marker, markersize=2.5, markevery=max(1, med.size // 6),
                    label=f"{_short(r['surrogate'], 14)}, {r.get('label') or '?'}")
            drawn += 1
        for ref, kw in (("random", {"color": "#000000", "linestyle": ":"}),
                        ("grid", {"color": "#000000", "linestyle": "-."}),
                        ("actual", {"color": "#777777", "linestyle": "--"})):
            arr = _curve_arrays((sec.get(ref) or {}).get("curve"))
            if arr is None:
                continue
            med, q25, q75 = arr
            t = np.arange(1, med.size + 1)
            if ref == "random":
                ax.fill_between(t, q25, q75, color="#bbbbbb", alpha=0.35, linewidth=0)
            ax.plot(t, med, linewidth=1.1, label=sec[ref].get("label", ref), **kw)
            drawn += 1
        if not drawn:
            _empty(ax, "no curves", "trials (start included)", ylabel)
            continue
        ax.set_ylim(bottom=-0.02)
        ax.set_xlabel("trials (start included)")
        ax.set_ylabel(ylabel)
        _legend(ax, loc="upper right")
    return fig


# -- next campaign -------------------------------------------------------------------------
def relevance_figure(relevance: Mapping | None) -> Figure:
    """Sobol first-order and total indices per parameter with their 95% intervals.

    Parameters sorted by total index, largest on top; parameters flagged as freeze
    candidates are marked with an asterisk.  The height grows with the number of
    parameters so that twenty stay legible.
    """
    rows = list((relevance or {}).get("parameters") or [])
    n = len(rows)
    fig = _figure(_WIDTH, 0.9 + 0.2 * max(n, 3))
    ax = fig.add_subplot()
    _axes_style(ax)
    xlabel = "Sobol index of the surrogate mean (share of variance)"
    if not rows:
        _empty(ax, "parameter relevance did not run", xlabel, "parameter")
        return fig

    def val(r, k):
        v = r.get(k)
        return float(v) if _finite(v) else np.nan

    rows.sort(key=lambda r: -np.nan_to_num(val(r, "total"), nan=-1.0))
    y = np.arange(n)
    for k, (key, ikey, colour, hatch, off) in enumerate(
            (("first_order", "first_order_interval", PALETTE[2], "", -0.19),
             ("total", "total_interval", PALETTE[0], "//", 0.19))):
        v = np.array([val(r, key) for r in rows])
        iv = np.array([[val({"a": (r.get(ikey) or [None, None])[j]}, "a") for j in (0, 1)]
                       for r in rows])
        err = np.vstack([np.clip(v - iv[:, 0], 0, None), np.clip(iv[:, 1] - v, 0, None)])
        err = np.where(np.isfinite(err), err, 0.0)
        ax.barh(y + off, np.nan_to_num(v), height=0.36, color=colour, hatch=hatch,
                edgecolor="#222222", linewidth=0.3, xerr=err,
                error_kw={"elinewidth": 0.6, "capsize": 1.2},
                label="first-order S" if k == 0 else "total ST")
    thr = ((relevance or {}).get("thresholds") or {}).get("total_upper_below")
    if _finite(thr):
        ax.axvline(float(thr), color="#b5531b", linewidth=0.8, linestyle="--",
                   label=f"freeze threshold ({thr:g})")
    labels = [("* " if r.get("freeze") else "") + _short(str(r.get("name")), 26) for r in rows]
    ax.set_yticks(y, labels, fontsize=_TEXT - (1 if n > 12 else 0.5))
    ax.set_ylim(n - 0.5, -0.5)
    ax.set_xlim(left=min(0.0, ax.get_xlim()[0]))
    ax.set_xlabel(xlabel + ("; * freeze candidate" if any(r.get("freeze") for r in rows)
                            else ""))
    ax.set_ylabel("parameter")
    _legend(ax, loc="lower right")
    return fig


def learning_curve_figure(learning: Mapping | None, objective_label: str = "objective",
                          styles=None) -> Figure:
    """Held-out CRPS (mean ± one between-repeat sd) against training-set size."""
    fig = _figure(3.3, 2.5)
    ax = fig.add_subplot()
    _axes_style(ax)
    xlabel, ylabel = "training trials", f"held-out CRPS ({objective_label})"
    pts = [p for p in (learning or {}).get("points") or [] if _finite(p.get("crps_mean"))]
    if not pts:
        _empty(ax, "learning curve did not run", xlabel, ylabel)
        return fig
    name = (learning or {}).get("surrogate") or "model"
    st = _style(styles, name, 0)
    x = np.array([p["n_train"] for p in pts], float)
    m = np.array([p["crps_mean"] for p in pts], float)
    sd = np.array([p.get("crps_sd") if _finite(p.get("crps_sd")) else 0.0 for p in pts], float)
    ax.fill_between(x, m - sd, m + sd, color=st.color, alpha=0.2, linewidth=0)
    ax.plot(x, m, color=st.color, marker=st.marker, markersize=3, linestyle=st.linestyle,
            linewidth=1.1, label=_short(name))
    flat = (learning or {}).get("flat_from_n")
    if _finite(flat):
        ax.axvline(float(flat), color="#777777", linestyle="--", linewidth=0.8,
                   label=f"flat from {int(flat)}")
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    _legend(ax, loc="upper right")
    return fig


def cost_figure(cost: Mapping | None, styles=None) -> Figure:
    """Measured fit seconds against trials (log-log) and the projected next size."""
    fig = _figure(3.3, 2.5)
    ax = fig.add_subplot()
    _axes_style(ax)
    xlabel, ylabel = "trials in the training set", "fit + predict seconds"
    surs = (cost or {}).get("surrogates") or {}
    drawn = 0
    for i, (name, e) in enumerate(surs.items()):
        sizes, fit, pred = e.get("sizes"), e.get("fit_seconds"), e.get("predict_seconds")
        if e.get("error") or not sizes or not fit:
            continue
        s = np.asarray(sizes, float)
        t = np.asarray(fit, float) + np.asarray(pred or np.zeros(len(fit)), float)
        good = np.isfinite(t) & (t > 0) & (s > 0)
        if not good.any():
            continue
        st = _style(styles, name, i)
        ax.plot(s[good], t[good], color=st.color, marker=st.marker, markersize=3,
                linestyle=st.linestyle, linewidth=1.0, label=_short(name, 16))
        proj, at = e.get("projected_seconds_per_iteration"), e.get("projected_size")
        if _finite(proj) and _finite(at) and proj > 0:
            ax.plot([s[good][-1], at], [t[good][-1], proj], color=st.color, linewidth=0.8,
                    linestyle=":")
            ax.plot([at], [proj], marker=st.marker, markerfacecolor="white",
                    markeredgecolor=st.color, markersize=4, linestyle="none")
        drawn += 1
    if not drawn:
        _empty(ax, "cost projection did not run", xlabel, ylabel)
        return fig
    limit = (cost or {}).get("max_fit_seconds")
    if _finite(limit):
        ax.axhline(float(limit), color="#b5531b", linestyle="--", linewidth=0.8,
                   label="limit")
    ax.set_xscale("log")
    ax.set_yscale("log")
    _plain_log_ticks(ax)
    ax.set_xlabel(xlabel + " (open marker: projected)")
    ax.set_ylabel(ylabel)
    _legend(ax, loc="upper left")
    return fig


def proposals_figure(proposals, objective_label: str = "objective",
                     best_logged: float | None = None, direction: str = "minimize") -> Figure:
    """Predicted mean and 90% interval of each proposed setting, beside the logged best."""
    fig = _figure(3.3, 2.5)
    ax = fig.add_subplot()
    _axes_style(ax)
    xlabel, ylabel = "proposal (order in the batch)", f"predicted {objective_label}"
    cols = ("predicted_mean", "predicted_low_90", "predicted_high_90")
    if proposals is None or len(proposals) == 0 or not all(c in proposals for c in cols):
        _empty(ax, "no proposals", xlabel, ylabel)
        return fig
    m, lo, hi = (proposals[c].to_numpy(dtype=float) for c in cols)
    x = np.arange(1, len(m) + 1)
    err = np.vstack([np.nan_to_num(m - lo), np.nan_to_num(hi - m)])
    ax.errorbar(x, m, yerr=np.clip(err, 0, None), fmt="o", color=PALETTE[0], markersize=3.5,
                elinewidth=0.9, capsize=2, label="predicted mean, 90% interval")
    if _finite(best_logged):
        word = "lowest" if direction == "minimize" else "highest"
        ax.axhline(float(best_logged), color=PALETTE[5], linestyle="--", linewidth=0.9,
                   label=f"{word} logged")
    ax.set_xticks(x)
    ax.set_xlim(0.4, len(m) + 0.6)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    _legend(ax, loc="lower left", bbox_to_anchor=(0.0, 1.0), ncol=2)
    return fig


def failure_map_figure(fmap: Mapping | None, log_axes: Sequence[bool] = (),
                       points=None) -> Figure:
    """The failure-probability map of :mod:`advisor.feasibility`: the chosen classifier's
    partial dependence of P(failure) on one parameter (a line) or two (a shaded grid
    with a colour bar), with the logged trials on top (``points``: a frame of the
    map's parameters and a boolean ``failed`` column; failed trials as crosses).

    ``log_axes`` says which map parameters are on a log scale; categorical parameters
    (string values) are drawn at their level positions.
    """
    names = list((fmap or {}).get("parameters") or [])
    fig = _figure(_WIDTH, 2.7 if len(names) == 2 else 2.2)
    ax = fig.add_subplot()
    _axes_style(ax)
    if not names:
        _empty(ax, "no failure map: the chosen classifier is the constant rate or no "
               "parameter raises the held-out log loss when permuted", "", "P(failure)")
        return fig
    values = [list(v) for v in fmap["values"]]
    pf = np.asarray(fmap["failure_probability"], dtype=float)
    logs = list(log_axes) + [False] * (2 - len(log_axes))

    def coords(vals):
        cat = any(isinstance(v, str) for v in vals)
        return (np.arange(len(vals), dtype=float) if cat else np.asarray(vals, float)), cat

    def setup(scale_set, ticks_set, vals, cat, log):
        if cat:
            ticks_set(np.arange(len(vals)), [_short(str(v), 12) for v in vals])
        elif log:
            scale_set("log")

    def point_xy(name, vals, cat):
        col = points[name]
        if cat:
            lookup = {str(v): i for i, v in enumerate(vals)}
            return col.astype(str).map(lookup).to_numpy(dtype=float)
        return col.to_numpy(dtype=float)

    have_points = points is not None and len(points) and all(n in points for n in names)
    x, xcat = coords(values[0])
    if len(names) == 1:
        ax.plot(x, pf, color=PALETTE[5], linewidth=1.4,
                marker="o" if xcat else "", markersize=3, label="P(failure), partial dependence")
        if have_points:
            px = point_xy(names[0], values[0], xcat)
            failed = points["failed"].to_numpy(bool)
            ax.plot(px[~failed], np.zeros((~failed).sum()) - 0.03, "|", color=PALETTE[2],
                    markersize=5, label="logged: succeeded")
            ax.plot(px[failed], np.ones(failed.sum()) * 1.03, "x", color="#222222",
                    markersize=3.5, label="logged: failed")
        ax.set_ylim(-0.07, 1.07)
        ax.set_ylabel("P(failure)")
        ax.set_xlabel(names[0])
        setup(ax.set_xscale, ax.set_xticks, values[0], xcat, logs[0])
        _legend(ax, loc="best")
        return fig
    y, ycat = coords(values[1])
    mesh = ax.pcolormesh(x, y, pf.T, shading="nearest", cmap="cividis_r", vmin=0.0,
                         vmax=1.0)
    bar = fig.colorbar(mesh, ax=ax, pad=0.01)
    bar.set_label("P(failure), partial dependence", size=_TEXT - 0.5)
    bar.ax.tick_params(labelsize=_TEXT - 1)
    ax.grid(False)
    if have_points:
        px = point_xy(names[0], values[0], xcat)
        py = point_xy(names[1], values[1], ycat)
        failed = points["failed"].to_numpy(bool)
        ax.scatter(px[~failed], py[~failed], s=7, facecolors="white", edgecolors="#222222",
                   linewidths=0.4, label="logged: succeeded")
        ax.scatter(px[failed], py[failed], s=14, marker="x", color="#b5121b",
                   linewidths=0.9, label="logged: failed")
        _legend(ax, loc="upper left", bbox_to_anchor=(0.0, 1.13), ncol=2)
    ax.set_xlabel(names[0])
    ax.set_ylabel(names[1])
    setup(ax.set_xscale, ax.set_xticks, values[0], xcat, logs[0])
    setup(ax.set_yscale, ax.set_yticks, values[1], ycat, logs[1])
    if logs[0] or logs[1]:
        _plain_log_ticks(ax)
    return fig
