"""Trial-log loader: reading variants, typing, failed trials, replicates, space files,
and property-based checks that nothing but InputError escapes for bad input."""

from __future__ import annotations

import csv
import io
import sys

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy import stats

from advisor.errors import InputError, UsageError
from advisor.logs import MIN_TRIALS, TrialTable, load_trials
from advisor.space import Parameter, ParameterSpace


def _frame(n=16, seed=0):
    rng = np.random.default_rng(seed)
    return pd.DataFrame({
        "camp": np.repeat(["c1", "c2"], n // 2),
        "x": rng.uniform(-3, 3, n),
        "k": rng.integers(1, 4, n),
        "lvl": rng.choice(["A1", "B2", "C3"], n),
        "y": rng.normal(size=n),
    })


# -- reading variants -------------------------------------------------------------------------
@pytest.mark.parametrize("sep, decimal", [(",", "."), (";", ","), ("\t", ","), ("\t", "."),
                                          (";", ".")])
def test_values_match_pandas_writer(tmp_path, sep, decimal):
    # Reference: pandas' own writer with the given delimiter and decimal mark; repr
    # precision (float_format None) so values round-trip exactly.
    df = _frame()
    f = tmp_path / "log.csv"
    df.to_csv(f, sep=sep, decimal=decimal, index=False)
    t = load_trials(f, "y", campaign="camp")
    np.testing.assert_array_equal(t.used["x"].to_numpy(float), df["x"].to_numpy())
    np.testing.assert_array_equal(t.y_raw, df["y"].to_numpy())
    assert t.space["k"].kind == "integer" and t.space["lvl"].kind == "categorical"
    assert t.params == ["x", "k", "lvl"]


def test_excel_and_parquet_match_csv(tmp_path):
    df = _frame()
    df.to_parquet(tmp_path / "log.parquet", index=False)
    df.to_excel(tmp_path / "log.xlsx", index=False)
    df.to_csv(tmp_path / "log.csv", index=False)
    tables = [load_trials(tmp_path / f"log.{ext}", "y", campaign="camp")
              for ext in ("csv", "parquet", "xlsx")]
    # Parquet stores float64 exactly; openpyxl writes numbers with ~16 significant
    # digits, so an xlsx round trip may lose the last bit (rtol 1e-14).
    for t, rtol in zip(tables[1:], (0.0, 1e-14)):
        np.testing.assert_allclose(t.features(), tables[0].features(), rtol=rtol, atol=0)
        assert t.space.names == tables[0].space.names
        assert [p.kind for p in t.space] == [p.kind for p in tables[0].space]


@pytest.mark.parametrize("module, ext", [("pyarrow", "parquet"), ("openpyxl", "xlsx")])
def test_missing_engine_says_how_to_install(tmp_path, monkeypatch, module, ext):
    df = _frame()
    f = tmp_path / f"log.{ext}"
    (df.to_parquet if ext == "parquet" else df.to_excel)(f, index=False)
    # A None entry in sys.modules makes `import module` raise ImportError.
    monkeypatch.setitem(sys.modules, module, None)
    monkeypatch.setitem(sys.modules, "fastparquet", None)
    with pytest.raises(InputError, match=r"pip install 'advisor\[files\]'"):
        load_trials(f, "y")


def test_windows_1252_fallback_is_noted(tmp_path):
    df = _frame()
    df["lvl"] = df["lvl"].str.replace("A1", "Übung")
    f = tmp_path / "log.csv"
    f.write_bytes(df.to_csv(index=False).encode("cp1252"))
    t = load_trials(f, "y")
    assert "Übung" in t.space["lvl"].levels
    assert t.read_info["encoding"] == "cp1252"
    assert any("Windows-1252" in n for n in t.all_notes)


def test_input_is_never_written(tmp_path):
    f = tmp_path / "log.csv"
    _frame().to_csv(f, index=False)
    before, mtime = f.read_bytes(), f.stat().st_mtime_ns
    load_trials(f, "y")
    assert f.read_bytes() == before and f.stat().st_mtime_ns == mtime


# -- typing and columns -------------------------------------------------------------------------
def test_notes_column_is_ignored_unless_named(tmp_path):
    df = _frame()
    df["notes"] = [f"note {i}" for i in range(len(df))]
    f = tmp_path / "log.csv"
    df.to_csv(f, index=False)
    assert "notes" not in load_trials(f, "y").params
    t = load_trials(f, "y", params=["x", "notes"])
    assert t.space["notes"].kind == "categorical"
    assert any("not in the parameter list" in n for n in t.all_notes)


def test_mostly_text_column_with_some_numbers_is_categorical_with_a_note(tmp_path):
    df = _frame()
    df["grade"] = (["low", "mid", "high", "3"] * 4)[: len(df)]
    f = tmp_path / "log.csv"
    df.to_csv(f, index=False)
    t = load_trials(f, "y")
    assert t.space["grade"].kind == "categorical"
    assert any("numeric-looking" in n for n in t.all_notes)


def test_space_file_can_make_a_numeric_column_categorical(tmp_path):
    f = tmp_path / "log.csv"
    _frame().to_csv(f, index=False)
    (tmp_path / "s.toml").write_text("[parameters.k]\nkind = 'categorical'\n")
    t = load_trials(f, "y", campaign="camp", space=tmp_path / "s.toml")
    assert t.space["k"].kind == "categorical" and t.space["k"].levels == ("1", "2", "3")
    assert t.features().shape[1] == 1 + 3 + 3  # x, k one-hot, lvl one-hot


def test_others_ignore_uses_only_listed_parameters(tmp_path):
    f = tmp_path / "log.csv"
    _frame().to_csv(f, index=False)
    (tmp_path / "s.toml").write_text("[space]\nothers = 'ignore'\n[parameters.x]\n")
    assert load_trials(f, "y", space=tmp_path / "s.toml").params == ["x"]


def test_missing_parameter_value_fails_the_row_and_names_the_column(tmp_path):
    df = _frame()
    df.loc[3, "x"] = np.nan
    df.loc[5, "lvl"] = None
    f = tmp_path / "log.csv"
    df.to_csv(f, index=False)
    t = load_trials(f, "y", campaign="camp")
    assert [(r["line"], r["reason"]) for r in t.failures] == [
        (5, "parameter 'x' is missing"), (7, "parameter 'lvl' is missing")]
    assert t.n_used == len(df) - 2


def test_failures_and_campaign_summary(tmp_path):
    df = _frame()
    df["state"] = "ok"
    df.loc[[0, 1, 9], "state"] = ["crashed", "OK", "timeout"]
    df.loc[2, "y"] = np.nan
    f = tmp_path / "log.csv"
    df.to_csv(f, index=False)
    t = load_trials(f, "y", campaign="camp", status="state", success=["ok"])
    assert [r["line"] for r in t.failures] == [2, 4, 11]
    assert t.failure_reasons() == {"status": 2, "objective": 1}
    summary = {s["campaign"]: s for s in t.campaign_summary()}
    assert summary["c1"]["failed"] == 2 and summary["c2"]["failed"] == 1
    assert summary["c1"]["failure_share"] == pytest.approx(2 / 8, abs=0)  # exact ratio


def test_direction_from_space_file_and_conflicts(tmp_path):
    f = tmp_path / "log.csv"
    _frame().to_csv(f, index=False)
    s = tmp_path / "s.toml"
    s.write_text("[objective]\nname = 'y'\ndirection = 'maximize'\n")
    assert load_trials(f, space=s).direction == "maximize"
    assert load_trials(f, "y", "maximize", space=s).sign == -1.0
    with pytest.raises(UsageError, match="minimize.*maximize"):
        load_trials(f, "y", "minimize", space=s)
    with pytest.raises(UsageError, match="names 'y'"):
        load_trials(f, "x", space=s)


def test_given_parameter_space_is_used_and_checked(tmp_path):
    f = tmp_path / "log.csv"
    _frame().to_csv(f, index=False)
    space = ParameterSpace((Parameter("x", "continuous", -5, 5),))
    assert load_trials(f, "y", space=space).params == ["x"]
    narrow = ParameterSpace((Parameter("x", "continuous", 0, 1),))
    with pytest.raises(InputError, match="outside the declared space"):
        load_trials(f, "y", space=narrow)


@pytest.mark.parametrize("kwargs, match", [
    (dict(objective="y", campaign="y"), "both objective and campaign"),
    (dict(objective="y", params=["y", "x"]), "both a parameter and"),
    (dict(objective="y", direction="up"), "direction"),
    (dict(objective="y", params=[]), "empty"),
    (dict(objective="y", space=3), "ParameterSpace"),
])
def test_contradictory_arguments(tmp_path, kwargs, match):
    f = tmp_path / "log.csv"
    _frame().to_csv(f, index=False)
    with pytest.raises(UsageError, match=match):
        load_trials(f, **kwargs)


# -- replicates ---------------------------------------------------------------------------------
def _replicate_table(y, settings_, camp=None) -> TrialTable:
    n = len(y)
    frame = pd.DataFrame({"s": np.asarray(settings_, float), "y": np.asarray(y, float),
                          "_line": np.arange(2, n + 2)})
    if camp is not None:
        frame["c"] = camp
    space = ParameterSpace((Parameter("s", "continuous", 0.0, 100.0),))
    return TrialTable(frame=frame, ok=np.ones(n, bool), space=space, objective="y",
                      campaign=None if camp is None else "c")


def test_pooled_noise_equals_residual_variance_of_group_means_model():
    # Reference: least squares on group indicator columns (numpy.linalg.lstsq); its
    # residual variance RSS / (n - G) is the pooled within-group variance.
    rng = np.random.default_rng(5)
    s = np.array([1, 1, 1, 2, 2, 3, 3, 3, 3, 4, 5, 6], float)
    y = rng.normal(size=s.size)
    noise = _replicate_table(y, s).replicate_noise()
    rep = np.isin(s, [1, 2, 3])
    D = (s[rep, None] == np.array([1, 2, 3])[None, :]).astype(float)
    _, rss, _, _ = np.linalg.lstsq(D, y[rep], rcond=None)
    assert noise["groups"] == 3 and noise["dof"] == 9 - 3
    np.testing.assert_allclose(noise["noise_std"] ** 2, rss[0] / 6, rtol=1e-12)  # float


def test_noise_interval_matches_scipy_chi2_interval():
    rng = np.random.default_rng(2)
    s = np.repeat(np.arange(5.0), 3)
    noise = _replicate_table(rng.normal(size=15), s).replicate_noise()
    lo_q, hi_q = stats.chi2.interval(0.95, noise["dof"])
    var = noise["noise_std"] ** 2
    expect = (np.sqrt(noise["dof"] * var / hi_q), np.sqrt(noise["dof"] * var / lo_q))
    np.testing.assert_allclose(noise["noise_std_interval"], expect, rtol=1e-12)  # float


def test_noise_interval_coverage_by_simulation():
    # The chi-square interval is exact for normal noise: about 95% of intervals cover
    # the true sigma.  400 runs: binomial sd 1.1%, so [0.90, 0.99] fails only by chance.
    rng = np.random.default_rng(11)
    s = np.repeat(np.arange(4.0), 3)
    hits = 0
    for _ in range(400):
        lo, hi = _replicate_table(rng.normal(0, 2.0, s.size) + s, s).replicate_noise()[
            "noise_std_interval"]
        hits += lo <= 2.0 <= hi
    assert 0.90 <= hits / 400 <= 0.99


def test_no_replicates_gives_none_and_within_campaign_splits_groups():
    assert _replicate_table([1, 2, 3], [1, 2, 3]).replicate_noise() is None
    t = _replicate_table([1.0, 2.0, 3.0, 5.0], [1, 1, 1, 1], camp=["a", "a", "b", "b"])
    assert t.replicate_groups() == [[2, 3, 4, 5]]
    assert t.replicate_groups(within_campaign=True) == [[2, 3], [4, 5]]
    assert t.replicate_noise(within_campaign=True)["noise_std"] == pytest.approx(
        np.sqrt((0.5 + 2.0) / 2), rel=1e-12)  # hand computation: SS 0.5 and 2.0, dof 2


# -- properties -----------------------------------------------------------------------------
def _check_valid(t: TrialTable):
    assert isinstance(t, TrialTable)
    assert t.n_used >= MIN_TRIALS and t.n_used + len(t.failures) == t.rows_read
    assert np.isfinite(t.y).all() and np.ptp(t.y) > 0
    X = t.features()
    assert X.shape == (t.n_used, len(t.space.feature_names())) and np.isfinite(X).all()
    assert set(t.params) <= set(t.frame.columns)


_CELL = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(-5, 5).map(str),
    st.sampled_from(["", "a", "B2", "nan", "NA", "-", "1,5", '"3"', "yes", "diverged",
                     " ", "1e400", "x\ny"]),
    st.text(max_size=6),
)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(text=st.lists(st.lists(_CELL, min_size=1, max_size=5), min_size=0, max_size=14),
       sep=st.sampled_from([",", ";", "\t", "|"]), eol=st.sampled_from(["\n", "\r\n", "\r"]),
       bom=st.booleans())
def test_random_csv_text_loads_or_is_refused(tmp_path_factory, text, sep, eol, bom):
    rows = [["a", "b", "y"]] + text
    body = eol.join(sep.join(r) for r in rows)
    f = tmp_path_factory.mktemp("h") / "log.csv"
    f.write_bytes((b"\xef\xbb\xbf" if bom else b"") + body.encode("utf-8", "surrogatepass"))
    try:
        t = load_trials(f, "y")
    except InputError as exc:
        assert "\n" not in exc.one_line() and str(f) in str(exc)
        return
    _check_valid(t)


@settings(max_examples=150, deadline=None)
@given(data=st.binary(max_size=300))
def test_random_bytes_load_or_are_refused(tmp_path_factory, data):
    f = tmp_path_factory.mktemp("b") / "log.csv"
    f.write_bytes(b"p,q,y\n" + data)
    try:
        t = load_trials(f, "y")
    except InputError:
        return
    _check_valid(t)


_NUM = st.floats(-1e6, 1e6, allow_nan=False, allow_infinity=False, width=64)


@settings(max_examples=150, deadline=None)
@given(n=st.integers(4, 24), seed=st.integers(0, 2**16),
       fmt=st.sampled_from([(",", "."), (";", ","), ("\t", ","), ("\t", "."), (";", ".")]),
       missing_share=st.sampled_from([0.0, 0.1, 0.4]), eol=st.sampled_from(["\n", "\r\n"]))
def test_random_tables_round_trip(tmp_path_factory, n, seed, fmt, missing_share, eol):
    rng = np.random.default_rng(seed)
    sep, decimal = fmt
    x = rng.normal(0, 10, n) * 10.0 ** rng.integers(-3, 4)
    k = rng.integers(0, 3, n).astype(float)
    lvl = rng.choice(["red", "grün", "A1"], n)
    y = rng.normal(size=n)
    y[rng.random(n) < missing_share] = np.nan
    x_text = [repr(float(v)).replace(".", decimal) for v in x]
    x_text = [c if rng.random() > missing_share / 2 else "" for c in x_text]
    y_text = ["" if np.isnan(v) else repr(float(v)).replace(".", decimal) for v in y]
    buf = io.StringIO()
    w = csv.writer(buf, delimiter=sep, lineterminator=eol)
    w.writerow(["x", "k", "lvl", "y"])
    w.writerows(zip(x_text, [str(int(v)) for v in k], lvl, y_text))
    f = tmp_path_factory.mktemp("t") / "log.csv"
    f.write_bytes(buf.getvalue().encode("utf-8"))
    ok = ~np.isnan(y) & np.array([c != "" for c in x_text])
    try:
        t = load_trials(f, "y")
    except InputError as exc:
        # Refusals here are only the documented ones.
        assert ok.sum() < MIN_TRIALS or np.ptp(y[ok]) == 0 or "no parameter" in str(exc) \
            or "no finite numeric" in str(exc), str(exc)
        return
    _check_valid(t)
    np.testing.assert_array_equal(t.ok, ok)
    np.testing.assert_array_equal(t.y_raw, y[ok])          # exact: repr round trip
    if "x" in t.params:
        np.testing.assert_array_equal(t.used["x"].to_numpy(float), x[ok])
    if "k" in t.params:
        assert t.space["k"].kind == "integer"
    if "lvl" in t.params:
        assert t.space["lvl"].kind == "categorical"


def _valid_log_text() -> str:
    df = _frame(n=14, seed=4)
    df["notes"] = [f"run {i}" for i in range(len(df))]
    return df.to_csv(index=False)


_VALID = _valid_log_text()


@settings(max_examples=150, deadline=None)
@given(edits=st.lists(st.tuples(st.sampled_from(["insert", "delete", "dup_line", "drop_line"]),
                                st.integers(0, 10_000),
                                st.sampled_from([",", ";", "\t", '"', "\n", "\r", "x", "1",
                                                 ".", "-", "\x00", "é", " ", "#", "%"])),
                      min_size=1, max_size=6))
def test_mutated_valid_log_loads_or_is_refused(tmp_path_factory, edits):
    # Small random edits of a valid log (typos, stray quotes, lost or doubled lines):
    # the loader must either load a valid table or refuse with InputError.
    text = _VALID
    for op, pos, ch in edits:
        lines = text.split("\n")
        if op == "insert":
            i = pos % (len(text) + 1)
            text = text[:i] + ch + text[i:]
        elif op == "delete" and text:
            i = pos % len(text)
            text = text[:i] + text[i + 1:]
        elif op == "dup_line":
            i = pos % len(lines)
            text = "\n".join(lines[:i + 1] + lines[i:])
        elif op == "drop_line":
            i = pos % len(lines)
            text = "\n".join(lines[:i] + lines[i + 1:])
    f = tmp_path_factory.mktemp("m") / "log.csv"
    f.write_bytes(text.encode("utf-8"))
    try:
        t = load_trials(f, "y", campaign="camp")
    except InputError as exc:
        assert str(f) in str(exc)
        return
    _check_valid(t)
