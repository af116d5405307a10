"""Parameter space: inference rules, encodings, sampling, space files."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from advisor.errors import InputError
from advisor.space import LOG_SPAN_DECADES, Parameter, ParameterSpace, read_space_file


def _space():
    return ParameterSpace((
        Parameter("lr", "continuous", 1e-5, 1e-1, log=True),
        Parameter("layers", "integer", 1, 6),
        Parameter("drop", "continuous", 0.0, 0.5),
        Parameter("opt", "categorical", levels=("adam", "sgd", "adamw")),
    ))


# -- inference ---------------------------------------------------------------------------
def test_integer_column_with_few_levels_stays_integer():
    p = ParameterSpace.infer(pd.DataFrame({"n": [1.0, 2.0, 3.0, 1.0, 2.0]}), ["n"])["n"]
    assert (p.kind, p.low, p.high, p.log) == ("integer", 1.0, 3.0, False)


@pytest.mark.parametrize("values", [["A1", "B2", "A1"], ["yes", "no", "yes"],
                                    ["1a", "2", "3"], ["True", "False", "True"]])
def test_text_levels_are_categorical(values):
    p = ParameterSpace.infer(pd.DataFrame({"c": values}), ["c"])["c"]
    assert p.kind == "categorical"
    assert p.levels == tuple(sorted(set(values)))


def test_bool_dtype_is_categorical():
    p = ParameterSpace.infer(pd.DataFrame({"b": [True, False, True]}), ["b"])["b"]
    assert p.kind == "categorical" and set(p.levels) == {"True", "False"}


@pytest.mark.parametrize("decades, expect_log", [(2.2, True), (1.8, False)])
def test_log_scale_threshold(decades, expect_log):
    # Common practice: positive and spanning more than ~two decades -> log scale.
    x = [1.0, 10.0 ** decades]
    p = ParameterSpace.infer(pd.DataFrame({"x": x}), ["x"])["x"]
    assert p.log is expect_log
    assert LOG_SPAN_DECADES == 2.0


def test_no_log_when_not_positive():
    p = ParameterSpace.infer(pd.DataFrame({"x": [0.0, 1e-6, 1e3]}), ["x"])["x"]
    assert not p.log


def test_given_spec_fills_the_rest_from_data():
    frame = pd.DataFrame({"x": [0.5, 2.0, 3.0]})
    p = ParameterSpace.infer(frame, ["x"], given={"x": {"high": 10.0, "unit": "mm"}})["x"]
    assert (p.kind, p.low, p.high, p.unit, p.source) == ("continuous", 0.5, 10.0, "mm", "given")
    assert "low" in p.note and "scale" in p.note


def test_given_numeric_kind_on_text_column_is_refused():
    with pytest.raises(ValueError, match="declared integer"):
        ParameterSpace.infer(pd.DataFrame({"x": ["a", "b"]}), ["x"],
                             given={"x": {"kind": "integer"}})


# -- Parameter checks ----------------------------------------------------------------------
@pytest.mark.parametrize("kwargs", [
    dict(kind="continuous", low=2.0, high=1.0),
    dict(kind="continuous", low=0.0, high=1.0, log=True),
    dict(kind="integer", low=0.2, high=0.8),
    dict(kind="categorical", levels=()),
    dict(kind="categorical", levels=("a", "a")),
    dict(kind="ordinal", low=0, high=1),
    dict(kind="continuous", low=0.0, high=math.inf),
])
def test_inconsistent_parameter_is_refused(kwargs):
    with pytest.raises(ValueError):
        Parameter("p", **kwargs)


# -- encoding --------------------------------------------------------------------------------
def test_encode_onehot_and_log_against_numpy():
    frame = pd.DataFrame({"lr": [1e-3, 1e-2], "layers": [2, 5], "drop": [0.1, 0.3],
                          "opt": ["sgd", "adam"]})
    X = _space().encode(frame, "onehot")
    np.testing.assert_allclose(X[:, 0], np.log10([1e-3, 1e-2]), rtol=0, atol=1e-12)  # exact log10
    np.testing.assert_array_equal(X[:, 3:], [[0, 1, 0], [1, 0, 0]])
    assert _space().feature_names("onehot") == ["log10(lr)", "layers", "drop", "opt=adam",
                                                "opt=sgd", "opt=adamw"]


def test_encode_ordinal_codes_and_unknown_level():
    frame = pd.DataFrame({"lr": [1e-3], "layers": [2], "drop": [0.1], "opt": ["rmsprop"]})
    assert _space().encode(frame, "ordinal")[0, 3] == -1
    assert _space().encode(frame, "onehot")[0, 3:].sum() == 0


@pytest.mark.parametrize("encoding", ["onehot", "ordinal"])
def test_decode_inverts_encode(encoding):
    space = _space()
    frame = space.sample(50, np.random.default_rng(3))
    back = space.decode(space.encode(frame, encoding), encoding)
    np.testing.assert_allclose(back["lr"], frame["lr"], rtol=1e-12)  # float round trip
    assert (back["layers"].to_numpy() == frame["layers"].to_numpy()).all()
    assert list(back["opt"]) == list(frame["opt"])


def test_encoded_bounds_contain_encoded_samples():
    space = _space()
    for enc in ("onehot", "ordinal"):
        X = space.encode(space.sample(200, np.random.default_rng(0)), enc)
        b = space.encoded_bounds(enc)
        assert b.shape == (X.shape[1], 2)
        assert np.all(X >= b[:, 0] - 1e-12) and np.all(X <= b[:, 1] + 1e-12)


def test_log_sampling_is_log_uniform():
    # Kolmogorov-Smirnov against the uniform law on log10 bounds (scipy reference);
    # with 2000 draws a correct sampler fails at level 0.001 only by chance.
    lr = _space().sample(2000, np.random.default_rng(7))["lr"]
    u = (np.log10(lr) + 5) / 4
    assert stats.kstest(u, "uniform").pvalue > 1e-3


def test_sample_is_reproducible():
    a = _space().sample(5, np.random.default_rng(1))
    b = _space().sample(5, 1)
    pd.testing.assert_frame_equal(a, b)


def test_to_dict_round_trip():
    space = _space()
    again = ParameterSpace.from_dict(space.to_dict())
    assert [p.describe() for p in again] == [p.describe() for p in space]


# -- space files -------------------------------------------------------------------------
def test_read_example_space_file():
    from pathlib import Path
    sf = read_space_file(Path(__file__).parent.parent / "sample_logs" /
                         "forecast_tuning.space.toml")
    assert (sf.objective, sf.direction, sf.unit, sf.others) == ("val_mape", "minimize", "%",
                                                                 "infer")
    assert sf.parameters["optimizer"]["levels"] == ["adam", "adamw", "sgd"]
    assert sf.parameters["learning_rate"]["log"] is True


@pytest.mark.parametrize("text, match", [
    ("[objective]\ndirection = 'up'\n", "direction"),
    ("[objectiv]\n", "did you mean 'objective'"),
    ("[parameters.x]\nkind = 'float'\n", "kind"),
    ("[parameters.x]\nlow = 3\nhigh = 1\n", "above high"),
    ("[parameters.x]\nlow = 0\nlog = true\n", "low > 0"),
    ("[parameters.x]\nkind = 'continuous'\nlevels = ['a']\n", "levels given"),
    ("[parameters.x]\nlevels = ['a', 'a']\n", "repeat"),
    ("[parameters.x]\nlevels = ['a']\nlow = 1\n", "not low/high"),
    ("[parameters.x]\nlow = 'one'\n", "finite number"),
    ("[space]\nothers = 'drop'\n", "others"),
    ("[parameters]\nx = 3\n", "must be a table"),
    ("not toml at all = = \n", "(?i)not valid toml"),
])
def test_bad_space_file_is_refused(tmp_path, text, match):
    f = tmp_path / "s.toml"
    f.write_text(text, encoding="utf-8")
    with pytest.raises(InputError, match=match) as info:
        read_space_file(f)
    assert str(f) in str(info.value)
