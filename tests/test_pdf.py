"""The design-review PDF, built from real quick assessments on small logs."""

import re

import numpy as np
import pandas as pd
import pytest
from pypdf import PdfReader

import advisor
from advisor.report.pdf import SECTIONS, write_pdf

# The section headings the issue asks for, in order (the spec, written out here rather
# than read from the module under test).
HEADINGS = ["Recommendation", "Data", "Evidence per surrogate", "Acquisition backtest",
            "Next campaign", "Method and reproducibility", "Where trials fail"]
#: Present only when the log has failed trials (issue 17); last, so the others keep
#: their numbers.
CONDITIONAL = {"Where trials fail"}
MODELS = ["user_models:BayesRidge", "user_models:FlakyOnSmallFits"]


def _slice_log(sample_log, tmp_path, rows=96):
    frame = pd.read_csv(sample_log).groupby("lot").head(rows // 4)
    path = tmp_path / "slice.csv"
    frame.to_csv(path, index=False)
    return path


@pytest.fixture(scope="module")
def assessment(tmp_path_factory):
    from pathlib import Path

    log = Path(__file__).resolve().parent.parent / "sample_logs" / "moulding_warpage.csv"
    path = _slice_log(log, tmp_path_factory.mktemp("log"))
    t = advisor.load_trials(path, objective="warpage_mm", campaign="lot", order="run")
    return advisor.assess(t, seed=7, quick=True, surrogates=MODELS, backtest=False,
                          plan=False)


def _text(path):
    reader = PdfReader(str(path))
    return reader, [page.extract_text() or "" for page in reader.pages]


def _image_count(reader) -> int:
    n = 0
    for page in reader.pages:
        xobjects = page["/Resources"].get("/XObject") or {}
        n += sum(1 for o in xobjects.values() if o.get_object()["/Subtype"] == "/Image")
    return n


def _flat(text: str) -> str:
    return re.sub(r"\s+", " ", text)


def test_pdf_sections_page_one_and_provenance(assessment, tmp_path):
    dest = write_pdf(assessment, tmp_path / "report.pdf")
    assert dest.exists() and not list(tmp_path.glob(".*.tmp"))  # renamed into place
    reader, pages = _text(dest)
    assert len(pages) >= 3
    full = _flat(" ".join(pages))
    positions = [full.find(f"{i + 1} {h}") for i, h in enumerate(HEADINGS)
                 if h not in CONDITIONAL]
    assert "Where trials fail" not in full  # no trial of this slice failed
    assert all(p >= 0 for p in positions), positions
    assert positions == sorted(positions)
    assert [s.split(maxsplit=1)[1] for s in SECTIONS] == HEADINGS
    first = _flat(pages[0])
    rec = assessment.recommendation["surrogate"]
    assert rec == "user_models:BayesRidge"  # the flaky model fails a fold
    assert rec in first
    sha = assessment.trials.sha256
    assert sha[:16] in first
    assert sha in full.replace(" ", "")  # the full hash in the appendix
    assert "seed 7" in first or "Seed 7" in first
    assert "guarantees safety" in first  # the caution box on page one
    # Evidence figures without backtest or plan: reliability, coverage, predicted vs
    # observed, spread over folds.
    assert _image_count(reader) >= 4
    assert "did not run" in full  # the backtest and plan sections say so
    assert "FlakyOnSmallFits" in full and "deliberate failure" in full
    # every page numbered, with the running header naming the log
    for k, page in enumerate(pages, start=1):
        assert f"page {k} of {len(pages)}" in page
        assert "slice.csv" in page


def test_pdf_with_backtest_and_plan(assessment, tmp_path):
    from advisor import planning
    from advisor.acquisition import parse_settings
    from advisor.backtest import plan_for, run_backtest

    a = assessment
    t = a.trials
    name = "user_models:BayesRidge"
    a.backtest = run_backtest(t, [name], parse_settings("ei:xi=0.01;random"), seed=0,
                              quick=True, plan=plan_for(True, simulate=False))
    a.planning = {
        "relevance": planning.parameter_relevance(t, name, seed=0, quick=True, n_base=64),
        "learning_curve": planning.learning_curve(t, name, seed=0, quick=True),
        "cost": planning.cost_projection(t, [name], seed=0, quick=True, budget=10),
    }
    a.proposals = planning.propose_batch(t, name, "ei:xi=0.01", 3, seed=0, quick=True,
                                         n_pool=200)
    try:
        dest = write_pdf(a, tmp_path / "full.pdf")
    finally:
        a.backtest = a.planning = a.proposals = None
    reader, pages = _text(dest)
    full = _flat(" ".join(pages))
    # + backtest curves, relevance, proposals, learning curve, cost = 9 figures
    assert _image_count(reader) >= 9
    assert "Trials needed to reach the best 5%" in full
    assert "Proposed first batch" in full
    assert "Before running these" in full  # the caution beside the proposals
    assert "Likely to fail" not in full  # no failure model, no warning


def test_pdf_twenty_parameters_and_failures(tmp_path):
    rng = np.random.default_rng(0)
    n, d = 60, 20
    X = rng.uniform(0, 1, size=(n, d))
    cols = [f"zone_{i:02d}_setpoint_temperature" for i in range(d)]
    frame = pd.DataFrame(X, columns=cols)
    frame.insert(0, "run", np.tile(np.arange(1, 21), 3))
    frame.insert(0, "campaign", np.repeat(["A", "B", "C"], 20))
    frame["status"] = np.where(rng.uniform(size=n) < 0.15, "crashed", "ok")
    frame.loc[40:, "status"] = "crashed"
    frame.loc[[41, 45, 50], "status"] = "ok"
    frame["y"] = X[:, 0] ** 2 + X[:, 1] + 0.01 * rng.normal(size=n)
    path = tmp_path / "wide.csv"
    frame.to_csv(path, index=False)
    t = advisor.load_trials(path, objective="y", campaign="campaign", order="run",
                            status="status")
    a = advisor.assess(t, seed=0, quick=True, surrogates=["user_models:BayesRidge"],
                       validation="kfold", backtest=False, plan=False)
    _, pages = _text(write_pdf(a, tmp_path / "wide.pdf"))
    full = _flat(" ".join(pages))
    for c in cols:
        assert c in full  # the parameter table carries all twenty, none cut
    assert "high failure share" in full  # campaign C lost most of its trials
    for f in t.failures:
        assert f"{f['line']} C" in full or f"{f['line']} A" in full or f"{f['line']} B" in full


@pytest.mark.slow
def test_pdf_shows_between_campaign_sd_and_the_new_gp_facts(tmp_path):
    from pathlib import Path

    log = Path(__file__).resolve().parent.parent / "sample_logs" / "moulding_warpage.csv"
    t = advisor.load_trials(log, objective="warpage_mm", campaign="lot", order="run")
    a = advisor.assess(t, seed=0, quick=True, surrogates=["campaign_gp", "warped_gp",
                                                          "baseline"],
                       backtest=False, plan=False)
    full = _flat(" ".join(_text(write_pdf(a, tmp_path / "r.pdf"))[1]))
    sd = a.model_info["campaign_gp"]["between_campaign_sd"]
    # the data section states the fitted spread; the fitted-model table its facts
    assert "between-campaign standard deviation is" in full
    assert f"{sd:.4g}"[:4] in full
    assert "transform: " + a.model_info["warped_gp"]["transform"] in full


def test_backtest_section_names_the_backtested_models_and_why():
    # issue 12, item 8: only the models that can matter are backtested, and the report
    # says which and why (the rule is the assessment's own text)
    from advisor.assessment import _CANDIDATE_RULE
    from advisor.report.sections.backtest import _intro_text
    text = _intro_text({"surrogates": ["campaign_gp", "gp"],
                        "candidates_rule": _CANDIDATE_RULE, "simulated": {}}, {})
    assert "Models backtested: campaign_gp, gp (the calibration leader" in text
    assert "the other models cannot change the recommendation" in text
    assert "Models backtested" not in _intro_text({"simulated": {}}, {})



def test_a_model_that_did_not_converge_says_so_in_json_pdf_and_terminal(assessment,
                                                                      tmp_path):
    # issue 14: a sampler that does not converge must report that it did not.  The
    # per-fold facts of a model whose chain converged on 2 of its 4 folds (the largest
    # among them) are merged as the assessment merges them; the count and a warning
    # must reach all three outputs.
    import io

    from rich.console import Console

    from advisor.assessment import _merge_info
    from advisor.report.export import assessment_to_dict
    from advisor.report.terminal import print_assessment
    a, name = assessment, "user_models:BayesRidge"
    folds = [{"info": {"n_train": n, "converged": n >= 60}} for n in (24, 48, 72, 84)]
    saved = a.model_info.get(name)
    a.model_info[name] = _merge_info(folds)
    try:
        d = assessment_to_dict(a)
        full = _flat(" ".join(_text(write_pdf(a, tmp_path / "r.pdf"))[1]))
        buf = io.StringIO()
        print_assessment(a, d, [], Console(file=buf, width=300))
    finally:
        a.model_info[name] = saved
    info = next(r for r in d["ranking"] if r["surrogate"] == name)["info"]
    assert info["converged_folds"] == "2 of 4" and info["converged"] is False
    assert "not converged on 2 of 4 folds" in info["warning"]
    assert "converged folds: 2 of 4" in full and "not converged on 2 of 4 folds" in full
    assert "not converged" in buf.getvalue() and "2 of 4" in buf.getvalue()
