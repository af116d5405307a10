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

Inference from data
-------------------
:meth:`ParameterSpace.infer` reads each column's kind from its values and records why in
:attr:`Parameter.note`:

* a column whose values are all numbers is numeric, never categorical, however few
  distinct values it has (an integer column with three levels stays ``integer``);
  whole numbers only → ``integer``, otherwise ``continuous``;
* any other column (``"A1"``, ``"yes"``/``"no"``, ``"adam"``) is ``categorical``, levels
  sorted as text;
* a positive numeric column whose max/min ratio exceeds ``10 ** LOG_SPAN_DECADES``
  (two decades) is log-scaled (common practice, no single source).

The loader (:mod:`advisor.logs`) types the columns first (decimal commas, missing
markers), so ``infer`` sees floats for numeric columns and text for the rest.

Space file (TOML)
-----------------
A space file overrides the inference.  Every table and key is optional; unknown keys
are refused so that a typo is not silently ignored::

    [objective]
    name = "val_mape"          # must equal the objective column if that is also given
    direction = "minimize"     # or "maximize"; the default when no flag is given
    unit = "%"

    [space]
    others = "infer"           # columns not listed below: "infer" (default) or "ignore"

    [parameters.learning_rate]
    kind = "continuous"        # "continuous" | "integer" | "categorical"
    low = 1e-5                 # bounds in raw units; omitted bounds come from the data
    high = 1e-1
    log = true                 # omitted: inferred (positive and > 2 decades)
    unit = "1"

    [parameters.optimizer]
    kind = "categorical"
    levels = ["adam", "sgd", "rmsprop"]   # omitted: the levels seen in the data

A parameter entry may give only some keys (``log = false`` alone, say); the rest is
inferred from the data and the note says so.  A numeric column can be declared
``categorical`` (its values become text labels).  Data outside declared bounds or levels
is refused by the loader, naming the line.

Direction rule: the file's ``direction`` is the default.  An explicit direction passed
to :func:`advisor.logs.load_trials` (the CLI's ``--maximize``) that agrees is fine; one
that conflicts is a :class:`~advisor.errors.UsageError` naming both, because silently
preferring either could optimise the wrong way.
"""

from __future__ import annotations

import dataclasses
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal, Mapping, Sequence

import numpy as np
import pandas as pd

from .errors import InputError

__all__ = ["Parameter", "ParameterSpace", "SpaceFile", "read_space_file",
           "LOG_SPAN_DECADES", "KINDS"]

Kind = Literal["continuous", "integer", "categorical"]
Encoding = Literal["onehot", "ordinal"]
KINDS = ("continuous", "integer", "categorical")

#: A positive numeric parameter whose max/min ratio exceeds this many decades is
#: inferred log-scaled (common practice, no single source).
LOG_SPAN_DECADES = 2.0

#: A numeric column with at most this many distinct integer values is still read as
#: an integer parameter, not categorical (common practice for screening designs).
_MAX_CATEGORICAL_LEVELS = 30

_PARAM_KEYS = {"kind", "low", "high", "log", "levels", "unit"}
_OBJECTIVE_KEYS = {"name", "direction", "unit"}
_SPACE_KEYS = {"others"}
_TOP_KEYS = {"objective", "space", "parameters"}


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
        if self.kind not in KINDS:
            raise ValueError(f"parameter {self.name!r}: unknown kind {self.kind!r}")
        if self.kind == "categorical":
            if len(self.levels) < 1:
                raise ValueError(f"categorical parameter {self.name!r} needs levels")
            if len(set(self.levels)) != len(self.levels):
                raise ValueError(f"categorical parameter {self.name!r}: levels repeat")
        else:
            if self.low is None or self.high is None or not self.low <= self.high:
                raise ValueError(f"parameter {self.name!r}: bounds must satisfy low <= high")
            if not (math.isfinite(self.low) and math.isfinite(self.high)):
                raise ValueError(f"parameter {self.name!r}: bounds must be finite")
            if self.log and not self.low > 0:
                raise ValueError(f"parameter {self.name!r}: log scale needs low > 0")
            if self.kind == "integer" and math.ceil(self.low) > math.floor(self.high):
                raise ValueError(f"integer parameter {self.name!r}: no whole number "
                                 f"between {self.low} and {self.high}")

    @property
    def is_numeric(self) -> bool:
        return self.kind != "categorical"

    def contains(self, values) -> np.ndarray:
        """Boolean mask: which raw values lie inside the bounds / levels."""
        if self.kind == "categorical":
            text = pd.Series(values, dtype=object).astype(str).to_numpy()
            return np.isin(text, np.array(self.levels, dtype=object))
        x = pd.to_numeric(pd.Series(values), errors="coerce").to_numpy(dtype=float)
        with np.errstate(invalid="ignore"):
            inside = (x >= self.low) & (x <= self.high)
            if self.kind == "integer":
                inside &= np.equal(np.mod(x, 1.0), 0.0)
        return inside

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

    @classmethod
    def from_dict(cls, d: Mapping) -> "Parameter":
        """Inverse of :meth:`to_dict` (for specs read back from a JSON report)."""
        return cls(name=str(d["name"]), kind=d["kind"],
                   low=None if d.get("low") is None else float(d["low"]),
                   high=None if d.get("high") is None else float(d["high"]),
                   log=d.get("scale", "linear") == "log",
                   levels=tuple(str(v) for v in d.get("levels", ())),
                   source=d.get("source", "given"), unit=d.get("unit", ""),
                   note=d.get("note", ""))

    def describe(self) -> str:
        """Short text: ``integer 1..12``, ``continuous 1e-05..0.1 (log)``, ``categorical {a}``."""
        if self.kind == "categorical":
            return "categorical {" + ", ".join(self.levels) + "}"
        rng = f"{_fmt(self.low)}..{_fmt(self.high)}"
        return f"{self.kind} {rng}" + (" (log)" if self.log else "")


@dataclass(frozen=True)
class ParameterSpace:
    """An ordered collection of :class:`Parameter`.

    ``notes`` records decisions about the space as a whole (columns dropped as constant
    or ignored as free text), in plain words.
    """

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

    def with_notes(self, *notes: str) -> "ParameterSpace":
        """A copy with ``notes`` appended."""
        return ParameterSpace(self.parameters, tuple(self.notes) + tuple(notes))

    def subset(self, names: Sequence[str]) -> "ParameterSpace":
        """A copy keeping only ``names``, in the given order."""
        return ParameterSpace(tuple(self[n] for n in names), self.notes)

    def to_dict(self) -> list[dict]:
        return [p.to_dict() for p in self.parameters]

    @classmethod
    def from_dict(cls, items: Sequence[Mapping]) -> "ParameterSpace":
        """Inverse of :meth:`to_dict`."""
        return cls(tuple(Parameter.from_dict(d) for d in items))

    # -- inference ----------------------------------------------------------------
    @classmethod
    def infer(cls, frame: pd.DataFrame, columns: Sequence[str],
              given: Mapping[str, Mapping] | None = None,
              source_name: str = "space file") -> "ParameterSpace":
        """Infer each column's kind, bounds and scale from the logged values.

        Numeric columns whose values are all whole numbers become integer parameters;
        other numeric columns continuous; everything else categorical (levels sorted as
        text).  A positive numeric column spanning more than ``LOG_SPAN_DECADES``
        decades is log-scaled (common practice, no single source).

        Parameters
        ----------
        frame : DataFrame
            Logged settings; numeric columns as numbers (text that parses as numbers is
            also accepted), missing values as NaN/None (ignored).
        columns : sequence of str
            The parameter columns, in order.
        given : mapping name → partial spec, optional
            Keys from a space file (``kind``, ``low``, ``high``, ``log``, ``levels``,
            ``unit``) that override the inference; missing keys are inferred.
        source_name : str
            How to name the space file in notes.

        Raises
        ------
        ValueError
            When a given spec is inconsistent (bounds reversed, log with low <= 0).
        """
        given = given or {}
        params = []
        for name in columns:
            inferred = _infer_parameter(name, frame[name])
            spec = given.get(name)
            params.append(inferred if spec is None else
                          _merge_given(inferred, frame[name], spec, source_name))
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
        rng = np.random.default_rng(rng)
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


# -- space file -------------------------------------------------------------------------
@dataclass(frozen=True)
class SpaceFile:
    """A parsed space file (see the module docstring for the schema).

    Attributes
    ----------
    path : str
    objective : str or None
        Objective column name, when the file gives one.
    direction : {"minimize", "maximize"} or None
    unit : str
        Objective unit.
    parameters : dict name → dict
        The partial specs, keys among ``kind low high log levels unit``.
    others : {"infer", "ignore"}
        What to do with columns the file does not list.
    """

    path: str
    objective: str | None = None
    direction: str | None = None
    unit: str = ""
    parameters: Mapping[str, Mapping] = field(default_factory=dict)
    others: str = "infer"


def read_space_file(path) -> SpaceFile:
    """Parse and check a TOML space file.

    Raises
    ------
    InputError
        Missing file, invalid TOML (with the parser's line), unknown tables or keys,
        wrong value types.
    """
    p = Path(path)
    if not p.is_file():
        raise InputError("space file does not exist" if not p.exists() else
                         "space file is a folder", path=p, fix="name a .toml file")
    try:
        data = tomllib.loads(p.read_bytes().decode("utf-8-sig"))
    except UnicodeDecodeError:
        raise InputError("space file is not UTF-8 text", path=p,
                         fix="re-save it as UTF-8") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"not valid TOML ({exc})", path=p,
                         fix="see the schema in advisor/space.py") from None

    def bad(msg, fix="see the schema in the advisor.space module docstring"):
        return InputError(msg, path=p, fix=fix)

    _check_keys(data, _TOP_KEYS, "top-level table", bad)
    obj = data.get("objective", {})
    if not isinstance(obj, dict):
        raise bad("[objective] must be a table")
    _check_keys(obj, _OBJECTIVE_KEYS, "[objective] key", bad)
    direction = obj.get("direction")
    if direction is not None and direction not in ("minimize", "maximize"):
        raise bad(f"[objective] direction = {direction!r}",
                  fix="write direction = \"minimize\" or \"maximize\"")
    for key in ("name", "unit"):
        if key in obj and not isinstance(obj[key], str):
            raise bad(f"[objective] {key} must be text")
    spc = data.get("space", {})
    if not isinstance(spc, dict):
        raise bad("[space] must be a table")
    _check_keys(spc, _SPACE_KEYS, "[space] key", bad)
    others = spc.get("others", "infer")
    if others not in ("infer", "ignore"):
        raise bad(f"[space] others = {others!r}", fix="write others = \"infer\" or \"ignore\"")
    params = data.get("parameters", {})
    if not isinstance(params, dict):
        raise bad("[parameters] must hold one table per parameter")
    checked = {}
    for name, spec in params.items():
        if not isinstance(spec, dict):
            raise bad(f"parameters.{name} must be a table ([parameters.{name}])")
        _check_keys(spec, _PARAM_KEYS, f"[parameters.{name}] key", bad)
        checked[name] = _check_param_spec(name, spec, bad)
    return SpaceFile(path=str(p), objective=obj.get("name"), direction=direction,
                     unit=obj.get("unit", ""), parameters=checked, others=others)


def _check_keys(table, allowed, what, bad):
    import difflib
    for key in table:
        if key not in allowed:
            near = difflib.get_close_matches(key, sorted(allowed), n=1)
            hint = f"did you mean '{near[0]}'?" if near else \
                "allowed: " + ", ".join(sorted(allowed))
            raise bad(f"unknown {what} '{key}'", fix=hint)


def _check_param_spec(name, spec, bad) -> dict:
    kind = spec.get("kind")
    if kind is not None and kind not in KINDS:
        raise bad(f"[parameters.{name}] kind = {kind!r}",
                  fix="use one of " + ", ".join(KINDS))
    for key in ("low", "high"):
        v = spec.get(key)
        if v is not None and (isinstance(v, bool) or not isinstance(v, (int, float))
                              or not math.isfinite(v)):
            raise bad(f"[parameters.{name}] {key} must be a finite number, not {v!r}")
    if "log" in spec and not isinstance(spec["log"], bool):
        raise bad(f"[parameters.{name}] log must be true or false")
    if "unit" in spec and not isinstance(spec["unit"], str):
        raise bad(f"[parameters.{name}] unit must be text")
    if "levels" in spec:
        lv = spec["levels"]
        if not isinstance(lv, list) or not lv or not all(
                isinstance(v, (str, int, float)) and not isinstance(v, bool) for v in lv):
            raise bad(f"[parameters.{name}] levels must be a non-empty list of values")
        if kind not in (None, "categorical"):
            raise bad(f"[parameters.{name}] levels given for kind {kind!r}",
                      fix="drop levels or write kind = \"categorical\"")
        if len({_level_text(v) for v in lv}) != len(lv):
            raise bad(f"[parameters.{name}] levels repeat")
    if (kind == "categorical" or "levels" in spec) and any(
            k in spec for k in ("low", "high", "log")):
        raise bad(f"[parameters.{name}] a categorical parameter has levels, not low/high/log")
    lo, hi = spec.get("low"), spec.get("high")
    if lo is not None and hi is not None and lo > hi:
        raise bad(f"[parameters.{name}] low = {lo} is above high = {hi}")
    if spec.get("log") and lo is not None and lo <= 0:
        raise bad(f"[parameters.{name}] log = true needs low > 0, got low = {lo}")
    out = dict(spec)
    if "levels" in out:
        out["levels"] = [_level_text(v) for v in out["levels"]]
    return out


def _level_text(v) -> str:
    """Text form of a level, matching how the loader writes numeric labels (``3`` not ``3.0``)."""
    if isinstance(v, float) and v.is_integer():
        return str(int(v))
    return str(v)


def _merge_given(inferred: Parameter, series: pd.Series, spec: Mapping,
                 source_name: str) -> Parameter:
    kind = spec.get("kind") or ("categorical" if "levels" in spec else inferred.kind)
    filled = []
    if kind == "categorical":
        if "levels" in spec:
            levels = tuple(spec["levels"])
        else:
            present = series[series.notna()]
            levels = tuple(sorted({_level_text(v) for v in present})) or ("",)
            filled.append("levels")
        return Parameter(inferred.name, "categorical", levels=levels, source="given",
                         unit=spec.get("unit", ""),
                         note=_given_note(source_name, filled))
    if not inferred.is_numeric:
        raise ValueError(f"parameter {inferred.name!r} is declared {kind} but its values "
                         f"are text ({', '.join(inferred.levels[:4])})")
    lo = spec.get("low")
    hi = spec.get("high")
    if lo is None:
        lo = inferred.low
        filled.append("low")
    if hi is None:
        hi = inferred.high
        filled.append("high")
    if "log" in spec:
        log = bool(spec["log"])
    else:
        log = _wants_log(float(lo), float(hi))
        filled.append("scale")
    return Parameter(inferred.name, kind, float(lo), float(hi), log=log, source="given",
                     unit=spec.get("unit", ""), note=_given_note(source_name, filled))


def _given_note(source_name, filled) -> str:
    note = f"given in {source_name}"
    if filled:
        note += "; " + ", ".join(filled) + " from the data"
    return note


def _wants_log(lo: float, hi: float) -> bool:
    return bool(lo > 0 and hi / lo > 10.0 ** LOG_SPAN_DECADES)


def _infer_parameter(name: str, series: pd.Series) -> Parameter:
    present = series.notna()
    if pd.api.types.is_bool_dtype(series.dtype):
        numeric = pd.Series(np.nan, index=series.index)
    else:
        numeric = pd.to_numeric(series, errors="coerce")
    if present.any() and numeric[present].notna().all():
        x = numeric[present].to_numpy(dtype=float)
        x = x[np.isfinite(x)]
        if x.size:
            lo, hi = float(np.min(x)), float(np.max(x))
            whole = bool(np.all(np.equal(np.mod(x, 1.0), 0.0)))
            kind: Kind = "integer" if whole else "continuous"
            log = _wants_log(lo, hi)
            n_distinct = len(np.unique(x))
            notes = [f"numbers only, whole ({n_distinct} distinct values)" if whole
                     else "numbers only, with fractions"]
            if log:
                notes.append(f"positive and spans {math.log10(hi / lo):.1f} decades, "
                             "so log scale")
            return Parameter(name, kind, lo, hi, log=log, note="; ".join(notes))
    levels = tuple(sorted({_level_text(v) for v in series[present]}))
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
    return f"{v + 0.0:.4g}"  # + 0.0 turns -0.0 into 0.0
