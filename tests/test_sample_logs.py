"""The bundled sample logs: generator is reproducible, and each log's inferred space,
failures and replicates match what its data sheet (sample_logs/<name>.md) states.

The expected kinds are parsed from the data sheet's column table, so the sheet and the
loader cannot drift apart silently.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from conftest import load_script

from advisor.logs import load_trials

ROOT = Path(__file__).resolve().parent.parent
SAMPLES = ROOT / "sample_logs"

# The Makefile's demo flags for each log.
RUNS = {
    "moulding_warpage": dict(objective="warpage_mm", campaign="lot", order="run"),
    "fermentation_yield": dict(objective="yield_g_per_l", direction="maximize",
                               campaign="batch_series", order="run", status="outcome",
                               success=["ok"]),
    "forecast_tuning": dict(objective="val_mape", campaign="search_round", order="trial"),
}


def _generator():
    return load_script("scripts/make_sample_logs.py")


def _sheet_table(stem: str) -> dict[str, dict]:
    """Rows of the data sheet's column table: column -> {role, kind, scale, ...}."""
    text = (SAMPLES / f"{stem}.md").read_text(encoding="utf-8")
    assert "invented scenario" in text.lower().split("\n\n")[1]
    rows = {}
    header = None
    for line in text.splitlines():
        if not line.startswith("|") or set(line) <= set("|-"):
            continue
        cells = [c.strip() for c in line.strip("|").split("|")]
        if header is None:
            header = cells
            continue
        rows[cells[0]] = dict(zip(header[1:], cells[1:]))
    return rows


@pytest.mark.parametrize("stem", sorted(RUNS))
def test_inferred_space_matches_data_sheet(stem):
    table = load_trials(SAMPLES / f"{stem}.csv", **RUNS[stem])
    sheet = _sheet_table(stem)
    expected = {c: r for c, r in sheet.items() if r["role"] == "parameter"}
    assert table.params == list(expected)
    for name, row in expected.items():
        p = table.space[name]
        assert p.kind == row["kind"], name
        if p.is_numeric:
            assert p.log == (row["scale"] == "log"), name
        else:
            levels = [s.strip() for s in row["range / levels"].split(",")]
            assert list(p.levels) == sorted(levels), name
    ignored = [c for c, r in sheet.items() if r["role"] == "ignored"]
    for c in ignored:
        assert any(f"'{c}' ignored" in n for n in table.all_notes)
    objective = [c for c, r in sheet.items() if r["role"].startswith("objective")]
    assert objective == [RUNS[stem]["objective"]]
    assert table.direction in sheet[objective[0]]["role"]


@pytest.mark.parametrize("stem, n_rows, n_failed, groups", [
    # counts stated in each data sheet's Failures / Replicates section
    ("moulding_warpage", 160, 0, 0),
    ("fermentation_yield", 138, 8, 3),
    ("forecast_tuning", 160, 16, 7),
])
def test_failures_and_replicates_match_data_sheet(stem, n_rows, n_failed, groups):
    table = load_trials(SAMPLES / f"{stem}.csv", **RUNS[stem])
    assert table.rows_read == n_rows and len(table.failures) == n_failed
    noise = table.replicate_noise()
    assert (0 if noise is None else noise["groups"]) == groups
    assert len(table.frame) <= 200


def test_replicate_noise_covers_the_stated_noise():
    # Data sheets: fermentation noise sd 0.8 g/L, forecast noise sd 0.2 points.
    for stem, sd in (("fermentation_yield", 0.8), ("forecast_tuning", 0.2)):
        lo, hi = load_trials(SAMPLES / f"{stem}.csv", **RUNS[stem]).replicate_noise()[
            "noise_std_interval"]
        assert lo <= sd <= hi, stem


def test_true_responses_named_in_sheets():
    gen = _generator()
    # The sheet says: best medium yeast_extract; the optimum of temperature is 31.5 C.
    y = [gen.fermentation_true_yield(m, 31.5, 12.0, 600, 5.0) for m in gen.FERMENT_MEDIA]
    assert gen.FERMENT_MEDIA[int(np.argmax(y))] == "yeast_extract"
    t = np.linspace(26, 38, 121)
    assert t[np.argmax(gen.fermentation_true_yield("molasses", t, 12.0, 600, 5.0))] == \
        pytest.approx(31.5, abs=0.05)
    # forecast: with adam, the best learning rate is 10^-2.7
    lr = np.logspace(-5, -1, 401)
    best = lr[np.argmin(gen.forecast_true_mape(lr, 1e-4, 3, 256, 0.15, "adam"))]
    assert np.log10(best) == pytest.approx(-2.7, abs=0.011)


@pytest.mark.parametrize("stem", sorted(RUNS))
def test_generator_reproduces_committed_logs(stem):
    # Fixed seeds: regenerating must give the committed file, value for value.
    frame = getattr(_generator(), stem)()
    committed = pd.read_csv(SAMPLES / f"{stem}.csv", keep_default_na=False, dtype=str)
    regenerated = pd.read_csv(pd.io.common.StringIO(frame.to_csv(index=False)),
                              keep_default_na=False, dtype=str)
    pd.testing.assert_frame_equal(committed, regenerated)


def test_space_file_example_loads():
    table = load_trials(SAMPLES / "forecast_tuning.csv", campaign="search_round", order="trial",
                        space=SAMPLES / "forecast_tuning.space.toml")
    assert table.objective == "val_mape" and table.units == "%"
    assert table.space["hidden_units"].log and table.space["hidden_units"].source == "given"
    assert table.space["dropout"].source == "inferred"
    assert re.search(r"notes", " ".join(table.all_notes))
