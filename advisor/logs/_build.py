"""Choosing and typing the parameter columns, failed trials, the inferred space, and the
notes the loader adds: text cells -> :class:`TrialTable`."""

from __future__ import annotations

import re
from collections import Counter
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError, UsageError
from ..space import ParameterSpace, SpaceFile
from ._common import (DEFAULT_SUCCESS, MIN_TRIALS, _LINE, _MAX_TEXT_LEVELS, _NumericColumn,
                      _THOUSANDS, _no_column, _numeric, _reason_kind, _show, _suggest)
from ._read import _Raw
from ._table import TrialTable

# ======================================================================================
# choosing and typing the parameter columns
# ======================================================================================
def _choose_params(raw: _Raw, params, reserved, spec: SpaceFile | None,
                   given_space: ParameterSpace | None, path):
    """Which columns are parameters; ``named`` = the ones the user named explicitly."""
    columns = raw.header
    notes: list[str] = []
    if params is not None:
        params = [str(p).strip() for p in params]
        if len(set(params)) != len(params):
            dup = [p for p, n in Counter(params).items() if n > 1]
            raise UsageError(f"parameter '{dup[0]}' is listed twice")
        if not params:
            raise UsageError("the parameter list is empty", fix="name at least one column")
    if given_space is not None:
        if params is not None and list(params) != given_space.names:
            raise UsageError("both a parameter list and a ParameterSpace were given and "
                             "they differ", fix="pass one of them")
        params = given_space.names
    for p in params or ():
        if p in reserved:
            raise UsageError(f"column '{p}' cannot be both a parameter and the "
                             "objective, campaign, order or status column",
                             fix="leave it out of the parameter list")
        if p not in columns:
            raise _no_column("parameter", p, columns, path)
    if spec is not None:
        for p in spec.parameters:
            if p not in columns:
                raise InputError(f"parameter '{p}' is not a column of {path}"
                                 f"{_suggest(p, columns)}; columns are: "
                                 + ", ".join(columns), path=spec.path,
                                 fix="fix the [parameters.NAME] table name")
            if p in reserved:
                raise UsageError(f"space file {spec.path} lists '{p}', which is also a "
                                 "role column (objective, campaign, order or status)")
    if params is not None:
        if spec is not None:
            extra = [p for p in spec.parameters if p not in params]
            if extra:
                notes.append("space file parameters not in the parameter list are not "
                             "used: " + ", ".join(extra))
        ignored = [c for c in columns if c not in params and c not in reserved]
        if ignored:
            notes.append("columns not in the parameter list, ignored: " + ", ".join(ignored))
        return list(params), set(params), notes
    named = set(spec.parameters) if spec is not None else set()
    if spec is not None and spec.others == "ignore":
        ignored = [c for c in columns if c not in named and c not in reserved]
        if ignored:
            notes.append(f"columns not listed in space file {spec.path} ignored "
                         "([space] others = \"ignore\"): " + ", ".join(ignored))
        return [c for c in columns if c in named], named, notes
    return [c for c in columns if c not in reserved], named, notes


class _Builder:
    """Turns the text cells into the typed frame, the failures and the space."""

    def __init__(self, raw: _Raw, path: Path, roles, given_space, spec):
        self.raw = raw
        self.path = path
        self.roles = roles
        self.given_space = given_space
        self.spec = spec
        self.n = len(raw.lines)
        self.notes = list(raw.notes)
        self.decimals: dict[str, str] = {}

    # -- public step -----------------------------------------------------------------
    def build(self, params, named, direction, success, units, choose_notes) -> TrialTable:
        frame = pd.DataFrame({_LINE: self.raw.lines})
        reasons = [[] for _ in range(self.n)]
        objective = self.roles["objective"]
        frame[objective] = self._objective(objective, reasons)
        if self.roles["status"] is not None:
            frame[self.roles["status"]] = self._status(self.roles["status"], success, reasons)
        if self.roles["campaign"] is not None:
            frame[self.roles["campaign"]] = self._campaign(self.roles["campaign"])
        if self.roles["order"] is not None:
            frame[self.roles["order"]] = self._order(self.roles["order"], reasons)
        self.notes.extend(choose_notes)
        base_ok = np.array([not r for r in reasons])

        typed, kept, space_notes = self._type_params(params, named, base_ok)
        for name in self.raw.header:
            if name in frame.columns:
                continue
            frame[name] = typed[name] if name in typed else pd.Series(
                [c if c != "" else None for c in self.raw.cells[name]], dtype=object)
        frame = frame[[c for c in self.raw.header] + [_LINE]]
        self._parameter_failures(frame, kept, reasons)
        ok = np.array([not r for r in reasons])
        self._check_enough(ok, reasons, objective)
        space = self._space(frame, ok, kept, space_notes)
        self._check_inside(frame, space)
        y = frame[objective].to_numpy(float)[ok]
        if np.ptp(y) == 0:
            raise InputError(f"objective is constant ({_show(y[0])}) in all {ok.sum()} "
                             "successful trials; there is nothing to model", path=self.path,
                             column=objective, fix="check that the right column is named")
        camp = self.roles["campaign"]
        failures = [{"line": int(self.raw.lines[i]),
                     "campaign": None if camp is None else str(frame[camp].iloc[i]),
                     "reason": "; ".join(reasons[i])} for i in np.flatnonzero(~ok)]
        table = TrialTable(frame=frame, ok=ok, space=space, objective=objective,
                           direction=direction, campaign=camp, order=self.roles["order"],
                           status=self.roles["status"], source=str(self.path),
                           sha256=self.raw.sha256, rows_read=self.n, failures=failures,
                           units=units,
                           read_info=dict(self.raw.info, decimal=dict(self.decimals)))
        table.notes = self.notes + _summary_notes(table)
        return table

    # -- role columns ----------------------------------------------------------------
    def _objective(self, col, reasons) -> np.ndarray:
        num = _numeric(self.raw.cells[col])
        self._record_decimal(col, num)
        finite = np.isfinite(num.values)
        if not finite.any():
            first = [c for c in self.raw.cells[col] if c][:3]
            raise InputError("objective has no finite numeric values"
                             + (f" (first values: {', '.join(_show(v, 15) for v in first)})"
                                if first else " (all empty)"),
                             path=self.path, column=col,
                             fix="name the column that holds the measured result")
        cells = self.raw.cells[col]
        for i in range(self.n):
            if num.missing[i]:
                reasons[i].append(f"objective '{col}' is empty" if cells[i] == "" else
                                  f"objective '{col}' is missing ('{_show(cells[i])}')")
            elif num.text[i]:
                reasons[i].append(f"objective '{col}' is not a number ('{_show(cells[i])}')")
            elif not finite[i]:
                reasons[i].append(f"objective '{col}' is infinite")
        return num.values

    def _status(self, col, success, reasons) -> np.ndarray:
        text = np.array(self.raw.cells[col], dtype=object)
        folded = np.array([c.lower() for c in text], dtype=object)
        given = success is not None
        good = [str(s).strip().lower() for s in (success or DEFAULT_SUCCESS)]
        good = [g for g in good if g]
        if given and not good:
            raise UsageError("the list of success values is empty",
                             fix="pass --success with at least one value")
        is_ok = np.isin(folded, np.array(good, dtype=object))
        if not is_ok.any():
            found = [v for v, _ in Counter(c for c in text if c).most_common(6)]
            raise InputError(f"no row has a success status ({', '.join(good)}); "
                             f"values found: {', '.join(_show(v, 20) for v in found) or 'none'}",
                             path=self.path, column=col,
                             fix="pass --success with the values that mean success")
        shown = ", ".join(good) if given else "ok, success, done, ..."
        for i in np.flatnonzero(~is_ok):
            val = text[i] or "empty"
            reasons[i].append(f"status '{_show(val)}' is not a success value ({shown})")
        return pd.Series([c if c != "" else None for c in text], dtype=object).to_numpy()

    def _campaign(self, col) -> np.ndarray:
        text = [c if c != "" else "(missing)" for c in self.raw.cells[col]]
        n_missing = sum(c == "" for c in self.raw.cells[col])
        if n_missing:
            self.notes.append(f"{n_missing} rows have no campaign label in '{col}'; "
                              "grouped as '(missing)'")
        return np.array(text, dtype=object)

    def _order(self, col, reasons) -> np.ndarray:
        cells = self.raw.cells[col]
        num = _numeric(cells)
        if num.text.any():
            parsed = self._order_as_time(col, cells, num)
            if parsed is None:
                i = int(np.flatnonzero(num.text)[0])
                raise InputError(f"order value '{_show(cells[i])}' is not a number or a "
                                 "date", path=self.path, row=int(self.raw.lines[i]),
                                 column=col, fix="give the trial order as numbers or dates")
            num = parsed
        for i in np.flatnonzero(~np.isfinite(num.values)):
            reasons[i].append(f"order '{col}' is missing")
        return num.values

    def _order_as_time(self, col, cells, num) -> _NumericColumn | None:
        present = [c for c, m in zip(cells, num.missing) if not m]
        try:
            t = pd.to_datetime(pd.Series(present, dtype=object), errors="coerce",
                               format="mixed")
        except (ValueError, TypeError, OverflowError):
            return None
        if t.isna().any():
            return None
        secs = (t - t.min()).dt.total_seconds().to_numpy(float)
        values = np.full(len(cells), np.nan)
        values[~num.missing] = secs
        self.notes.append(f"order column '{col}' holds dates; ordered by time")
        return _NumericColumn(values, num.missing, np.zeros(len(cells), bool), ".")

    # -- parameter columns -------------------------------------------------------------
    def _declared_kind(self, name) -> str | None:
        if self.given_space is not None:
            return self.given_space[name].kind
        if self.spec is not None and name in self.spec.parameters:
            s = self.spec.parameters[name]
            return s.get("kind") or ("categorical" if "levels" in s else None)
        return None

    def _type_params(self, params, named, base_ok):
        """Typed values for each parameter; drops set-aside columns with a note."""
        typed, kept, space_notes = {}, [], []
        for name in params:
            cells = self.raw.cells[name]
            declared = self._declared_kind(name)
            if declared == "categorical":
                typed[name] = _text_values(cells)
                kept.append(name)
                continue
            num = _numeric(cells)
            n_num = int((~num.missing & ~num.text).sum())
            n_text = int(num.text.sum())
            if n_text == 0 and n_num == 0:
                if name in named or declared is not None:
                    raise InputError("parameter column is empty", path=self.path,
                                     column=name, fix="fill it in or leave it out")
                space_notes.append(f"column '{name}' ignored: empty")
                continue
            if n_text == 0:
                self._record_decimal(name, num)
                typed[name] = num.values
                zeros = [c for c in cells if re.fullmatch(r"[+-]?0\d+", c)]
                if zeros:
                    space_notes.append(f"column '{name}' has numbers with leading zeros "
                                       f"('{_show(zeros[0])}'), read as numbers; declare "
                                       f"[parameters.{name}] kind = \"categorical\" if "
                                       "they are codes")
                if name not in named and _looks_like_counter(num.values):
                    space_notes.append(f"column '{name}' counts up like a trial number; "
                                       "it is read as a parameter: pass it as the order "
                                       "column or leave it out of the parameter list")
            elif n_num >= n_text or declared in ("continuous", "integer"):
                i = int(np.flatnonzero(num.text)[0])
                raise InputError(f"parameter column mixes numbers and text: "
                                 f"'{_show(cells[i])}' among {n_num} numbers",
                                 path=self.path, row=int(self.raw.lines[i]), column=name,
                                 fix="correct the value, leave it empty if unknown, or "
                                     f"declare [parameters.{name}] kind = \"categorical\" "
                                     "in a space file")
            else:
                values = _text_values(cells)
                if name not in named:
                    why = _text_set_aside(values)
                    if why:
                        space_notes.append(f"column '{name}' ignored: {why}; name it in "
                                           "the parameter list to use it")
                        continue
                if self.roles["status"] is None and _looks_like_status(name, values):
                    space_notes.append(f"column '{name}' looks like a run status; it is "
                                       "read as a parameter: pass it as the status column")
                if n_num:
                    space_notes.append(f"column '{name}' is text with {n_num} "
                                       "numeric-looking values; all read as labels")
                typed[name] = values
            kept.append(name)
        kept = self._drop_constant(kept, typed, base_ok, space_notes)
        if self.given_space is None and not kept:
            raise InputError("no parameter columns are left "
                             + ("(" + "; ".join(space_notes) + ")" if space_notes else ""),
                             path=self.path,
                             fix="name the parameter columns with --params")
        return typed, kept, space_notes

    def _drop_constant(self, kept, typed, base_ok, space_notes):
        out = []
        for name in kept:
            declared = (self.given_space is not None or
                        (self.spec is not None and name in self.spec.parameters))
            values = pd.Series(typed[name])[base_ok]
            distinct = values.dropna().unique()
            if len(distinct) <= 1 and not declared:
                shown = _show(distinct[0]) if len(distinct) else "empty"
                space_notes.append(f"parameter '{name}' is constant ({shown}) in the "
                                   "successful trials; dropped")
                continue
            out.append(name)
        return out

    def _record_decimal(self, name, num: _NumericColumn):
        cells = self.raw.cells[name]
        if num.decimal == "," and self.raw.info.get("delimiter") == ",":
            # In a comma-separated file a quoted "1,500" is more likely 1500 than 1.5.
            commas = [i for i, c in enumerate(cells) if "," in c]
            if all(_THOUSANDS.match(cells[i]) for i in commas):
                i = commas[0]
                raise InputError(f"'{_show(cells[i])}' could be a decimal comma or a "
                                 "thousands separator", path=self.path,
                                 row=int(self.raw.lines[i]), column=name,
                                 fix="write numbers without thousands separators")
        self.decimals[name] = num.decimal
        if num.decimal == ",":
            self.notes.append(f"column '{name}' uses decimal commas")
        if any(c.endswith("%") for c in cells):
            self.notes.append(f"column '{name}' has % signs; read as numbers in percent")

    def _parameter_failures(self, frame, kept, reasons):
        counts = Counter()
        for name in kept:
            values = frame[name]
            if pd.api.types.is_numeric_dtype(values.dtype):
                x = values.to_numpy(float)
                for i in np.flatnonzero(np.isnan(x)):
                    reasons[i].append(f"parameter '{name}' is missing")
                    counts[name] += 1
                for i in np.flatnonzero(np.isinf(x)):
                    reasons[i].append(f"parameter '{name}' is infinite")
            else:
                for i in np.flatnonzero(values.isna().to_numpy()):
                    reasons[i].append(f"parameter '{name}' is missing")
                    counts[name] += 1
        for name, k in counts.items():
            if k > self.n // 4:
                self.notes.append(f"parameter '{name}' is missing in {k} rows, which are "
                                  "failed; if it was recorded only in some campaigns, "
                                  "leave it out of the parameter list")

    def _check_enough(self, ok, reasons, objective):
        n_ok = int(ok.sum())
        if n_ok >= MIN_TRIALS:
            return
        kinds = Counter(_reason_kind(p) for r in reasons for p in r)
        why = ", ".join(f"{k} {v}" for k, v in kinds.most_common())
        raise InputError(f"only {n_ok} successful trials of {self.n} rows"
                         + (f" (failed rows by reason: {why})" if why else "")
                         + f"; cross-validation needs at least {MIN_TRIALS}",
                         path=self.path, column=objective,
                         fix=f"add trials until {MIN_TRIALS} have succeeded, or check the "
                             "objective, status and parameter columns")

    def _space(self, frame, ok, kept, space_notes) -> ParameterSpace:
        if self.given_space is not None:
            return self.given_space.with_notes(*space_notes)
        given = dict(self.spec.parameters) if self.spec is not None else {}
        used = frame.loc[ok, kept]
        try:
            space = ParameterSpace.infer(used, kept, given=given,
                                         source_name=(f"space file {Path(self.spec.path).name}"
                                                      if self.spec else "space file"))
        except ValueError as exc:
            raise InputError(str(exc), path=self.spec.path if self.spec else self.path,
                             fix="correct the [parameters] entry") from None
        return space.with_notes(*space_notes)

    def _check_inside(self, frame, space: ParameterSpace):
        if self.given_space is None and self.spec is None:
            return
        for p in space:
            if p.source != "given" and self.given_space is None:
                continue
            values = frame[p.name]
            present = values.notna().to_numpy()
            if p.is_numeric:
                x = pd.to_numeric(values, errors="coerce").to_numpy(float)
                present = present & np.isfinite(x)
            inside = p.contains(values.to_numpy())
            bad = np.flatnonzero(present & ~inside)
            if bad.size:
                i = int(bad[0])
                rule = ("one of " + ", ".join(p.levels[:6]) if p.kind == "categorical"
                        else f"{p.kind} in [{p.low:g}, {p.high:g}]")
                raise InputError(f"value '{_show(values.iloc[i])}' is outside the declared "
                                 f"space ({rule}); {bad.size} rows are", path=self.path,
                                 row=int(self.raw.lines[i]), column=p.name,
                                 fix="widen the bounds or levels in the space file, or "
                                     "correct the value")


def _text_values(cells) -> pd.Series:
    return pd.Series([c if c != "" else None for c in cells], dtype=object)


def _looks_like_counter(x: np.ndarray) -> bool:
    """Whole numbers that step up by one, restarting at 0 or 1 (a run counter)."""
    if len(x) < 4 or not np.all(np.isfinite(x)) or np.any(np.mod(x, 1.0) != 0):
        return False
    steps = np.diff(x)
    restarts = steps != 1
    return bool(x[0] in (0, 1) and np.all(np.isin(x[1:][restarts], (0, 1))))


_STATUS_WORDS = {"ok", "success", "failed", "fail", "error", "done", "completed",
                 "aborted", "crashed", "killed", "timeout"}


def _looks_like_status(name: str, values: pd.Series) -> bool:
    levels = {str(v).strip().lower() for v in values.dropna().unique()}
    return name.lower() in {"status", "outcome", "state", "result"} or \
        len(levels & _STATUS_WORDS) >= 2


def _text_set_aside(values: pd.Series) -> str:
    present = values.dropna()
    if present.empty:
        return "empty"
    n_levels = present.nunique()
    if len(present) >= 3 and n_levels == len(present):
        return "text unique to every row (free-text notes?)"
    if n_levels > _MAX_TEXT_LEVELS:
        return f"text with {n_levels} distinct values, too many for a categorical parameter"
    return ""


def _summary_notes(table: TrialTable) -> list[str]:
    notes = []
    if table.failures:
        kinds = table.failure_reasons()
        notes.append(f"{table.n_failed} of {table.rows_read} trials failed and are left out "
                     "of the fit (reasons: " + ", ".join(f"{k} {v}" for k, v in kinds.items())
                     + (", some rows have several" if sum(kinds.values()) > table.n_failed
                        else "") + ")")
    noise = table.replicate_noise()
    if noise is not None:
        lo, hi = noise["noise_std_interval"]
        notes.append(f"{noise['groups']} settings were repeated ({noise['rows']} trials); "
                     f"pooled noise std {noise['noise_std']:.4g} "
                     f"(95% interval {lo:.3g} to {hi:.3g}, {noise['dof']} degrees of freedom)")
    return notes
