"""Raw reading: a file (CSV, Parquet, Excel) or a DataFrame -> header, text cells and line
numbers; decoding, binary refusal, delimiter sniffing."""

from __future__ import annotations

import codecs
import csv
import hashlib
import io
import math
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError
from ._common import _DELIMITERS, _LINE, _SNIFF_LINES, _show

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


