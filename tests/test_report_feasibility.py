"""Section 7 of the PDF (where trials fail) and the warning about proposals likely to
fail, built from real quick assessments of a log with a known failure region."""

import io
import re

import numpy as np
import pandas as pd
import pytest
from pypdf import PdfReader
from rich.console import Console

import advisor
from advisor import feasibility as F
from advisor.report.pdf import write_pdf
from test_feasibility import EDGE, _log_with_region

MODELS = ["user_models:BayesRidge"]


def _pages(path):
    reader = PdfReader(str(path))
    return reader, [re.sub(r"\s+", " ", p.extract_text() or "") for p in reader.pages]


def _images(reader) -> int:
    n = 0
    for page in reader.pages:
        xobjects = page["/Resources"].get("/XObject") or {}
        n += sum(1 for o in xobjects.values() if o.get_object()["/Subtype"] == "/Image")
    return n


@pytest.fixture(scope="module")
def region(tmp_path_factory):
    t = _log_with_region(tmp_path_factory.mktemp("region"), seed=0, n_per=40)
    return advisor.assess(t, seed=0, quick=True, surrogates=MODELS, backtest=False,
                          plan=False)


def test_section_renders_classifiers_drivers_and_map(region, tmp_path):
    a = region
    f = a.feasibility
    assert f["skipped"] is None and f["chosen"] != "constant"
    reader, pages = _pages(write_pdf(a, tmp_path / "with.pdf"))
    full = " ".join(pages)
    start = full.find("7 Where trials fail")
    assert start > full.find("6 Method and reproducibility") > 0  # the last section
    sec = full[start:]
    for name in ("constant rate", "logistic regression", "random forest", "GP classifier"):
        assert name in sec
    for col in ("log loss", "Brier", "reliability", "beats constant"):
        assert col in sec
    assert f"{f['failed']} of {f['trials']} trials failed" in sec
    # the parameter that drives failure in the fixture (x1) heads the importance table
    drivers = sec[sec.find("Which parameters drive failure"):]
    assert drivers.find("x1") < min(drivers.find(x) for x in ("x2", "x3", "x4"))
    assert "Where failures cluster" in sec
    # the map is one more image than the same report without the failure model
    saved = a.feasibility
    try:
        a.feasibility = None
        reader0, pages0 = _pages(write_pdf(a, tmp_path / "without.pdf"))
    finally:
        a.feasibility = saved
    assert "Where trials fail" not in " ".join(pages0)
    assert _images(reader) == _images(reader0) + 1


def test_skipped_model_says_why(tmp_path):
    rng = np.random.default_rng(0)
    df = pd.DataFrame({"a": rng.random(40), "b": rng.random(40)})
    df["y"] = df["a"] + df["b"]
    df.loc[:2, "y"] = np.nan  # three failed trials: below the rule's five
    df.to_csv(tmp_path / "few.csv", index=False)
    t = advisor.load_trials(tmp_path / "few.csv", objective="y")
    a = advisor.assess(t, seed=0, quick=True, surrogates=MODELS, backtest=False,
                       plan=False)
    _, pages = _pages(write_pdf(a, tmp_path / "few.pdf"))
    sec = " ".join(pages)[" ".join(pages).find("7 Where trials fail"):]
    assert "skipped because 3 failed and 37 successful" in sec
    assert f"at least {F.MIN_EACH}" in sec


def test_warning_beside_the_caution_for_proposals_below_threshold(region, tmp_path):
    from advisor.planning import propose_batch
    from advisor.report.export import assessment_to_dict
    from advisor.report.terminal import print_assessment

    a = region
    model = a.feasibility["_model"]
    # Unweighted proposals head for the objective's minimum inside the failure region
    # (x1 = 0.9 > EDGE), where the failure model gives them a low P(success).
    props = propose_batch(a.trials, MODELS[0], "ei:xi=0.01", 4, seed=0, quick=True,
                          n_pool=300)
    props["p_success"] = model.success_probability(props[a.trials.params])
    below = F.proposals_below(props["p_success"])
    assert below, "the fixture should put at least one proposal in the region"
    assert all(props["x1"].iloc[i - 1] > EDGE - 0.1 for i in below)
    a.proposals = props
    a.planning = {"proposals": {"rows": props.to_dict(orient="records")}}
    a.feasibility["proposals_below_threshold"] = below
    try:
        _, pages = _pages(write_pdf(a, tmp_path / "warn.pdf"))
        buf = io.StringIO()
        print_assessment(a, assessment_to_dict(a), [], Console(file=buf, width=300))
    finally:
        a.proposals = a.planning = None
        a.feasibility.pop("proposals_below_threshold")
    page = next(p for p in pages if "Before running these" in p)  # the caution's page
    assert "Likely to fail" in page
    assert f"{len(below)} proposal(s) have a predicted probability of success below 80%" \
        in page
    for i in below:
        assert f"#{i}: {100 * props['p_success'].iloc[i - 1]:.0f}%" in page
    assert "not a safety assessment" in page
    assert "P(success)" in page  # the proposals table carries the row
    out = re.sub(r"\s+", " ", buf.getvalue())
    assert f"{len(below)} proposal(s) likely to fail" in out
    assert out.find("likely to fail") < out.find("guarantees safety")  # before the caution
