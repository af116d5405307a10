"""Property-based fuzzing of every text a user hands in besides the log: the
``--acquisitions`` syntax, the TOML space file, plugin specifications and numeric
flags.  Whatever the text, the only exception allowed out is the tool's own
``InputError``/``UsageError`` (exit 2, one line); a bounded number of examples keeps
each fuzzer to a few seconds in ``make test``."""

from __future__ import annotations

import string

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from advisor.acquisition import parse_settings
from advisor.cli import _validate_numbers, build_parser
from advisor.errors import InputError
from advisor.space import read_space_file
from advisor.surrogates import make_surrogate

FUZZ = settings(max_examples=150, deadline=None,
                suppress_health_check=[HealthCheck.function_scoped_fixture])

# Texts close to the grammar (its own words and punctuation) find more than noise does.
_ACQ_ALPHABET = "eipucbltsthompsonrandomxibeta=:;,.-+0123456789 eE\t"
acq_text = st.one_of(st.text(alphabet=_ACQ_ALPHABET, max_size=40), st.text(max_size=30))


@FUZZ
@given(acq_text)
def test_acquisition_syntax_only_raises_our_error(text):
    try:
        out = parse_settings(text)
    except InputError as exc:
        assert "\n" not in exc.one_line()
        return
    assert len(out) >= 1
    for s in out:
        assert s.name in ("ei", "pi", "ucb", "thompson", "random")
        for v in s.params.values():
            assert np.isfinite(v)


_TOML_PIECES = st.sampled_from([
    "[parameters.a]\n", "[parameters.b]\n", "[parameters]\n", "kind = \"continuous\"\n",
    "kind = \"integer\"\n", "kind = \"categorical\"\n", "kind = \"log\"\n",
    "kind = 3\n", "low = 0\n", "low = -1\n", "high = 1\n", "high = 0\n",
    "high = \"x\"\n", "levels = [\"u\", \"v\"]\n", "levels = []\n", "levels = [1, 1]\n",
    "log = true\n", "direction = \"maximize\"\n", "direction = \"up\"\n",
    "units = \"mm\"\n", "objective = \"y\"\n", "low = nan\n", "high = inf\n", "= =\n",
    "[[parameters]]\n", "name = \"a\"\n"])


@FUZZ
@given(st.one_of(st.lists(_TOML_PIECES, max_size=12).map("".join),
                 st.text(max_size=80)))
def test_space_file_only_raises_our_error(tmp_path, text):
    path = tmp_path / "space.toml"
    path.write_text(text, encoding="utf-8")
    try:
        read_space_file(path)
    except InputError as exc:
        assert "\n" not in exc.one_line()


@FUZZ
@given(st.one_of(st.text(alphabet=string.ascii_letters + string.digits + ":._/-() =,'",
                         max_size=40),
                 st.sampled_from(["os:system", "sys:exit", "math:pi", "numpy:ndarray",
                                  "builtins:object", "user_models:BayesRidge:x", ":",
                                  "a:", ":b", "./nope.py:X", "tests/user_models.py:",
                                  "json:JSONDecoder", "collections:OrderedDict"])))
def test_plugin_spec_only_raises_our_error(text):
    try:
        make_surrogate(text if ":" in text else text + ":X")
    except InputError as exc:
        assert "\n" not in exc.one_line()


_NUM_FLAGS = ["--budget", "--batch", "--propose", "--jobs", "--max-fit-seconds",
              "--model-time-limit", "--seed"]


@FUZZ
@given(st.lists(st.tuples(st.sampled_from(_NUM_FLAGS),
                          st.one_of(st.integers(-10**6, 10**6).map(str),
                                    st.floats(allow_nan=True).map(str),
                                    st.text(max_size=8))),
                max_size=4))
def test_numeric_flags_only_raise_our_error(pairs):
    argv = ["assess", "log.csv", "--objective", "y"]
    for flag, value in pairs:
        argv += [flag, value]
    try:
        args = build_parser().parse_args(argv)
        _validate_numbers(args)
    except InputError as exc:
        assert "\n" not in exc.one_line()
