"""Read a trial log into a :class:`TrialTable`.

A trial log is a table with one row per trial: the parameter settings, the objective,
and optionally the campaign the trial belonged to, its order within the campaign and a
status.  Everything downstream works in *minimization* form: ``TrialTable.y`` is the
objective times ``sign`` (+1 for minimize, -1 for maximize).

Files
-----
* CSV (any other extension): UTF-8 with or without BOM (UTF-16 with a BOM is also
  read); delimiter sniffed among ``,`` ``;`` and tab; CRLF or LF; quoted fields; blank
  lines and all-empty rows skipped.  Text that is not valid UTF-8 is read as Windows-1252
  (what spreadsheet programs on Windows write) *with a note* naming the first line that
  is not UTF-8, so accented labels that look wrong can be traced; bytes that are not
  Windows-1252 either are refused with a fix (re-save as UTF-8).
* Parquet (``.parquet``, pyarrow) and Excel (``.xlsx``/``.xlsm``, openpyxl, first
  sheet) through pandas; a missing engine is an :class:`InputError` telling to
  ``pip install 'advisor[files]'``.  For those, "line" means the row number a
  spreadsheet shows (header = line 1).

The input is read once, as bytes, and never written.

Typing columns
--------------
* A column is numeric when every non-missing cell is a number (a trailing ``%`` is
  allowed and dropped).  A column's decimal separator is decided per column: ``1,5``
  (and no ``1.5`` in the same column) reads as 1.5; in a comma-separated file a column
  whose only commas look like thousands separators (``"1,500"``) is refused as
  ambiguous.  Missing markers in numeric columns: empty, ``NA``, ``N/A``, ``NaN``,
  ``null``, ``None``, ``-``, ``?``, ``#N/A``, ``missing``.  In text columns only an
  empty cell is missing, so a level such as ``none`` survives.  Numbers with leading
  zeros (``007``) are read as numbers with a note (declare them categorical if codes).
* Lines starting with ``#`` above the header are skipped with a note.
* A parameter column mixing numbers and text is never silently categorical: when most
  cells are numbers it is an error naming the first text cell's line; when most are text
  it is categorical and the note says how many numeric-looking labels it has.

Failed trials
-------------
A row is a failed trial, kept in :attr:`TrialTable.frame` but excluded from regression,
counted and listed in :attr:`TrialTable.failures` (``{"line", "campaign", "reason"}``),
when any of these holds (all that apply are joined in the reason):

* the status column is given and its value is not a success value;
* the objective is empty, not a number or infinite;
* a parameter value is missing or infinite (the reason names the column) -- a trial
  whose setting is unknown cannot be placed in the space; when a parameter was only
  recorded in some campaigns, leave it out with ``params``;
* the order value is missing (its place in the campaign is unknown).

Inferred bounds and levels are those of the *successful* trials: the region the
surrogates have data for.  (A learning rate that always diverged widens nothing.)

Columns the loader sets aside, each with a note: a parameter that is constant over the
successful trials (nothing to learn from it; a space-file declaration keeps it); a text
column whose values are unique per row (free-text notes) or have more than
``_MAX_TEXT_LEVELS`` levels; an unnamed first column holding the row index (pandas
``to_csv`` default); an unnamed column that is empty (trailing delimiters).  A column
named in ``params`` is never set aside for being text.

Replicates
----------
Successful rows with identical settings (numbers compared to 12 significant digits) form
replicate groups; :meth:`TrialTable.replicate_noise` pools them into an estimate of the
observation-noise standard deviation.
"""

from __future__ import annotations

import codecs
import csv
import difflib
import hashlib
import io
import math
import re
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import Sequence

import numpy as np
import pandas as pd

from .errors import InputError, UsageError
from .space import ParameterSpace, SpaceFile, read_space_file

__all__ = ["TrialTable", "load_trials", "MIN_TRIALS", "DEFAULT_SUCCESS", "file_sha256",
           "frame_csv_bytes", "FRAME_SOURCE"]

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


#: How messages name a DataFrame given to :func:`load_trials` in place of a file.
FRAME_SOURCE = "<DataFrame>"


def frame_csv_bytes(frame: pd.DataFrame) -> bytes:
    """The canonical CSV form of a DataFrame, which :func:`load_trials` reads and hashes.

    ``frame.to_csv(index=False, lineterminator="\\n")`` in UTF-8 (pandas writes floats
    by their shortest round-trip repr, so no digit is lost); a named index (or any
    MultiIndex) is kept as leading columns.  A DataFrame saved with
    ``frame.to_csv(path, index=False)`` on a POSIX system therefore gives a file whose
    SHA-256, and every result, equal those of the DataFrame itself.
    """
    if isinstance(frame.index, pd.MultiIndex) or frame.index.name is not None:
        frame = frame.reset_index()
    return frame.to_csv(index=False, lineterminator="\n").encode("utf-8")


def _read_frame(frame: pd.DataFrame) -> _Raw:
    # Through the CSV reader, byte for byte as from a file, so that a DataFrame and its
    # saved CSV are read (missing tokens, decimals, notes) the same way.
    path = Path(FRAME_SOURCE)
    data = frame_csv_bytes(frame)
    header, rows, lines, notes, info = _read_csv(path, data)
    header_line = info.pop("header_line", 1)
    info["format"] = "dataframe"
    return _assemble(path, header, rows, lines, hashlib.sha256(data).hexdigest(), notes,
                     info, header_line)


# ======================================================================================
# load_trials
# ======================================================================================
def load_trials(path, objective: str | None = None, direction: str | None = None,
                params: Sequence[str] | None = None, campaign: str | None = None,
                order: str | None = None, status: str | None = None,
                success: Sequence[str] | None = None, space=None) -> TrialTable:
    """Read a trial log (CSV, Parquet or Excel) into a :class:`TrialTable`.

    Parameters
    ----------
    path : str, Path or pandas.DataFrame
        The log, never modified; or a DataFrame holding it (one row per trial), read as
        its canonical CSV form (:func:`frame_csv_bytes`): line numbers in messages
        count the header as line 1, so the DataFrame's first row is line 2.
    objective : str, optional
        Column holding the measured objective; may be left out when the space file names
        it.
    direction : {"minimize", "maximize"}, optional
        None (default) takes the space file's direction, else ``"minimize"``.  An explicit
        value that contradicts the space file is a :class:`UsageError`.
    params : sequence of str, optional
        Parameter columns; default every column that is not the objective, campaign,
        order or status and is not set aside (see the module docstring).
    campaign, order, status : str, optional
        Columns naming the campaign, the trial order within it, and the run status.
    success : sequence of str, optional
        Status values that mean success (default :data:`DEFAULT_SUCCESS`,
        case-insensitive).
    space : ParameterSpace, str or Path, optional
        A ready space (its parameters are the parameter columns) or a TOML space file
        (schema in :mod:`advisor.space`).

    Raises
    ------
    InputError
        When the file cannot be read as a trial log; the message names the file, the
        line or column where it applies, and a fix.
    UsageError
        When the arguments contradict each other or the space file.
    """
    # Header names are stripped when read, so stray spaces in a name given here are too.
    objective, campaign, order, status = (None if c is None else str(c).strip()
                                          for c in (objective, campaign, order, status))
    spec, given_space = _resolve_space_arg(space)
    objective, direction, units = _resolve_objective(objective, direction, spec)
    if isinstance(path, pd.DataFrame):
        raw, path, source = _read_frame(path), Path(FRAME_SOURCE), None
    else:
        path = Path(path)
        raw, source = _read_raw(path), str(path)
    columns = raw.header
    roles = {"objective": objective, "campaign": campaign, "order": order,
             "status": status}
    _check_roles(roles, columns, path)
    reserved = {c for c in roles.values() if c is not None}
    params, named, notes = _choose_params(raw, params, reserved, spec, given_space, path)
    builder = _Builder(raw, path, roles, given_space, spec)
    table = builder.build(params, named, direction, success, units, notes)
    table.source = source
    return table


def _resolve_space_arg(space):
    if space is None:
        return None, None
    if isinstance(space, ParameterSpace):
        return None, space
    if isinstance(space, SpaceFile):
        return space, None
    if isinstance(space, (str, Path)):
        return read_space_file(space), None
    raise UsageError(f"space must be a ParameterSpace or a path to a TOML file, "
                     f"not {type(space).__name__}")


def _resolve_objective(objective, direction, spec: SpaceFile | None):
    if direction not in (None, "minimize", "maximize"):
        raise UsageError(f"direction must be 'minimize' or 'maximize', not {direction!r}")
    file_obj = spec.objective if spec else None
    if objective is not None and file_obj is not None and objective != file_obj:
        raise UsageError(f"the objective is '{objective}' but space file {spec.path} names "
                         f"'{file_obj}'", fix="make them agree or drop one")
    objective = objective if objective is not None else file_obj
    if objective is None:
        raise UsageError("no objective column given",
                         fix="pass --objective COLUMN (or name it in the space file)")
    file_dir = spec.direction if spec else None
    if direction is not None and file_dir is not None and direction != file_dir:
        raise UsageError(f"direction '{direction}' was requested but space file "
                         f"{spec.path} says direction = \"{file_dir}\"",
                         fix="drop the flag or change the space file")
    direction = direction or file_dir or "minimize"
    return objective, direction, (spec.unit if spec else "")


def _check_roles(roles, columns, path):
    seen = {}
    for role, col in roles.items():
        if col is None:
            continue
        if col in seen:
            raise UsageError(f"column '{col}' is given as both {seen[col]} and {role}",
                             fix="give each role its own column")
        seen[col] = role
        if col not in columns:
            raise _no_column(role, col, columns, path)


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


# ======================================================================================
# raw reading: file -> header + text cells + line numbers
# ======================================================================================
@dataclass
class _Raw:
    header: list[str]
    cells: dict[str, list[str]]
    lines: np.ndarray
    sha256: str
    notes: list[str]
    info: dict
    header_line: int = 1


def _read_raw(path: Path) -> _Raw:
    if not path.exists():
        raise InputError("file does not exist", path=path, fix="check the path")
    if path.is_dir():
        raise InputError("is a folder, not a trial log", path=path,
                         fix="name a CSV, Parquet or Excel file inside it")
    if not path.is_file():
        raise InputError("is not a regular file", path=path, fix="name a CSV file")
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise InputError(f"cannot be read ({exc.strerror})", path=path,
                         fix="check the file's permissions") from None
    sha = hashlib.sha256(data).hexdigest()
    suffix = path.suffix.lower()
    if suffix == ".parquet":
        header, rows, lines, notes, info = _read_with_pandas(path, data, "parquet")
    elif suffix in (".xlsx", ".xlsm"):
        header, rows, lines, notes, info = _read_with_pandas(path, data, "excel")
    elif suffix == ".xls":
        raise InputError("old-style .xls workbooks are not read", path=path,
                         fix="save it as .xlsx or CSV")
    else:
        header, rows, lines, notes, info = _read_csv(path, data)
    header_line = info.pop("header_line", 1)
    return _assemble(path, header, rows, lines, sha, notes, info, header_line)


def _decode(path: Path, data: bytes) -> tuple[str, str, list[str]]:
    """Bytes → text, encoding name, notes; refuses binary content."""
    if data.startswith(codecs.BOM_UTF16_LE) or data.startswith(codecs.BOM_UTF16_BE):
        try:
            return data.decode("utf-16"), "utf-16", ["read as UTF-16 text (it has a "
                                                     "UTF-16 byte-order mark)"]
        except UnicodeDecodeError:
            raise InputError("starts like UTF-16 text but does not decode", path=path,
                             fix="re-save the log as UTF-8 CSV") from None
    _refuse_binary(path, data)
    try:
        return data.decode("utf-8-sig"), "utf-8", []
    except UnicodeDecodeError as exc:
        line = data[:exc.start].count(b"\n") + 1
    try:
        text = data.decode("cp1252")
    except UnicodeDecodeError as exc:
        bad_line = data[:exc.start].count(b"\n") + 1
        raise InputError("is neither UTF-8 nor Windows-1252 text", path=path, row=bad_line,
                         fix="re-save the log as UTF-8 CSV") from None
    return text, "cp1252", [f"not valid UTF-8 (first at line {line}); read as "
                            "Windows-1252, re-save as UTF-8 if any label looks wrong"]


_MAGIC = [(b"PK\x03\x04", "a zip archive (an .xlsx workbook?)",
           "give it the .xlsx extension or export CSV"),
          (b"PAR1", "a Parquet file", "give it the .parquet extension"),
          (b"\xd0\xcf\x11\xe0", "an old-style Office file (.xls?)", "save it as .xlsx or CSV"),
          (b"%PDF", "a PDF document", "export the trial table as CSV"),
          (b"\x89PNG", "a PNG image", "export the trial table as CSV"),
          (b"\x1f\x8b", "gzip-compressed", "decompress it first")]


def _refuse_binary(path: Path, data: bytes) -> None:
    for magic, what, fix in _MAGIC:
        if data.startswith(magic):
            raise InputError(f"is {what}, not CSV text", path=path, fix=fix)
    head = data[:1 << 16]
    # Text never holds NUL; a sprinkling of other control bytes is the other tell.
    controls = sum(1 for b in head if b < 32 and b not in (9, 10, 12, 13))
    if b"\x00" in head or (head and controls > 0.05 * len(head)):
        raise InputError("holds binary data, not CSV text", path=path,
                         fix="export the trial table as CSV (UTF-8)")


def _read_csv(path: Path, data: bytes):
    text, encoding, notes = _decode(path, data)
    if not text.strip():
        raise InputError("is empty", path=path,
                         fix="write a header row and one row per trial")
    text, n_comments = _drop_leading_comments(text)
    if n_comments:
        notes = notes + [f"skipped {n_comments} comment lines (starting with #) above "
                         "the header"]
    delimiter = _sniff_delimiter(text)
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter,
                        skipinitialspace=True, strict=False)
    rows, lines = [], []
    prev = n_comments
    try:
        for row in reader:
            start = prev + 1
            prev = n_comments + reader.line_num
            if not row or all(not c.strip() for c in row):
                continue
            rows.append(row)
            lines.append(start)
    except csv.Error as exc:
        raise InputError(f"cannot be split into fields ({exc})", path=path,
                         row=prev + 1, fix="check the quoting on that line") from None
    if not rows:
        raise InputError("is empty", path=path,
                         fix="write a header row and one row per trial")
    info = {"format": "csv", "encoding": encoding,
            "delimiter": {"\t": "tab"}.get(delimiter, delimiter),
            "header_line": lines[0]}
    return rows[0], rows[1:], lines[1:], notes, info


def _drop_leading_comments(text: str) -> tuple[str, int]:
    """Remove ``#`` lines (and blank lines) above the header; count removed lines."""
    lines = text.splitlines(keepends=True)
    k = 0
    while k < len(lines) and (lines[k].lstrip().startswith("#") or not lines[k].strip()):
        k += 1
    if not any(ln.lstrip().startswith("#") for ln in lines[:k]):
        return text, 0
    return "".join(lines[k:]), k


def _sniff_delimiter(text: str) -> str:
    """Pick the delimiter that splits the first lines into the same number (> 1) of fields.

    Hand-written because ``csv.Sniffer`` guesses among all punctuation and picks ``.``
    or ``,`` inside decimal-comma files; we know the three candidates.
    """
    sample = [ln for ln in text.splitlines()[:_SNIFF_LINES] if ln.strip()]
    best, best_score = ",", None
    for d in _DELIMITERS:
        counts = [len(r) for r in csv.reader(sample, delimiter=d, skipinitialspace=True)]
        if not counts:
            continue
        n_head = counts[0]
        consistent = sum(c == n_head for c in counts) / len(counts)
        score = (n_head > 1 and consistent == 1.0, n_head > 1, consistent, n_head)
        if best_score is None or score > best_score:
            best, best_score = d, score
    return best


def _read_with_pandas(path: Path, data: bytes, kind: str):
    try:
        if kind == "parquet":
            frame = pd.read_parquet(io.BytesIO(data))
            header = [str(c) for c in frame.columns]
            rows = [[_cell_text(v) for v in row] for row in frame.itertuples(index=False)]
            lines = list(range(2, len(rows) + 2))
            hdr_line = 1
        else:
            frame = pd.read_excel(io.BytesIO(data), header=None, dtype=object,
                                  engine="openpyxl", sheet_name=0)
            values = [[_cell_text(v) for v in row] for row in frame.itertuples(index=False)]
            keep = [i for i, r in enumerate(values) if any(c.strip() for c in r)]
            if not keep:
                raise InputError("the first sheet is empty", path=path,
                                 fix="put the trial table on the first sheet")
            hdr = keep[0]
            header = values[hdr]
            rows = [values[i] for i in keep[1:]]
            lines = [i + 1 for i in keep[1:]]
            hdr_line = hdr + 1
    except ImportError as exc:
        raise InputError(f"reading {kind} files needs an optional package ({exc})",
                         path=path, fix="pip install 'advisor[files]'") from None
    except InputError:
        raise
    except Exception as exc:  # the engines raise many types for a damaged file
        raise InputError(f"cannot be read as {kind} ({type(exc).__name__}: "
                         f"{_show(str(exc), 80)})", path=path,
                         fix=f"check that it is a valid {kind} file, or export CSV") from None
    if not header:
        raise InputError("has no columns", path=path, fix="write a header row")
    info = {"format": kind, "encoding": "binary", "delimiter": None,
            "header_line": hdr_line}
    return header, rows, lines, [], info


def _cell_text(v) -> str:
    if v is None or (isinstance(v, float) and math.isnan(v)) or v is pd.NaT:
        return ""
    if isinstance(v, (bool, np.bool_)):
        return "True" if v else "False"
    if isinstance(v, (float, np.floating)):
        f = float(v)
        if f.is_integer() and abs(f) < 1e15:
            return str(int(f))
        return repr(f)
    try:
        if pd.isna(v):
            return ""
    except (TypeError, ValueError):
        pass
    return str(v)


def _assemble(path, header, rows, lines, sha, notes, info, header_line) -> _Raw:
    header = [str(h).strip() for h in header]
    n_cols = len(header)
    notes = list(notes)
    if n_cols < 2:
        raise InputError(f"has a single column ('{_show(header[0] if header else '')}'); "
                         "a trial log needs parameter columns and an objective",
                         path=path, row=header_line,
                         fix="separate columns with ',', ';' or tab")
    extra_ok = 0
    for row, line in zip(rows, lines):
        if len(row) > n_cols and all(not c.strip() for c in row[n_cols:]):
            extra_ok += 1
            del row[n_cols:]
        if len(row) != n_cols:
            sep = info.get("delimiter")
            fix = (f"quote values that contain the delimiter '{sep}' and give every row "
                   f"{n_cols} values" if sep else f"give every row {n_cols} values")
            raise InputError(f"row has {len(row)} fields but the header has {n_cols}",
                             path=path, row=line, fix=fix)
    if extra_ok:
        notes.append(f"{extra_ok} rows end with empty extra fields; ignored")
    if not rows:
        raise InputError("has a header but no data rows", path=path, row=header_line,
                         fix="add one row per trial below the header")
    cells = {}
    unnamed = []
    for j, name in enumerate(header):
        col = [row[j].strip() for row in rows]
        if name == "":
            unnamed.append((j, col))
            continue
        if name in cells:
            first = header.index(name) + 1
            raise InputError(f"column name '{name}' appears twice in the header "
                             f"(columns {first} and {j + 1})", path=path, row=header_line,
                             column=name, fix="rename one of them")
        cells[name] = col
    for j, col in unnamed:
        if all(c == "" for c in col):
            notes.append(f"column {j + 1} has no name and no values; ignored")
        elif j == 0 and _is_row_index(col):
            notes.append("unnamed first column holds row numbers (a saved index); ignored")
        else:
            raise InputError(f"column {j + 1} has values but no name in the header",
                             path=path, row=header_line, fix="give every column a name")
    if _LINE in cells:
        raise InputError(f"column name '{_LINE}' is reserved", path=path,
                         column=_LINE, fix="rename that column")
    header = [h for h in header if h != ""]
    return _Raw(header=header, cells=cells, lines=np.asarray(lines, dtype=int), sha256=sha,
                notes=notes, info=info, header_line=header_line)


def _is_row_index(col) -> bool:
    if not all(re.fullmatch(r"\d+", c) for c in col):
        return False
    v = [int(c) for c in col]
    return v == list(range(v[0], v[0] + len(v))) and v[0] in (0, 1)


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
