"""The tutorial (docs/tutorial.py) runs from loading to a saved figure and HTML summary."""

import pytest
from matplotlib.figure import Figure

from conftest import load_script


@pytest.mark.slow  # three surrogates cross-validated on 144 trials (~30 s of CPU)
def test_tutorial_runs(tmp_path, capsys):
    result = load_script("docs/tutorial.py").main(tmp_path)
    a = result["assessment"]
    assert isinstance(result["figure"], Figure)
    assert (tmp_path / "calibration.png").read_bytes()[:4] == b"\x89PNG"
    html = (tmp_path / "summary.html").read_text(encoding="utf-8")
    assert f"<b>{a.recommendation['surrogate']}</b>" in html
    out = capsys.readouterr().out
    assert "144 trials used, 16 failed, 4 search rounds" in out  # the data sheet's counts
    assert "Recommendation:" in out
    # every candidate, the scikit-learn one included, produced usable predictions
    assert set(a.ranking["status"]) == {"ok"}
