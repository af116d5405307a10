"""Tutorial: from a trial log to a recommendation and a figure, in Python.

Run it from the repository's root (about a minute on one core):

    python docs/tutorial.py [OUTPUT_FOLDER]        # default: tutorial-output

or paste the sections into Jupyter cells, where the assessment displays itself as an
HTML summary.  The log is ``sample_logs/forecast_tuning.csv``, an *invented* scenario
(its data sheet, ``sample_logs/forecast_tuning.md``, says how it was made): a team tuned
a forecasting network over four search rounds, minimizing validation MAPE.
``make test`` runs this file (``tests/test_tutorial.py``).
"""

import sys
from pathlib import Path

import pandas as pd

import advisor

ROOT = Path(__file__).resolve().parent.parent


def main(out: Path) -> dict:
    out.mkdir(parents=True, exist_ok=True)

    # -- 1. Load ---------------------------------------------------------------------
    # The log is one row per trial.  Here it comes as the DataFrame an analyst already
    # holds; a path works the same way.  We name the objective, the column saying which
    # search round (campaign) a trial belongs to, and the order within it; the space
    # file adds units and fixed bounds (log scale for the learning rate, ...).
    frame = pd.read_csv(ROOT / "sample_logs" / "forecast_tuning.csv")
    trials = advisor.load_trials(frame, objective="val_mape", campaign="search_round",
                                 order="trial",
                                 space=ROOT / "sample_logs" / "forecast_tuning.space.toml")
    print(f"{trials.n_used} trials used, {trials.n_failed} failed, "
          f"{trials.n_campaigns} search rounds; parameters: {', '.join(trials.params)}")
    for note in trials.all_notes[:3]:  # what the loader decided on our behalf
        print("  note:", note)

    # -- 2. Assess -------------------------------------------------------------------
    # Cross-validate candidate surrogates on held-out trials and rank them.  Built-ins
    # go by name; any scikit-learn regressor whose predict takes return_std=True joins
    # as "module:Class", with constructor options after colons.  To stay quick we take
    # three candidates, the quick budget, one process, and skip the acquisition
    # backtest and the next-campaign plan (leave them on for real use).
    a = advisor.assess(trials, seed=0, quick=True, jobs=1, backtest=False, plan=False,
                       surrogates=["baseline", "gp",
                                   "sklearn.linear_model:BayesianRidge:max_iter=300"])

    # -- 3. The recommendation -------------------------------------------------------
    rec = a.recommendation
    acq = rec["acquisition"]
    print(f"Recommendation: {rec['surrogate']} with {acq['name']} {acq['params']} "
          f"(confidence {rec['confidence']})")
    print(rec["statement"])
    # The ranking as a table (pandas), and the same content as in the JSON report:
    print(a.ranking.to_string(index=False, max_cols=8))

    # -- 4. A figure -----------------------------------------------------------------
    # Every figure of the PDF report is a matplotlib Figure to adapt or save; the
    # names are in a.figure_names().  The calibration (reliability) diagram:
    fig = a.figure("calibration")
    fig.savefig(out / "calibration.png", dpi=120)

    # In Jupyter, ending a cell with `a` shows this summary; here we save it.
    (out / "summary.html").write_text(a._repr_html_(), encoding="utf-8")
    print(f"wrote {out / 'calibration.png'} and {out / 'summary.html'}")
    return {"assessment": a, "figure": fig}


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else Path("tutorial-output"))
