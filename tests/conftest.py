import importlib.util
import os
import sys
from pathlib import Path

import pytest

os.environ.setdefault("MPLBACKEND", "Agg")
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
