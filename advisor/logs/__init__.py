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

The package: ``_read`` (file or DataFrame -> text cells and line numbers), ``_common``
(constants, number parsing), ``_build`` (typing columns, failed trials, the space,
notes), ``_table`` (:class:`TrialTable`); ``load_trials`` here joins them.

Replicates
----------
Successful rows with identical settings (numbers compared to 12 significant digits) form
replicate groups; :meth:`TrialTable.replicate_noise` pools them into an estimate of the
observation-noise standard deviation.
"""

from __future__ import annotations

from pathlib import Path
from typing import Sequence

import pandas as pd

from ..errors import UsageError
from ..space import ParameterSpace, SpaceFile, read_space_file
from ._build import _Builder, _choose_params
from ._common import DEFAULT_SUCCESS, MIN_TRIALS, _no_column
from ._read import FRAME_SOURCE, _read_frame, _read_raw, frame_csv_bytes
from ._table import TrialTable, file_sha256

__all__ = ["TrialTable", "load_trials", "MIN_TRIALS", "DEFAULT_SUCCESS", "file_sha256",
           "frame_csv_bytes", "FRAME_SOURCE"]


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
