"""Constants and cell-level helpers the log reader shares: missing and infinite tokens,
number parsing with per-column decimal separators, short display."""

from __future__ import annotations

import difflib
import math
import re
from dataclasses import dataclass
from typing import Sequence

import numpy as np
import pandas as pd

from ..errors import InputError

#: Fewest successful trials an assessment accepts: two folds of at least four points
#: each, so that every fold's metrics are defined.
MIN_TRIALS = 8

#: Status values that mean success when ``success`` is not given (case-insensitive).
DEFAULT_SUCCESS = ("ok", "success", "succeeded", "done", "completed", "complete", "finished")

#: A text column with more distinct values than this is not read as a categorical
#: parameter unless named (one-hot columns beyond this swamp a few hundred trials;
#: common practice, no single source).
_MAX_TEXT_LEVELS = 30

_MISSING_TOKENS = {"", "na", "n/a", "nan", "null", "none", "-", "--", "?", "#n/a",
                   "missing"}
_INF_TOKENS = {"inf", "+inf", "-inf", "infinity", "+infinity", "-infinity"}
# Written out rather than float(): float() also accepts "1_000", "nan" and "infinity",
# which a log should not be read as.
_NUM_DOT = re.compile(r"^[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?$")
_NUM_COMMA = re.compile(r"^[+-]?(?:\d+,\d*|,\d+)(?:[eE][+-]?\d+)?$")
_DELIMITERS = (",", ";", "\t")
_LINE = "_line"
_SNIFF_LINES = 60




# ======================================================================================
# typing cells
# ======================================================================================
def _is_missing_token(c: str) -> bool:
    return c.strip().lower() in _MISSING_TOKENS


def _column_decimal(col: Sequence[str]) -> str:
    """``","`` when the column's numbers use decimal commas (and none uses a point)."""
    col = [c[:-1].rstrip() if c.endswith("%") else c for c in col]
    comma = any(_NUM_COMMA.match(c) and not _NUM_DOT.match(c) for c in col)
    dot = any("." in c and _NUM_DOT.match(c) for c in col)
    return "," if comma and not dot else "."


_THOUSANDS = re.compile(r"^[+-]?\d{1,3}(?:,\d{3})+$")


def _parse_number(c: str, decimal: str) -> float | None:
    """A cell as a float (inf allowed), or None when it is not a number.

    A trailing ``%`` is dropped: ``12.5%`` reads as 12.5 (the column stays in percent).
    """
    s = c.strip()
    if s.endswith("%"):
        s = s[:-1].rstrip()
    low = s.lower()
    if low in _INF_TOKENS:
        return -math.inf if low.startswith("-") else math.inf
    if decimal == "," and _NUM_COMMA.match(s):
        return float(s.replace(",", "."))
    if _NUM_DOT.match(s):
        try:
            return float(s)
        except OverflowError:  # "1e999" → float() gives inf, never raises; kept for safety
            return math.inf
    return None


@dataclass
class _NumericColumn:
    values: np.ndarray            # float, NaN where missing or not a number
    missing: np.ndarray           # bool
    text: np.ndarray              # bool: non-missing cell that is not a number
    decimal: str


def _numeric(col: Sequence[str]) -> _NumericColumn:
    decimal = _column_decimal(col)
    vals = np.full(len(col), np.nan)
    missing = np.zeros(len(col), bool)
    text = np.zeros(len(col), bool)
    for i, c in enumerate(col):
        if _is_missing_token(c):
            missing[i] = True
            continue
        v = _parse_number(c, decimal)
        if v is None:
            text[i] = True
        else:
            vals[i] = v
    return _NumericColumn(vals, missing, text, decimal)


def _show(v, n: int = 30) -> str:
    s = " ".join(str(v).split())
    return s if len(s) <= n else s[:n - 1] + "…"


def _setting_key(frame: pd.DataFrame, p) -> np.ndarray:
    if p.kind == "categorical":
        return frame[p.name].astype(str).to_numpy(dtype=object)
    x = pd.to_numeric(frame[p.name], errors="coerce").to_numpy(float)
    return np.array([f"{v:.12g}" for v in x], dtype=object)


def _reason_kind(part: str) -> str:
    if part.startswith("status"):
        return "status"
    if part.startswith("objective"):
        return "objective"
    if part.startswith("order"):
        return "order"
    return "parameter"


def _no_column(role, col, columns, path) -> InputError:
    return InputError(f"no {role} column '{col}'{_suggest(col, columns)}; columns are: "
                      + ", ".join(columns), path=path,
                      fix="pass one of the listed column names")


def _suggest(name, columns) -> str:
    lower = {c.lower(): c for c in columns}
    if name.lower() in lower:
        return f" (did you mean '{lower[name.lower()]}'?)"
    near = difflib.get_close_matches(name, list(columns), n=1, cutoff=0.5)
    return f" (did you mean '{near[0]}'?)" if near else ""
