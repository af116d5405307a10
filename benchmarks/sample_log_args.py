"""How the three sample logs (invented data) are loaded, as `make demo` loads them:
``advisor.load_trials(ROOT / "sample_logs" / f"{name}.csv", **SAMPLE_LOGS[name])``.
Shared by the benchmarks that rerun the backtest on them."""

from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent

SAMPLE_LOGS = {
    "moulding_warpage": dict(objective="warpage_mm", campaign="lot", order="run"),
    "fermentation_yield": dict(objective="yield_g_per_l", direction="maximize",
                               campaign="batch_series", order="run", status="outcome",
                               success=["ok"]),
    "forecast_tuning": dict(objective="val_mape", campaign="search_round", order="trial",
                            space=str(ROOT / "sample_logs" / "forecast_tuning.space.toml")),
}
