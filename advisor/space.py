"""The parameter space every stage shares: kinds, bounds, levels and encodings.

A parameter is continuous, integer or categorical; a continuous or integer parameter
may be log-scaled.  The space turns a table of settings into the float matrix a
surrogate is fitted on (:meth:`ParameterSpace.encode`) and back
(:meth:`ParameterSpace.decode`), and draws random settings inside the bounds
(:meth:`ParameterSpace.sample`).  How categorical settings are encoded is decided here,
once, from the surrogate's declared ``input_encoding``:

* ``"onehot"`` (GP and neural models): one 0/1 column per level;
* ``"ordinal"`` (trees): one column of level codes 0, 1, 2, ..., which axis-aligned splits
  can separate without an implied order mattering much.

Log-scaled parameters are encoded as ``log10`` of the value, so a model sees decades as
equal steps.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import Iterable, Literal, Sequence

import numpy as np
import pandas as pd

__all__ = ["Parameter", "ParameterSpace", "LOG_SPAN_DECADES"]

Kind = Literal["continuous", "integer", "categorical"]
Encoding = Literal["onehot", "ordinal"]

#: A positive numeric parameter whose max/min ratio exceeds this many decades is
#: inferred log-scaled (common practice, no single source).
LOG_SPAN_DECADES = 2.0

#: A numeric column with at most this many distinct integer values is still read as
#: an integer parameter, not categorical (common practice for screening designs).
_MAX_CATEGORICAL_LEVELS = 30


@dataclass(frozen=True)
class Parameter:
    """One tunable setting.

    Attributes
    ----------
    name : str
        Column name in the trial log.
    kind : {"continuous", "integer", "categorical"}
    low, high : float or None
        Bounds (raw units) for numeric kinds; None for categorical.
    log : bool
        Encode as log10 (numeric kinds only; requires ``low > 0``).
    levels : tuple of str
        The categorical levels in a fixed order (empty for numeric kinds).
    source : {"inferred", "given"}
        Whether the definition came from the data or from a space file.
    unit : str
        Unit for labels, empty when unknown.
    note : str
        Why the parameter was read the way it was, in plain words.
    """

    name: str
    kind: Kind
    low: float | None = None
    high: float | None = None
    log: bool = False
    levels: tuple[str, ...] = ()
    source: str = "inferred"
    unit: str = ""
    note: str = ""

    def __post_init__(self):
        if self.kind not in ("continuous", "integer", "categorical"):
            raise ValueError(f"parameter {self.name!r}: unknown kind {self.kind!r}")
        if self.kind == "categorical":
            if len(self.levels) < 1:
                raise ValueError(f"categorical parameter {self.name!r} needs levels")
        else:
            if self.low is None or self.high is None or not self.low <= self.high:
                raise ValueError(f"parameter {self.name!r}: bounds must satisfy low <= high")
            if self.log and not self.low > 0:
                raise ValueError(f"parameter {self.name!r}: log scale needs low > 0")

    @property
    def is_numeric(self) -> bool:
        return self.kind != "categorical"

    def to_dict(self) -> dict:
        out = {"name": self.name, "kind": self.kind, "source": self.source,
               "scale": "log" if self.log else "linear"}
        if self.is_numeric:
            out.update(low=_plain(self.low), high=_plain(self.high))
        else:
            out["levels"] = list(self.levels)
        if self.unit:
            out["unit"] = self.unit
        if self.note:
            out["note"] = self.note
        return out

    def describe(self) -> str:
        """Short human text: ``integer 1..12``, ``continuous 1e-05..0.1 (log)``, ``categorical {a, b}``."""
        if self.kind == "categorical":
            return "categorical {" + ", ".join(self.levels) + "}"
        rng = f"{_fmt(self.low)}..{_fmt(self.high)}"
        return f"{self.kind} {rng}" + (" (log)" if self.log else "")


@dataclass(frozen=True)
class ParameterSpace:
    """An ordered collection of :class:`Parameter`."""

    parameters: tuple[Parameter, ...]
    notes: tuple[str, ...] = field(default=())

    def __post_init__(self):
        names = [p.name for p in self.parameters]
        if len(set(names)) != len(names):
            raise ValueError("parameter names must be unique")

    # -- access -------------------------------------------------------------------
    @property
    def names(self) -> list[str]:
        return [p.name for p in self.parameters]

    def __len__(self) -> int:
        return len(self.parameters)

    def __iter__(self):
        return iter(self.parameters)

    def __getitem__(self, name: str) -> Parameter:
        for p in self.parameters:
            if p.name == name:
                return p
        raise KeyError(name)

    def replace(self, name: str, **changes) -> "ParameterSpace":
        """A copy with one parameter's fields changed."""
        params = tuple(dataclasses.replace(p, **changes) if p.name == name else p
                       for p in self.parameters)
        return ParameterSpace(params, self.notes)

    def to_dict(self) -> list[dict]:
        return [p.to_dict() for p in self.parameters]

    # -- inference ----------------------------------------------------------------
    @classmethod
    def infer(cls, frame: pd.DataFrame, columns: Sequence[str]) -> "ParameterSpace":
        """Infer each column's kind, bounds and scale from the logged values.

        Numeric columns whose values are all whole numbers become integer parameters;
        other numeric columns continuous; everything else categorical (levels sorted as
        text).  A positive numeric column spanning more than ``LOG_SPAN_DECADES``
        decades is log-scaled (common practice, no single source).
        """
        params = []
        for name in columns:
            params.append(_infer_parameter(name, frame[name]))
        return cls(tuple(params))

    # -- encoding -----------------------------------------------------------------
    def feature_names(self, encoding: Encoding = "onehot") -> list[str]:
        out = []
        for p in self.parameters:
            if p.kind == "categorical" and encoding == "onehot":
                out.extend(f"{p.name}={lvl}" for lvl in p.levels)
            else:
                out.append(f"log10({p.name})" if p.log else p.name)
        return out

    def encode(self, frame: pd.DataFrame, encoding: Encoding = "onehot") -> np.ndarray:
        """Settings table → float matrix (rows × features) for a surrogate.

        Unknown categorical levels encode as all-zero one-hot rows (or code -1).
        """
        if encoding not in ("onehot", "ordinal"):
            raise ValueError(f"unknown encoding {encoding!r}; use 'onehot' or 'ordinal'")
        cols = []
        for p in self.parameters:
            values = frame[p.name]
            if p.kind == "categorical":
                text = values.astype(str).to_numpy()
                if encoding == "onehot":
                    for lvl in p.levels:
                        cols.append((text == lvl).astype(float))
                else:
                    lookup = {lvl: i for i, lvl in enumerate(p.levels)}
                    cols.append(np.array([lookup.get(t, -1) for t in text], dtype=float))
            else:
                x = pd.to_numeric(values, errors="coerce").to_numpy(dtype=float)
                if p.log:
                    with np.errstate(divide="ignore", invalid="ignore"):
                        x = np.log10(x)
                cols.append(x)
        if not cols:
            return np.zeros((len(frame), 0))
        return np.column_stack(cols).astype(float)

    def encoded_bounds(self, encoding: Encoding = "onehot") -> np.ndarray:
        """(n_features, 2) array of low/high in encoded units."""
        out = []
        for p in self.parameters:
            if p.kind == "categorical":
                if encoding == "onehot":
                    out.extend([(0.0, 1.0)] * len(p.levels))
                else:
                    out.append((0.0, float(len(p.levels) - 1)))
            elif p.log:
                out.append((math.log10(p.low), math.log10(p.high)))
            else:
                out.append((float(p.low), float(p.high)))
        return np.array(out, dtype=float).reshape(-1, 2)

    def decode(self, X: np.ndarray, encoding: Encoding = "onehot") -> pd.DataFrame:
        """Float matrix → settings table, snapping to levels, integers and bounds."""
        X = np.atleast_2d(np.asarray(X, dtype=float))
        data = {}
        j = 0
        for p in self.parameters:
            if p.kind == "categorical":
                if encoding == "onehot":
                    block = X[:, j:j + len(p.levels)]
                    data[p.name] = [p.levels[i] for i in np.argmax(block, axis=1)]
                    j += len(p.levels)
                else:
                    idx = np.clip(np.rint(X[:, j]), 0, len(p.levels) - 1).astype(int)
                    data[p.name] = [p.levels[i] for i in idx]
                    j += 1
                continue
            x = X[:, j]
            j += 1
            if p.log:
                x = 10.0 ** x
            x = np.clip(x, p.low, p.high)
            if p.kind == "integer":
                x = np.clip(np.rint(x), math.ceil(p.low), math.floor(p.high)).astype(int)
            data[p.name] = x
        return pd.DataFrame(data)

    def sample(self, n: int, rng: np.random.Generator) -> pd.DataFrame:
        """``n`` settings drawn uniformly inside the space (log-uniform on log scales)."""
        data = {}
        for p in self.parameters:
            if p.kind == "categorical":
                data[p.name] = [p.levels[i] for i in rng.integers(0, len(p.levels), n)]
            elif p.kind == "integer":
                lo, hi = math.ceil(p.low), math.floor(p.high)
                if p.log:
                    v = np.rint(10.0 ** rng.uniform(math.log10(lo), math.log10(hi), n))
                    data[p.name] = np.clip(v, lo, hi).astype(int)
                else:
                    data[p.name] = rng.integers(lo, hi + 1, n)
            elif p.log:
                data[p.name] = 10.0 ** rng.uniform(math.log10(p.low), math.log10(p.high), n)
            else:
                data[p.name] = rng.uniform(p.low, p.high, n)
        return pd.DataFrame(data)


def _infer_parameter(name: str, series: pd.Series) -> Parameter:
    numeric = pd.to_numeric(series, errors="coerce")
    present = series.notna()
    if present.any() and numeric[present].notna().all():
        x = numeric[present].to_numpy(dtype=float)
        lo, hi = float(np.min(x)), float(np.max(x))
        whole = bool(np.all(np.equal(np.mod(x, 1.0), 0.0)))
        kind: Kind = "integer" if whole else "continuous"
        log = bool(lo > 0 and hi / lo > 10.0 ** LOG_SPAN_DECADES)
        notes = ["whole numbers only" if whole else "real values"]
        if log:
            notes.append(f"positive and spans {math.log10(hi / lo):.1f} decades, so log scale")
        return Parameter(name, kind, lo, hi, log=log, note="; ".join(notes))
    levels = tuple(sorted(series[present].astype(str).unique()))
    return Parameter(name, "categorical", levels=levels or ("",),
                     note=f"text values, {len(levels)} levels")


def _plain(v):
    if v is None:
        return None
    f = float(v)
    return int(f) if f.is_integer() and abs(f) < 2**53 else f


def _fmt(v: float | None) -> str:
    if v is None:
        return "?"
    return f"{v:.4g}"
