"""scikit-learn conventions both ways: its regressors as surrogates (the ``module:Class``
door with options), and the built-in surrogates as scikit-learn estimators.

References outside the project: scikit-learn's own ``clone``, ``get_params``,
``estimator_checks.check_get_params_invariance`` / ``check_set_params`` and the
predictions of its GaussianProcessRegressor / BayesianRidge fitted directly.
"""

import json
import math
import warnings

import numpy as np
import pytest
from sklearn.base import clone
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.linear_model import BayesianRidge
from sklearn.utils.estimator_checks import check_get_params_invariance, check_set_params

from advisor.cli import main
from advisor.errors import UsageError
from advisor.surrogates import make_surrogate, surrogate_names
from advisor.surrogates.adapter import ReturnStdAdapter, parse_model_spec

BUILTINS = surrogate_names()


def _data(n=40, d=2, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.uniform(size=(n, d))
    return X, np.sin(3 * X[:, 0]) + X[:, 1] + 0.1 * rng.normal(size=n)


# -- the built-ins as scikit-learn estimators -----------------------------------------
@pytest.mark.parametrize("name", BUILTINS)
def test_builtin_clone_and_params(name):
    model = make_surrogate(name, seed=5, quick=True)
    params = model.get_params()
    assert params["seed"] == 5 and params["quick"] is True
    twin = clone(model)  # scikit-learn's clone re-checks each param is passed unchanged
    assert type(twin) is type(model) and twin is not model
    assert twin.get_params() == params
    twin.set_params(seed=9)
    assert twin.seed == 9 and model.seed == 5
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        check_get_params_invariance(name, model)
        check_set_params(name, model)



def test_builtin_encoding_matches_each_class():
    # The registry's encodings (read without importing a model module) are the classes'
    # own input_encoding ("onehot" when a class declares none, the protocol's default,
    # advisor.surrogates.base); any other name gets None (a user model is asked itself).
    from advisor.surrogates import _builtin_encoding

    for name in BUILTINS:
        model = make_surrogate(name, quick=True)
        assert _builtin_encoding(name) == getattr(model, "input_encoding", "onehot")
    assert _builtin_encoding("sklearn.linear_model:BayesianRidge") is None


def test_encodings_and_versions_import_no_torch():
    # Choosing every built-in's encoding and recording the library versions must not
    # import torch into the main process (seconds per run; the networks are fitted in
    # worker processes); the torch version is still recorded, from its distribution.
    import subprocess
    import sys
    from importlib import metadata

    code = ("import sys, json; from advisor.surrogates import surrogate_names; "
            "from advisor.assessment._folds import _encoding_of; "
            "from advisor.assessment._result import _package_versions; "
            "enc = {n: _encoding_of(n) for n in surrogate_names()}; "
            "print(json.dumps([enc, _package_versions(), 'torch' in sys.modules]))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True)
    enc, versions, torch_loaded = json.loads(out.stdout)
    assert torch_loaded is False
    assert enc["forest"] == "ordinal" and enc["gp"] == "onehot"
    assert versions["torch"] == metadata.version("torch")

NEURAL = {"dngo", "bnn", "ensemble", "neural_process"}  # two network fits each: seconds


@pytest.mark.parametrize("name", [pytest.param(n, marks=pytest.mark.slow) if n in NEURAL
                                  else n for n in BUILTINS])
def test_builtin_return_std_equals_protocol(name):
    X, y = _data()
    model = make_surrogate(name, seed=1, quick=True).fit(X, y)
    mean, std = model.predict(X[:7])
    m2, s2 = model.predict(X[:7], return_std=True)
    only = model.predict(X[:7], return_std=False)
    np.testing.assert_array_equal(m2, mean)  # same call underneath: exactly equal
    np.testing.assert_array_equal(s2, std)
    np.testing.assert_array_equal(only, mean)
    # a clone fitted on the same data with the same seed predicts the same
    m3, s3 = clone(model).fit(X, y).predict(X[:7], return_std=True)
    np.testing.assert_allclose(m3, mean, rtol=1e-6, atol=1e-9)  # same seed: float noise only
    np.testing.assert_allclose(s3, std, rtol=1e-6, atol=1e-9)


# -- scikit-learn regressors as surrogates ---------------------------------------------
def test_option_syntax_values():
    target, opts = parse_model_spec(
        "pkg.mod:Cls:a=1:b=2.5e-3:c=TRUE:d=none:e=(1, 2):f=lbfgs:g='x y'")
    assert target == "pkg.mod:Cls"
    assert opts == {"a": 1, "b": 2.5e-3, "c": True, "d": None, "e": (1, 2), "f": "lbfgs",
                    "g": "x y"}
    # ast.literal_eval never runs code: a call stays a plain string
    assert parse_model_spec("m:C:x=__import__('os')")[1] == {"x": "__import__('os')"}


@pytest.mark.parametrize("spec, words", [
    ("sklearn.linear_model:Ridge", "gives no predictive uncertainty"),
    ("sklearn.ensemble:RandomForestRegressor", "gives no predictive uncertainty"),
    ("sklearn.linear_model:BayesianRidge:foo=1", "has no option 'foo'"),
    ("sklearn.linear_model:BayesianRidge:max_iter", "is not name=value"),
    ("sklearn.linear_model:BayesianRidge:max_iter=", "has no value"),
    ("sklearn.linear_model:BayesianRidge:tol=1:tol=2", "given twice"),
    ("sklearn.linear_model:BayesianRidge:alpha_1=-1", "alpha_1"),
])
def test_bad_sklearn_specs_are_usage_errors(spec, words):
    with pytest.raises(UsageError, match=words):
        make_surrogate(spec)


def test_gpr_through_the_door_matches_sklearn():
    X, y = _data()
    spec = "sklearn.gaussian_process:GaussianProcessRegressor:normalize_y=true:alpha=1e-2"
    model = make_surrogate(spec, seed=3)
    assert isinstance(model, ReturnStdAdapter)
    assert model.estimator.get_params()["random_state"] == 3  # the seed reaches it
    mean, std = model.fit(X, y).predict(X[:9])
    ref = GaussianProcessRegressor(normalize_y=True, alpha=1e-2, random_state=3).fit(X, y)
    rm, rs = ref.predict(X[:9], return_std=True)
    np.testing.assert_allclose(mean, rm, rtol=1e-10)  # same library call, same data
    np.testing.assert_allclose(std, rs, rtol=1e-10)
    br = make_surrogate("sklearn.linear_model:BayesianRidge:max_iter=50").fit(X, y)
    bm, bs = BayesianRidge(max_iter=50).fit(X, y).predict(X[:9], return_std=True)
    np.testing.assert_allclose(br.predict(X[:9])[0], bm, rtol=1e-10)
    np.testing.assert_allclose(br.predict(X[:9])[1], bs, rtol=1e-10)


def test_subclass_of_a_builtin_is_not_wrapped():
    # a user's model built on ours keeps its own members (sample_y for Thompson draws)
    model = make_surrogate("advisor.surrogates.gp:MaternGP:maxiter=20", seed=4)
    assert type(model).__name__ == "MaternGP" and model.maxiter == 20 and model.seed == 4


GPR = "sklearn.gaussian_process:GaussianProcessRegressor:normalize_y=true:alpha=1e-3"
RIDGE_B = "sklearn.linear_model:BayesianRidge"
CLI = ["--objective", "warpage_mm", "--campaign", "lot", "--order", "run", "--quick",
       "--no-backtest", "--no-pdf", "--jobs", "1", "--quiet", "--surrogates", "baseline,gp"]


@pytest.mark.slow  # a CLI run with five models (about 30 s on the shared 2-core machine)
def test_cli_scores_sklearn_regressors_next_to_builtins(tmp_path, sample_log):
    code = main(["assess", str(sample_log), *CLI, "--out", str(tmp_path),
                 "--surrogate", "sklearn.gaussian_process:GaussianProcessRegressor",
                 "--surrogate", GPR, "--surrogate", RIDGE_B])
    assert code == 0
    d = json.loads((tmp_path / "moulding_warpage.json").read_text())
    rows = {r["surrogate"]: r for r in d["ranking"]}
    assert set(rows) == {"baseline", "gp", GPR, RIDGE_B,
                         "sklearn.gaussian_process:GaussianProcessRegressor"}
    for name, r in rows.items():
        assert r["status"] == "ok", (name, r.get("failures"))
        assert math.isfinite(r["metrics"]["nll"]), name


def test_cli_refuses_regressor_without_uncertainty(tmp_path, sample_log, capsys):
    out = tmp_path / "out"
    code = main(["assess", str(sample_log), *CLI, "--out", str(out),
                 "--surrogate", "sklearn.linear_model:Ridge"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2
    assert err == ["error: surrogate 'sklearn.linear_model:Ridge': Ridge gives no "
                   "predictive uncertainty (its predict has no return_std, and it returns "
                   "the mean only); fix: use a regressor whose predict takes "
                   "return_std=True (e.g. sklearn.linear_model:BayesianRidge, "
                   "sklearn.gaussian_process:GaussianProcessRegressor), or a class whose "
                   "predict(X) returns (mean, std)"]
    assert not out.exists()
