"""The CLI end to end on the bundled sample log (real command, isolated output folder)."""

import json

import pytest

from advisor.cli import main

ARGS = ["--objective", "warpage_mm", "--campaign", "lot", "--order", "run", "--quick",
        "--jobs", "1"]


def _strip_timing(obj):
    """Drop timing fields, which are the only ones allowed to differ between runs."""
    if isinstance(obj, dict):
        return {k: _strip_timing(v) for k, v in obj.items()
                if "seconds" not in k and k not in ("created", "timing", "command")}
    if isinstance(obj, list):
        return [_strip_timing(v) for v in obj]
    return obj


@pytest.fixture(scope="module")
def two_runs(tmp_path_factory, request):
    from pathlib import Path
    log = Path(__file__).resolve().parent.parent / "sample_logs" / "moulding_warpage.csv"
    outs = []
    for i in range(2):
        out = tmp_path_factory.mktemp(f"run{i}")
        code = main(["assess", str(log), *ARGS, "--out", str(out), "--seed", "3",
                     "--surrogates", "baseline", "--surrogate", "user_models:BayesRidge",
                     "--quiet"])
        outs.append((code, out))
    return outs


def test_exit_zero_and_files_written(two_runs):
    code, out = two_runs[0]
    assert code == 0
    for name in ("moulding_warpage.json", "moulding_warpage.csv", "moulding_warpage.pdf"):
        assert (out / name).is_file()
    assert not list(out.glob("*.tmp")) and not list(out.glob(".*"))
    assert (out / "moulding_warpage.pdf").read_bytes()[:5] == b"%PDF-"


def test_json_contract(two_runs):
    d = json.loads((two_runs[0][1] / "moulding_warpage.json").read_text())
    for key in ("ranking", "recommendation", "input", "seed", "versions"):
        assert key in d
    r0 = d["ranking"][0]
    assert {"surrogate", "rank", "metrics"} <= set(r0)
    for k in ("nll", "crps", "coverage_50", "coverage_90", "coverage_95",
              "calibration_error", "sharpness", "spearman", "kendall", "fit_seconds",
              "predict_seconds"):
        assert k in r0["metrics"]
    rec = d["recommendation"]
    assert {"surrogate", "acquisition", "reasons"} <= set(rec)
    assert rec["acquisition"]["name"] in ("ei", "pi", "ucb", "thompson")
    assert set(d["input"]) >= {"path", "sha256", "rows_read", "rows_used", "parameters",
                               "objective", "direction"}
    assert len(d["input"]["sha256"]) == 64
    assert [r["rank"] for r in d["ranking"]] == list(range(1, len(d["ranking"]) + 1))
    # the user's model appears in the ranking beside the built-in one
    assert {r["surrogate"] for r in d["ranking"]} == {"baseline", "user_models:BayesRidge"}


def test_same_seed_same_json(two_runs):
    a, b = (json.loads((o / "moulding_warpage.json").read_text()) for _, o in two_runs)
    assert _strip_timing(a) == _strip_timing(b)


def test_bad_user_model_is_clean_error(tmp_path, sample_log, capsys):
    for spec in ("no_such_module_xyz:Model", "user_models:Missing", "user_models:NoPredict",
                 "notaspec"):
        code = main(["assess", str(sample_log), *ARGS, "--out", str(tmp_path),
                     "--surrogate", spec])
        err = capsys.readouterr().err.strip().splitlines()
        assert code == 2, spec
        assert len(err) == 1 and err[0].startswith("error:"), err
    assert list(tmp_path.iterdir()) == []


def test_model_failing_on_some_folds_is_ranked_last(tmp_path, sample_log):
    code = main(["assess", str(sample_log), *ARGS, "--out", str(tmp_path), "--quiet",
                 "--surrogates", "baseline", "--surrogate", "user_models:FlakyOnSmallFits",
                 "--surrogate", "user_models:BayesRidge", "--surrogate", "user_models:ReturnsNaN"])
    assert code == 0
    d = json.loads((tmp_path / "moulding_warpage.json").read_text())
    names = [r["surrogate"] for r in d["ranking"]]
    assert set(names[-2:]) == {"user_models:FlakyOnSmallFits", "user_models:ReturnsNaN"}
    flaky = next(r for r in d["ranking"] if r["surrogate"] == "user_models:FlakyOnSmallFits")
    assert flaky["status"] == "failed"
    assert "deliberate failure" in flaky["failures"][0]["error"]
    assert any("ranked last" in s for s in flaky["reasons"])
    # the working models are still ranked and scored
    ok = [r for r in d["ranking"] if r["status"] == "ok"]
    assert len(ok) == 2 and all(r["metrics"]["crps"] is not None for r in ok)


def test_usage_errors_are_one_line(tmp_path, sample_log, capsys):
    cases = [
        ["assess", str(sample_log)],                                # missing --objective
        ["assess", str(sample_log), "--objective", "warpage_mm", "--seed", "x"],
        ["assess", str(sample_log), "--objective", "warpage_mm", "--budget", "0"],
        ["assess", str(sample_log), "--objective", "warpage_mm", "--backtest-runs", "1"],
        ["assess", str(sample_log), "--objective", "nope", "--out", str(tmp_path)],
        ["frobnicate"],
        [],
        ["--seed", "3"],
    ]
    for argv in cases:
        code = main(argv)
        err = capsys.readouterr().err.strip().splitlines()
        assert code == 2, argv
        assert len(err) == 1 and err[0].startswith("error:"), (argv, err)


def test_help_exits_zero(capsys):
    assert main(["--help"]) == 0
    assert "assess" in capsys.readouterr().out
    assert main(["assess", "--help"]) == 0
    assert "--objective" in capsys.readouterr().out
