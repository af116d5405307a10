"""Write the bundled sample logs under sample_logs/ (invented scenarios, fixed seeds).

Every log here is an invented scenario of our own: the response functions, lots and
numbers are made up to exercise the tool, and describe no real process or plant.

    python scripts/make_sample_logs.py            # all sample logs
    python scripts/make_sample_logs.py --big      # also the 500-trial benchmark log
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pandas as pd

OUT = Path(__file__).resolve().parent.parent / "sample_logs"


def _campaign_points(rng, lows, highs, optimum, n, n_random=8):
    """Settings a campaign would have tried: a few random ones, then a drift toward the
    optimum with shrinking spread (a stand-in for an optimizer converging)."""
    lows, highs = np.asarray(lows, float), np.asarray(highs, float)
    span = highs - lows
    pts = []
    for i in range(n):
        if i < n_random:
            pts.append(rng.uniform(lows, highs))
        else:
            frac = (i - n_random) / max(1, n - n_random)
            spread = 0.35 * (1 - frac) + 0.05
            p = optimum + rng.normal(0, spread, len(lows)) * span
            pts.append(np.clip(p, lows, highs))
    return np.array(pts)


def moulding_warpage(seed: int = 11, lots: int = 4, per_lot: int = 40) -> pd.DataFrame:
    """Invented: a team tunes an injection-moulding process to minimize part warpage
    (mm) across several material lots.  Six continuous settings; warpage depends mainly
    on mould temperature, packing pressure and cooling time, with a lot-specific shift."""
    rng = np.random.default_rng(seed)
    names = ["melt_temp_c", "mould_temp_c", "pack_pressure_bar", "cooling_time_s",
             "injection_speed_mm_s", "hold_time_s"]
    lows = [200, 40, 300, 8, 20, 2]
    highs = [260, 90, 900, 30, 120, 12]
    rows = []
    for lot in range(lots):
        shift = rng.normal(0, 0.04)
        opt = np.array([235, 62 + 4 * lot, 650, 19, 70, 7], float)
        X = _campaign_points(rng, lows, highs, opt, per_lot)
        for run, x in enumerate(X, start=1):
            melt, mould, pack, cool, speed, hold = x
            w = (0.35 + shift
                 + 0.00025 * (mould - (62 + 4 * lot)) ** 2
                 + 3.0e-7 * (pack - 650) ** 2
                 + 0.0016 * (cool - 19) ** 2
                 + 0.00003 * (melt - 235) ** 2
                 + 0.004 * np.sin(speed / 15.0)
                 + 0.0015 * (hold - 7) ** 2)
            w += rng.normal(0, 0.012)
            rows.append({"lot": f"L{lot + 1:02d}", "run": run,
                         "melt_temp_c": round(melt, 1), "mould_temp_c": round(mould, 1),
                         "pack_pressure_bar": round(pack, 0), "cooling_time_s": round(cool, 2),
                         "injection_speed_mm_s": round(speed, 1), "hold_time_s": round(hold, 2),
                         "warpage_mm": round(max(w, 0.01), 4)})
    return pd.DataFrame(rows)


def _toward(rng, center, lows, highs, i, n, n_random):
    """One setting of a campaign in *unit* coordinates: random for the first
    ``n_random`` trials, then normal around ``center`` with a shrinking spread."""
    lows, highs = np.asarray(lows, float), np.asarray(highs, float)
    if i < n_random:
        return rng.uniform(lows, highs)
    frac = (i - n_random) / max(1, n - n_random)
    spread = 0.3 * (1 - frac) + 0.06
    return np.clip(center + rng.normal(0, spread, len(lows)) * (highs - lows), lows, highs)


FERMENT_MEDIA = ("corn_steep", "defined", "molasses", "yeast_extract")
_MEDIA_EFFECT = {"corn_steep": 3.0, "defined": -2.0, "molasses": 0.0, "yeast_extract": 5.0}


def fermentation_true_yield(media, temp, feed, stir, inoc, series_shift=0.0):
    """Invented response (g/L): see sample_logs/fermentation_yield.md."""
    o2_limit = np.maximum(0.0, feed - 4.0 - stir / 40.0)  # fast feed needs fast stirring
    return (36.0 + _MEDIA_EFFECT[media] + series_shift
            - 0.30 * (temp - 31.5) ** 2
            - 0.06 * (feed - 12.0) ** 2
            - 0.08 * o2_limit ** 2
            + 0.4 * np.log(inoc))


def fermentation_yield(seed: int = 21, series: int = 3, per_series: int = 46) -> pd.DataFrame:
    """Invented: a lab screens fermentation recipes to MAXIMIZE product yield (g/L).

    Four media, temperature, feed rate, stirrer speed and inoculum size; three batch
    series of 46 runs.  Some runs fail: contamination (likelier when warm) and aborted
    runs, both with no yield recorded.  Each series repeats its centre point three times.
    """
    rng = np.random.default_rng(seed)
    lows = np.array([26.0, 2.0, 150.0, 1.0])
    highs = np.array([38.0, 20.0, 600.0, 10.0])
    rows = []
    for s in range(series):
        shift = [0.0, -1.2, 0.8][s % 3]
        centre = np.array([30.0 + s, 9.0 + 1.5 * s, 360.0, 4.0])
        best_media = "yeast_extract" if s else "corn_steep"
        repeat_at = {1, per_series // 2, per_series - 1}
        for run in range(1, per_series + 1):
            if run - 1 in repeat_at:
                x, media = centre.copy(), "molasses"
            else:
                x = _toward(rng, np.array([31.5, 12.0, 480.0, 6.0]), lows, highs,
                            run - 1, per_series, 10)
                media = (FERMENT_MEDIA[rng.integers(len(FERMENT_MEDIA))] if run <= 10
                         or rng.random() < 0.3 else best_media)
            temp, feed, stir, inoc = (round(float(x[0]), 1), round(float(x[1]), 2),
                                      int(round(float(x[2]) / 10.0) * 10), round(float(x[3]), 1))
            y = fermentation_true_yield(media, temp, feed, stir, inoc, shift)
            y = max(0.5, y + rng.normal(0, 0.8))
            p_contam = 0.03 + (0.15 if temp > 35.0 else 0.0)
            u = rng.random()
            outcome = ("contaminated" if u < p_contam else
                       "aborted" if u < p_contam + 0.03 else "ok")
            rows.append({"batch_series": f"BS{s + 1}", "run": run, "media": media,
                         "temperature_c": temp, "feed_rate_ml_h": feed, "stir_rpm": stir,
                         "inoculum_pct": inoc, "outcome": outcome,
                         "yield_g_per_l": round(float(y), 2) if outcome == "ok" else None})
    return pd.DataFrame(rows)


FORECAST_OPTIMIZERS = ("adam", "adamw", "sgd")
_OPT_EFFECT = {"adam": 0.0, "adamw": -0.3, "sgd": 1.0}
_OPT_LR_SHIFT = {"adam": 0.0, "adamw": 0.0, "sgd": 0.8}  # sgd wants ~6x larger steps


def forecast_true_mape(lr, wd, layers, units, dropout, opt, round_shift=0.0):
    """Invented response (validation MAPE, %): see sample_logs/forecast_tuning.md."""
    return (6.0 + _OPT_EFFECT[opt] + round_shift
            + 1.1 * (np.log10(lr) + 2.7 - _OPT_LR_SHIFT[opt]) ** 2
            + 0.15 * (np.log10(wd) + 4.0) ** 2
            + 0.35 * (layers - 3) ** 2
            + 2.5 * np.exp(-units / 60.0)
            + 6.0 * (dropout - 0.15) ** 2)


def forecast_tuning(seed: int = 31, rounds: int = 4, per_round: int = 40) -> pd.DataFrame:
    """Invented: a team tunes a forecasting network, MINIMIZING validation MAPE (%).

    Four search rounds (one per data split) of 40 trials each.  Runs with too large a
    learning rate diverge (objective written as empty, ``nan`` or ``diverged``); a
    free-text ``notes`` column differs on every row.
    """
    rng = np.random.default_rng(seed)
    # unit coordinates: log10 lr, log10 wd, layers, log2 units, dropout
    lows = np.array([-5.0, -6.0, 1.0, 4.0, 0.0])
    highs = np.array([-1.0, -2.0, 6.0, 9.0, 0.5])
    centre = np.array([-2.7, -4.0, 3.0, 7.0, 0.15])
    hosts = ("node-a", "node-b", "node-c")
    rows = []
    for s in range(rounds):
        shift = float(rng.normal(0, 0.3))
        last_ok = None
        for trial in range(1, per_round + 1):
            if trial in (20, 35) and last_ok is not None:
                x, opt = last_ok  # a re-run of an earlier setting (new seed)
            else:
                x = _toward(rng, centre, lows, highs, trial - 1, per_round, 12)
                opt = FORECAST_OPTIMIZERS[rng.integers(3)] if trial <= 12 or rng.random() < 0.3 \
                    else "adamw"
            lr = float(f"{10 ** x[0]:.3g}")
            wd = float(f"{10 ** x[1]:.3g}")
            layers = int(round(float(x[2])))
            units = int(round(2 ** float(x[3])))
            dropout = round(float(x[4]), 3)
            y = forecast_true_mape(lr, wd, layers, units, dropout, opt, shift)
            y += rng.normal(0, 0.2)
            diverge = np.log10(lr) - _OPT_LR_SHIFT[opt] > -1.6 and rng.random() < 0.7
            host = hosts[rng.integers(3)]
            if diverge or rng.random() < 0.03:
                val = ["", "nan", "diverged"][rng.integers(3)]
                note = (f"round {s + 1} trial {trial}: loss blew up at epoch "
                        f"{int(rng.integers(1, 30))} on {host}" if diverge else
                        f"round {s + 1} trial {trial}: preempted on {host}")
            else:
                val = f"{y:.3f}"
                last_ok = (x, opt)
                note = f"round {s + 1} trial {trial}: {int(rng.integers(20, 90))} epochs on {host}"
            rows.append({"search_round": f"R{s + 1}", "trial": trial, "learning_rate": lr,
                         "weight_decay": wd, "n_layers": layers, "hidden_units": units,
                         "dropout": dropout, "optimizer": opt, "val_mape": val,
                         "notes": note})
    return pd.DataFrame(rows)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--big", action="store_true", help="also write the 500-trial benchmark log")
    args = ap.parse_args(argv)
    OUT.mkdir(exist_ok=True)
    moulding_warpage().to_csv(OUT / "moulding_warpage.csv", index=False)
    fermentation_yield().to_csv(OUT / "fermentation_yield.csv", index=False)
    forecast_tuning().to_csv(OUT / "forecast_tuning.csv", index=False)
    if args.big:
        moulding_warpage(seed=12, lots=4, per_lot=125).to_csv(
            OUT / "moulding_warpage_500.csv", index=False)


if __name__ == "__main__":
    main()
