"""Read a trial log into a :class:`TrialTable`.

A trial log is a table with one row per trial: the parameter settings, the objective,
and optionally the campaign the trial belonged to, its order within the campaign and a
status.  Rows whose objective is missing, non-numeric or infinite, or whose status is
not a success value, are *failed trials*: kept in the table, counted and listed, but
never used for regression.

Everything downstream works in *minimization* form: ``TrialTable.y`` is the objective
times ``sign`` (+1 for minimize, -1 for maximize).
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Sequence

import numpy as np
import pandas as pd

from .errors import InputError, UsageError
from .space import ParameterSpace

__all__ = ["TrialTable", "load_trials", "MIN_TRIALS"]

#: Fewest successful trials an assessment accepts: two folds of at least four points
#: each, so that every fold's metrics are defined.
MIN_TRIALS = 8


@dataclass
class TrialTable:
    """A loaded trial log.

    Attributes
    ----------
    frame : DataFrame
        Every data row as read (original columns, original text for categoricals),
        plus ``_line`` (1-based line number in the file, header = line 1).
    ok : ndarray of bool
        Successful rows (used for regression).
    space : ParameterSpace
    objective, direction : str
    campaign, order, status : str or None
        Column names, when the log has them.
    failures : list of dict
        ``{"line", "campaign", "reason"}`` for each failed row.
    notes : list of str
        What the loader decided on the user's behalf (dropped columns, inferences).
    """

    frame: pd.DataFrame
    ok: np.ndarray
    space: ParameterSpace
    objective: str
    direction: str = "minimize"
    campaign: str | None = None
    order: str | None = None
    status: str | None = None
    source: str = "<memory>"
    sha256: str = ""
    rows_read: int = 0
    failures: list[dict] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    units: str = ""

    # -- views on the successful trials ---------------------------------------------
    @property
    def params(self) -> list[str]:
        return self.space.names

    @property
    def sign(self) -> float:
        return 1.0 if self.direction == "minimize" else -1.0

    @property
    def used(self) -> pd.DataFrame:
        """Successful rows only, index reset to 0..n-1."""
        return self.frame.loc[self.ok].reset_index(drop=True)

    @property
    def n_used(self) -> int:
        return int(self.ok.sum())

    @property
    def y_raw(self) -> np.ndarray:
        """Objective of the successful trials, in the user's units and direction."""
        return pd.to_numeric(self.used[self.objective], errors="coerce").to_numpy(float)

    @property
    def y(self) -> np.ndarray:
        """Objective in minimization form (``sign * y_raw``)."""
        return self.sign * self.y_raw

    @property
    def groups(self) -> np.ndarray:
        """Campaign label of each successful trial (one label ``"all"`` when none)."""
        if self.campaign is None:
            return np.array(["all"] * self.n_used, dtype=object)
        return self.used[self.campaign].astype(str).to_numpy(dtype=object)

    @property
    def order_values(self) -> np.ndarray | None:
        if self.order is None:
            return None
        return pd.to_numeric(self.used[self.order], errors="coerce").to_numpy(float)

    @property
    def n_campaigns(self) -> int:
        return len(pd.unique(self.groups))

    def features(self, encoding: str = "onehot") -> np.ndarray:
        """Encoded parameter matrix of the successful trials."""
        return self.space.encode(self.used, encoding)

    def campaign_summary(self) -> list[dict]:
        """Per campaign: trials, failed trials and failure share."""
        labels = (self.frame[self.campaign].astype(str) if self.campaign is not None
                  else pd.Series(["all"] * len(self.frame), index=self.frame.index))
        out = []
        for name in pd.unique(labels):
            mask = (labels == name).to_numpy()
            n = int(mask.sum())
            failed = int((mask & ~self.ok).sum())
            out.append({"campaign": str(name), "trials": n, "failed": failed,
                        "failure_share": failed / n if n else 0.0})
        return out


def file_sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def load_trials(path, objective: str, direction: str = "minimize",
                params: Sequence[str] | None = None, campaign: str | None = None,
                order: str | None = None, status: str | None = None,
                success: Sequence[str] | None = None, space=None) -> TrialTable:
    """Read a trial log (CSV) into a :class:`TrialTable`.

    Parameters
    ----------
    path : str or Path
        The log.  Never modified.
    objective : str
        Column holding the measured objective.
    direction : {"minimize", "maximize"}
    params : sequence of str, optional
        Parameter columns; default every column that is not the objective, campaign,
        order or status.
    campaign, order, status : str, optional
        Columns naming the campaign, the trial order within it, and the run status.
    success : sequence of str, optional
        Status values that mean success (default ``ok``, ``success``, ``done``,
        ``completed``, case-insensitive).
    space : ParameterSpace or path, optional
        Overrides the inferred space.

    Raises
    ------
    InputError
        When the file cannot be read as a trial log; the message says where and how to fix.
    """
    if direction not in ("minimize", "maximize"):
        raise UsageError(f"direction must be 'minimize' or 'maximize', not {direction!r}")
    path = Path(path)
    if not path.exists():
        raise InputError("file does not exist", path=path, fix="check the path")
    if path.is_dir():
        raise InputError("is a folder, not a trial log", path=path, fix="name a CSV file")
    try:
        frame = pd.read_csv(path, sep=None, engine="python", encoding="utf-8-sig")
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read as CSV ({exc})", path=path,
                         fix="save the log as UTF-8 CSV with a header row") from None
    frame.columns = [str(c).strip() for c in frame.columns]
    named = {"objective": objective, "campaign": campaign, "order": order, "status": status}
    for role, col in named.items():
        if col is not None and col not in frame.columns:
            raise InputError(f"no {role} column '{col}'; columns are: "
                             + ", ".join(frame.columns), path=path, column=col,
                             fix="pass one of the listed column names")
    reserved = {c for c in named.values() if c is not None}
    if params is None:
        params = [c for c in frame.columns if c not in reserved]
    params = list(params)
    for col in params:
        if col not in frame.columns:
            raise InputError("no such parameter column; columns are: " + ", ".join(frame.columns),
                             path=path, column=col, fix="pass one of the listed column names")
    frame = frame.copy()
    frame["_line"] = np.arange(len(frame)) + 2
    y = pd.to_numeric(frame[objective], errors="coerce").to_numpy(float)
    ok = np.isfinite(y)
    reasons = np.where(ok, "", "objective missing, non-numeric or infinite")
    if status is not None:
        good = {s.lower() for s in (success or ("ok", "success", "done", "completed"))}
        st_ok = frame[status].astype(str).str.strip().str.lower().isin(good).to_numpy()
        reasons = np.where(~st_ok, f"status not in {sorted(good)}", reasons)
        ok &= st_ok
    if ok.sum() < MIN_TRIALS:
        raise InputError(f"only {int(ok.sum())} successful trials; at least {MIN_TRIALS} "
                         "are needed for cross-validation", path=path, column=objective,
                         fix="add trials or check the objective column")
    space_obj = space if isinstance(space, ParameterSpace) else \
        ParameterSpace.infer(frame.loc[ok], params)
    failures = [{"line": int(frame["_line"].iloc[i]),
                 "campaign": None if campaign is None else str(frame[campaign].iloc[i]),
                 "reason": str(reasons[i])} for i in np.flatnonzero(~ok)]
    return TrialTable(frame=frame, ok=ok, space=space_obj, objective=objective,
                      direction=direction, campaign=campaign, order=order, status=status,
                      source=str(path), sha256=file_sha256(path), rows_read=len(frame),
                      failures=failures)
