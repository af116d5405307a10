import importlib.util
import os
import sys
from pathlib import Path

import pytest

os.environ.setdefault("MPLBACKEND", "Agg")
# One BLAS/OpenMP thread per process for the whole suite (common practice on small test
# machines): `make test` runs on 2 cores and some fixtures start two worker processes.
# Measured 2026-12-03 beside one other busy process on the 2-core machine: with the
# default thread counts two feasibility tests took 291 s, with one thread 24 s.  Set
# before numpy and torch are imported (they read these at import); child processes
# inherit them.
for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")
ROOT = Path(__file__).resolve().parent.parent
TESTS = Path(__file__).resolve().parent
if str(TESTS) not in sys.path:
    sys.path.insert(0, str(TESTS))  # so `--surrogate user_models:BayesRidge` imports


@pytest.fixture
def sample_log():
    return ROOT / "sample_logs" / "moulding_warpage.csv"


def load_script(relative: str):
    """Import a script of the repository (``benchmarks/...py``, ``scripts/...py``) by path."""
    path = ROOT / relative
    spec = importlib.util.spec_from_file_location(path.stem, path)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod
