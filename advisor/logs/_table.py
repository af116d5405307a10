"""The loaded log, :class:`TrialTable`, and the file hash."""

from __future__ import annotations

import hashlib
import math
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..space import ParameterSpace
from ._common import _LINE, _reason_kind, _setting_key

@dataclass
class TrialTable:
    """A loaded trial log.

    Attributes
    ----------
    frame : DataFrame
        Every data row as read, plus ``_line`` (1-based line number in the file, header
        = line 1).  Numeric parameter columns, the objective and the order are floats
        (NaN where missing); categorical parameters, campaign and status are text.
    ok : ndarray of bool
        Successful rows (used for regression).
    space : ParameterSpace
    objective, direction : str
    campaign, order, status : str or None
        Column names, when the log has them.
    source : str or None
        The path read; None for a DataFrame (named :data:`FRAME_SOURCE` in messages).
    sha256 : str
        SHA-256 of the file's bytes (to tie a report to its input); for a DataFrame, of
        its canonical CSV form (:func:`frame_csv_bytes`).
    rows_read : int
        Data rows read (blank rows not counted).
    failures : list of dict
        ``{"line", "campaign", "reason"}`` for each failed row.
    notes : list of str
        What the loader decided on the user's behalf about the file and the rows: how
        it was read, failures, replicates.  Decisions about columns (set aside, dropped
        as constant) are in ``space.notes``; :attr:`all_notes` joins the two.
    units : str
        The objective's unit, when a space file gives it.
    read_info : dict
        ``format``, ``encoding``, ``delimiter``, ``decimal`` (per numeric column).
    """

    frame: pd.DataFrame
    ok: np.ndarray
    space: ParameterSpace
    objective: str
    direction: str = "minimize"
    campaign: str | None = None
    order: str | None = None
    status: str | None = None
    source: str | None = "<memory>"
    sha256: str = ""
    rows_read: int = 0
    failures: list[dict] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    units: str = ""
    read_info: dict = field(default_factory=dict)

    @property
    def all_notes(self) -> list[str]:
        """``notes`` followed by ``space.notes`` (what a report should print)."""
        return list(self.notes) + list(self.space.notes)

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
    def n_failed(self) -> int:
        return int((~self.ok).sum())

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
        """Per campaign, in order of first appearance: trials, failed trials, failure share."""
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

    def failure_reasons(self) -> dict[str, int]:
        """How many failed rows each kind of reason accounts for (a row may count twice)."""
        counts: Counter = Counter()
        for f in self.failures:
            for part in f["reason"].split("; "):
                counts[_reason_kind(part)] += 1
        return dict(counts)

    # -- replicates ---------------------------------------------------------------
    def replicate_groups(self, within_campaign: bool = False) -> list[list[int]]:
        """Line numbers of successful trials that share identical settings.

        Parameters
        ----------
        within_campaign : bool
            Only group rows of the same campaign (use when campaigns may be offset from
            one another, e.g. different material lots).

        Returns
        -------
        list of list of int
            One list per group of two or more rows, in order of first appearance.
        """
        used = self.used
        if self.n_used == 0 or not self.params:
            return []
        keys = [_setting_key(used, p) for p in self.space]
        if within_campaign:
            keys.append(self.groups)
        table = pd.DataFrame({f"k{i}": k for i, k in enumerate(keys)})
        table[_LINE] = used[_LINE].to_numpy()
        out = []
        for _, grp in table.groupby(list(table.columns[:-1]), sort=False):
            if len(grp) >= 2:
                out.append([int(v) for v in grp[_LINE]])
        out.sort(key=lambda g: g[0])
        return out

    def replicate_noise(self, within_campaign: bool = False, level: float = 0.95) -> dict | None:
        r"""Observation-noise std pooled from replicate groups, with a chi-square interval.

        With groups :math:`g = 1..G` of sizes :math:`n_g \ge 2` and objective values
        :math:`y_{gi}` (user's units),

        .. math::

            s_p^2 = \frac{\sum_g \sum_i (y_{gi} - \bar y_g)^2}{\nu},\qquad
            \nu = \sum_g (n_g - 1),

        and, for normal noise, :math:`\nu s_p^2/\sigma^2 \sim \chi^2_\nu`, so a
        ``level`` interval for :math:`\sigma` is
        :math:`\big[\sqrt{\nu s_p^2/\chi^2_{\nu,1-\alpha/2}},\;
        \sqrt{\nu s_p^2/\chi^2_{\nu,\alpha/2}}\big]`, :math:`\alpha = 1 - \text{level}`.

        Returns
        -------
        dict or None
            ``{"groups", "rows", "dof", "noise_std", "noise_std_interval", "level"}``;
            None when no setting was repeated.

        References
        ----------
        .. [1] Montgomery, D. C. (2013). Design and Analysis of Experiments, 8th ed.,
           Wiley: pooled variance of replicates (Sec. 3.3) and the chi-square
           confidence interval for a variance (Sec. 2.4).
        """
        from scipy.stats import chi2

        groups = self.replicate_groups(within_campaign)
        if not groups:
            return None
        y_by_line = dict(zip(self.used[_LINE].astype(int), self.y_raw))
        ss, dof, rows = 0.0, 0, 0
        for g in groups:
            y = np.array([y_by_line[line] for line in g], dtype=float)
            ss += float(np.sum((y - y.mean()) ** 2))
            dof += len(y) - 1
            rows += len(y)
        var = ss / dof
        alpha = 1.0 - level
        lo = math.sqrt(dof * var / chi2.ppf(1 - alpha / 2, dof))
        hi = math.sqrt(dof * var / chi2.ppf(alpha / 2, dof))
        return {"groups": len(groups), "rows": rows, "dof": dof,
                "noise_std": math.sqrt(var), "noise_std_interval": (lo, hi),
                "level": level}


def file_sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


