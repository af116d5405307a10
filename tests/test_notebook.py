"""The notebook door: a DataFrame in place of a path, the HTML display and the report's
figures as matplotlib Figures.

The DataFrame check is against pandas' own CSV writer: a DataFrame saved with
``to_csv(index=False)`` and read back by path must give the same assessment as the
DataFrame itself, apart from the input path.
"""

import base64
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from matplotlib.figure import Figure

import advisor
from advisor.errors import InputError, UsageError
from advisor.logs import frame_csv_bytes, load_trials
from advisor.report.sections import FIGURES

SAMPLE = Path(__file__).resolve().parent.parent / "sample_logs" / "moulding_warpage.csv"
OPTS = dict(objective="warpage_mm", campaign="lot", order="run")
RUN = dict(seed=2, quick=True, surrogates=["baseline", "gp"], backtest=False, plan=False,
           jobs=1)


def _strip(obj):
    """Drop the fields allowed to differ: timing, creation time, the input path."""
    if isinstance(obj, dict):
        return {k: _strip(v) for k, v in obj.items()
                if "seconds" not in k and k not in ("created", "timing", "command", "path")}
    if isinstance(obj, list):
        return [_strip(v) for v in obj]
    return obj


@pytest.fixture(scope="module")
def frame():
    return pd.read_csv(SAMPLE)


@pytest.fixture(scope="module")
def from_frame(frame):
    return advisor.assess(frame, **RUN, **OPTS)


def test_frame_and_its_csv_give_the_same_json(tmp_path, frame, from_frame):
    path = tmp_path / "log.csv"
    frame.to_csv(path, index=False)  # pandas' writer, the file a user would save
    from_path = advisor.assess(advisor.load_trials(path, **OPTS), **RUN)
    a, b = from_frame.to_dict(), from_path.to_dict()
    assert a["input"]["path"] is None and b["input"]["path"] == str(path)
    assert a["input"]["sha256"] == b["input"]["sha256"]  # the same bytes hashed
    assert _strip(a) == _strip(b)


def test_frame_hash_covers_content(frame):
    base = load_trials(frame, **OPTS).sha256
    changed = frame.copy()
    changed.loc[5, "warpage_mm"] += 1e-9
    assert load_trials(changed, **OPTS).sha256 != base
    assert load_trials(frame.copy(), **OPTS).sha256 == base  # stable across copies
    import hashlib
    assert base == hashlib.sha256(frame.to_csv(index=False).encode()).hexdigest()
    # a named index is kept as a column, so set_index does not lose it
    assert frame_csv_bytes(frame.set_index("run")).split(b"\n")[0].startswith(b"run,")


def test_frame_errors_name_the_frame(frame):
    with pytest.raises(UsageError, match="assess has no option"):
        advisor.assess(frame, objectiv="warpage_mm")
    with pytest.raises(InputError, match="<DataFrame>"):
        load_trials(frame, objective="no_such_column")


def test_html_display_names_the_recommendation(from_frame):
    html = from_frame._repr_html_()
    rec = from_frame.recommendation
    assert f"<b>{rec['surrogate']}</b>" in html
    assert "expected improvement (xi = 0.01)" in html  # the setting (default, no backtest)
    for name in from_frame.surrogates:
        assert name in html
    png = re.search(r"data:image/png;base64,([A-Za-z0-9+/=]+)", html)
    assert png and base64.b64decode(png.group(1))[:8] == b"\x89PNG\r\n\x1a\n"
    assert "validated safe operating limits" in html  # the caution travels with it


@pytest.mark.parametrize("name", list(FIGURES))
def test_every_named_figure_renders(from_frame, name):
    fig = from_frame.figure(name)
    assert isinstance(fig, Figure) and fig.axes
    fig.canvas.draw()
    rgb = np.asarray(fig.canvas.buffer_rgba())[..., :3]
    assert rgb.std() > 0  # something was drawn, not a blank canvas


def test_unknown_figure_is_a_clear_error(from_frame):
    with pytest.raises(UsageError, match="no figure named 'nope'; named figures: calibration"):
        from_frame.figure("nope")
    assert from_frame.figure_names() == list(FIGURES)
