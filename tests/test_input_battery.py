"""A battery of malformed and messy trial logs, each with its expected outcome.

Refusals run through the real command line (``advisor.cli.main``) and must exit 2 with
exactly one stderr line starting ``error:`` that names the file (and the line or column
where one applies), leave the input's bytes unchanged and write nothing into ``--out``.
Messy-but-readable logs must load (checked through :func:`advisor.logs.load_trials`,
which is fast) and, in the ``slow`` test at the bottom, also run end to end through the
command line.

The expected outcomes are the loader's documented rules (``advisor/logs.py`` module
docstring); what counts as a clean refusal follows common practice for command-line
tools (one actionable message, exit status 2, no partial output).
"""

from __future__ import annotations

import codecs
import hashlib
import io
import zipfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd
import pytest

from advisor import cli
from advisor.logs import MIN_TRIALS, load_trials

# ----------------------------------------------------------------------------- helpers


def _rows(n=12, seed=0):
    """A small valid log as a list of rows (header first): two numbers, a label, y."""
    rng = np.random.default_rng(seed)
    rows = [["x1", "x2", "cat", "y"]]
    for i in range(n):
        x1 = round(float(rng.uniform(0, 1)), 3)
        x2 = int(rng.integers(1, 5))
        cat = ["A1", "B2"][i % 2]
        y = round(x1 ** 2 + 0.1 * x2 + (0.3 if cat == "B2" else 0.0), 4)
        rows.append([str(x1), str(x2), cat, str(y)])
    return rows


def _csv(rows, sep=",", eol="\n", decimal=".", quote_numbers=False) -> str:
    out = []
    for k, row in enumerate(rows):
        cells = []
        for c in row:
            if k and decimal != ".":
                c = c.replace(".", decimal)
            if k and quote_numbers and c[:1].isdigit():
                c = f'"{c}"'
            cells.append(c)
        out.append(sep.join(cells))
    return eol.join(out) + eol


def _good(**kw) -> bytes:
    return _csv(_rows(), **kw).encode()


def _with_row(rows, i, row):
    rows = [list(r) for r in rows]
    rows[i] = row
    return rows


def _parquet_bytes(frame: pd.DataFrame) -> bytes:
    buf = io.BytesIO()
    frame.to_parquet(buf, index=False)
    return buf.getvalue()


def _xlsx_bytes(frame: pd.DataFrame) -> bytes:
    buf = io.BytesIO()
    frame.to_excel(buf, index=False, engine="openpyxl")
    return buf.getvalue()


def _frame() -> pd.DataFrame:
    rows = _rows()
    df = pd.DataFrame(rows[1:], columns=rows[0])
    for c in ("x1", "y"):
        df[c] = df[c].astype(float)
    df["x2"] = df["x2"].astype(int)
    return df


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest() if path.is_file() else ""


@dataclass
class Case:
    name: str
    content: bytes | None               # None: the path is not created
    args: list[str] = field(default_factory=list)   # after LOG; {dir} is the tmp folder
    filename: str = "log.csv"
    expect: str = "refuse"              # "refuse" or "ok"
    says: tuple[str, ...] = ()          # substrings of the error line (case-insensitive)
    names: str = "log"                  # which file the error must name: log/space/out
    space: str | None = None            # TOML text written to space.toml
    check: Callable | None = None       # for "ok": check(table)
    make_dir: bool = False              # create a folder at the log path


OBJ = ["--objective", "y"]


# ------------------------------------------------------------------------------- cases
def _refusals() -> list[Case]:
    rows = _rows()
    few = _csv(rows[:MIN_TRIALS]).encode()          # MIN_TRIALS - 1 data rows
    failed_status = _csv([rows[0] + ["status"]] + [r + ["ok" if i < 5 else "crashed"]
                                                   for i, r in enumerate(rows[1:])])
    cp_bad = _good().replace(b"A1", b"A\x81\x8d", 1)
    zipped = io.BytesIO()
    with zipfile.ZipFile(zipped, "w") as zf:
        zf.writestr("a.txt", "hello")
    return [
        Case("missing path", None, OBJ, says=("does not exist",)),
        Case("a folder", None, OBJ, make_dir=True, says=("folder",)),
        Case("empty file", b"", OBJ, says=("empty",)),
        Case("only whitespace", b"  \n\n \r\n", OBJ, says=("empty",)),
        Case("header only", b"x1,x2,y\n", OBJ, says=("no data rows", "line 1")),
        Case("header then blank lines", b"x1,x2,y\n\n\n", OBJ, says=("no data rows",)),
        Case("ragged row", _csv(_with_row(rows, 4, ["0.5", "2", "A1", "0.3", "9"])).encode(),
             OBJ, says=("line 5", "5 fields", "header has 4")),
        Case("short row", _csv(_with_row(rows, 7, ["0.5", "2"])).encode(), OBJ,
             says=("line 8", "2 fields")),
        Case("duplicate column names", _csv([["x1", "x1", "cat", "y"]] + rows[1:]).encode(),
             OBJ, says=("appears twice", "line 1", "x1")),
        Case("objective typo", _good(), ["--objective", "Y "],
             says=("no objective column", "did you mean 'y'", "x1, x2, cat, y")),
        Case("objective near name", _good(), ["--objective", "yy"],
             says=("did you mean 'y'",)),
        Case("campaign missing", _good(), OBJ + ["--campaign", "lot"],
             says=("no campaign column 'lot'",)),
        Case("order missing", _good(), OBJ + ["--order", "run"], says=("no order column",)),
        Case("status missing", _good(), OBJ + ["--status", "outcome"],
             says=("no status column",)),
        Case("parameter missing", _good(), OBJ + ["--params", "x_1,x2"],
             says=("no parameter column 'x_1'", "did you mean 'x1'")),
        Case("constant objective", _csv([r[:3] + ["1.5"] if i else r
                                         for i, r in enumerate(rows)]).encode(), OBJ,
             says=("objective is constant", "column 'y'")),
        Case("objective not numeric", _csv([r[:3] + ["high"] if i else r
                                            for i, r in enumerate(rows)]).encode(), OBJ,
             says=("no finite numeric values", "column 'y'")),
        Case("too few trials", few, OBJ,
             says=(f"only {MIN_TRIALS - 1} successful", f"at least {MIN_TRIALS}")),
        Case("too few after status", failed_status.encode(),
             OBJ + ["--status", "status", "--success", "ok"],
             says=("only 5 successful", "status 7")),
        Case("no success value matches", failed_status.encode(),
             OBJ + ["--status", "status", "--success", "finished"],
             says=("no row has a success status", "values found", "crashed")),
        Case("binary content", bytes(range(256)) * 8, OBJ, says=("binary",)),
        Case("zip renamed to csv", zipped.getvalue(), OBJ, says=("zip", ".xlsx")),
        Case("parquet renamed to csv", _parquet_bytes(_frame()), OBJ, says=("parquet",)),
        Case("neither utf-8 nor cp1252", cp_bad, OBJ, says=("utf-8", "line 2")),
        Case("numbers mixed with text", _csv(_with_row(rows, 6, ["0.4", "two", "A1", "0.2"]))
             .encode(), OBJ, says=("mixes numbers and text", "line 7", "column 'x2'", "two")),
        Case("unnamed column with values", _csv([["x1", "", "cat", "y"]] + rows[1:]).encode(),
             OBJ, says=("no name", "line 1")),
        Case("single column", b"y\n1\n2\n3\n4\n5\n6\n7\n8\n9\n", OBJ, says=("single column",)),
        Case("order not a number or date",
             _csv([rows[0] + ["run"]] + [r + ["fifth" if i == 4 else str(i + 1)]
                                         for i, r in enumerate(rows[1:])]).encode(),
             OBJ + ["--order", "run"], says=("fifth", "line 6", "column 'run'")),
        Case("thousands separator or decimal comma?",
             _csv([r[:1] + [f'"1,{i:03d}"'] + r[2:] if i else r
                   for i, r in enumerate(rows)]).encode(), OBJ,
             says=("'1,001'", "thousands separator", "line 2", "column 'x2'")),
        Case("ragged row below comment lines",
             b"# exported by the rig\n# units: SI\n" +
             _csv(_with_row(rows, 2, ["0.5", "2"])).encode(), OBJ,
             says=("line 5", "2 fields")),
        Case("old xls", b"\xd0\xcf\x11\xe0" + b"\x00" * 100, OBJ, filename="log.xls",
             says=(".xls",)),
        Case("text saved as xlsx", _good(), OBJ, filename="log.xlsx",
             says=("cannot be read as excel",)),
        Case("damaged parquet", b"PAR1" + b"garbage" * 20, OBJ, filename="log.parquet",
             says=("cannot be read as parquet",)),
        Case("space file missing", _good(), OBJ + ["--space", "{dir}/nope.toml"],
             names="nope", says=("space file does not exist",)),
        Case("space file unknown key", _good(), OBJ + ["--space", "{dir}/space.toml"],
             space="[parameters.x1]\nkind = 'continuous'\nhigth = 2\n", names="space",
             says=("unknown", "higth", "did you mean 'high'")),
        Case("space file bad toml", _good(), OBJ + ["--space", "{dir}/space.toml"],
             space="[parameters.x1\n", names="space", says=("not valid toml",)),
        Case("space direction conflicts with flag", _good(),
             OBJ + ["--maximize", "--space", "{dir}/space.toml"],
             space="[objective]\ndirection = 'minimize'\n", names="space",
             says=("maximize", "minimize")),
        Case("value outside declared bounds", _good(), OBJ + ["--space", "{dir}/space.toml"],
             space="[parameters.x2]\nkind = 'integer'\nlow = 1\nhigh = 2\n",
             says=("outside the declared space", "column 'x2'", "line ")),
        Case("level not declared", _good(), OBJ + ["--space", "{dir}/space.toml"],
             space="[parameters.cat]\nlevels = ['A1']\n",
             says=("outside the declared space", "column 'cat'", "line 3")),
        Case("space names a column that does not exist", _good(),
             OBJ + ["--space", "{dir}/space.toml"],
             space="[parameters.x9]\nlow = 0\n", names="space",
             says=("'x9'", "did you mean")),
        Case("out is a file", _good(), OBJ + ["--out", "{dir}/log.csv"],
             names="out", says=("output path is a file",)),
        Case("out below a file", _good(), OBJ + ["--out", "{dir}/log.csv/sub"],
             names="out", says=("output",)),
    ]


def _ok_cases() -> list[Case]:
    rows = _rows()
    lines_missing = _csv(_with_row(_with_row(rows, 3, ["", "2", "A1", "0.4"]),
                                   5, ["0.2", "3", "B2", "diverged"]))
    status_rows = _csv([rows[0] + ["outcome"]] + [r + (["OK"] if i % 4 else ["crashed"])
                                                  for i, r in enumerate(rows[1:])])
    notes_rows = _csv([rows[0] + ["notes"]] + [r + [f"run {i}: fine"]
                                               for i, r in enumerate(rows[1:])])
    const_rows = _csv([rows[0] + ["machine"]] + [r + ["M7"] for r in rows[1:]])
    idx_rows = _csv([[""] + rows[0]] + [[str(i)] + r for i, r in enumerate(rows[1:])])
    trailing = _csv([r + [""] for r in rows])
    yes_no = _csv([rows[0] + ["coated"]] + [r + ["yes" if i % 3 else "no"]
                                            for i, r in enumerate(rows[1:])])
    date_rows = _csv([rows[0] + ["when"]] + [r + [f"2024-03-{i + 1:02d} 10:00"]
                                             for i, r in enumerate(rows[1:])])
    cp1252 = _good().replace(b"A1", "Ä1".encode("cp1252"))
    inf_row = _csv(_with_row(rows, 2, [rows[2][0], rows[2][1], rows[2][2], "inf"]))
    return [
        Case("CRLF, BOM, quoted numbers, blank tail", codecs.BOM_UTF8 +
             _csv(rows, eol="\r\n", quote_numbers=True).encode() + b"\r\n\r\n", OBJ,
             expect="ok", check=lambda t: t.n_used == 12 and t.space["x1"].kind == "continuous"),
        Case("semicolon and decimal comma", _good(sep=";", decimal=","), OBJ, expect="ok",
             check=lambda t: t.read_info["delimiter"] == ";" and
             t.read_info["decimal"]["x1"] == "," and t.space["x1"].kind == "continuous"),
        Case("quoted decimal commas in a comma file",
             _csv([[f'"{c.replace(".", ",")}"' if j == 0 and i else c
                    for j, c in enumerate(r)] for i, r in enumerate(rows)]).encode(),
             OBJ, expect="ok",
             check=lambda t: t.read_info["decimal"]["x1"] == "," and
             t.space["x1"].kind == "continuous" and t.space["x1"].high < 1),
        Case("comment lines above the header", b"# exported\n\n# by the rig\n" + _good(),
             OBJ, expect="ok", check=lambda t: t.n_used == 12 and
             any("comment" in n for n in t.all_notes)),
        Case("percent signs", _csv([r[:3] + [r[3] + "%"] if i else r
                                    for i, r in enumerate(rows)]).encode(), OBJ, expect="ok",
             check=lambda t: t.n_used == 12 and any("%" in n for n in t.all_notes)),
        Case("codes with leading zeros", _csv([rows[0] + ["die"]] +
                                             [r + [f"00{i % 3 + 1}"] for i, r in
                                              enumerate(rows[1:])]).encode(), OBJ,
             expect="ok", check=lambda t: t.space["die"].kind == "integer" and
             any("leading zeros" in n for n in t.all_notes)),
        Case("tab separated", _good(sep="\t"), OBJ, expect="ok",
             check=lambda t: t.read_info["delimiter"] == "tab" and t.n_used == 12),
        Case("tab with decimal comma", _good(sep="\t", decimal=","), OBJ, expect="ok",
             check=lambda t: t.space["x1"].is_numeric and np.isfinite(t.y).all()),
        Case("cp1252 labels", cp1252, OBJ, expect="ok",
             check=lambda t: "Ä1" in t.space["cat"].levels and
             any("Windows-1252" in n for n in t.all_notes)),
        Case("utf-16 with BOM", _csv(rows).encode("utf-16"), OBJ, expect="ok",
             check=lambda t: t.n_used == 12),
        Case("trailing delimiter on every line", trailing.encode(), OBJ, expect="ok",
             check=lambda t: t.params == ["x1", "x2", "cat"]),
        Case("saved pandas index", idx_rows.encode(), OBJ, expect="ok",
             check=lambda t: t.params == ["x1", "x2", "cat"] and
             any("row numbers" in n for n in t.all_notes)),
        Case("missing parameter and text objective", lines_missing.encode(), OBJ,
             expect="ok", check=lambda t: t.n_used == 10 and
             [f["line"] for f in t.failures] == [4, 6] and
             "parameter 'x1' is missing" in t.failures[0]["reason"] and
             "diverged" in t.failures[1]["reason"]),
        Case("infinite objective", inf_row.encode(), OBJ, expect="ok",
             check=lambda t: t.failures[0]["line"] == 3 and "infinite" in t.failures[0]["reason"]),
        Case("status column, case-insensitive", status_rows.encode(),
             OBJ + ["--status", "outcome", "--success", "ok"], expect="ok",
             check=lambda t: t.n_used == 9 and len(t.failures) == 3),
        Case("free-text notes ignored", notes_rows.encode(), OBJ, expect="ok",
             check=lambda t: "notes" not in t.params and any("notes" in n for n in t.all_notes)),
        Case("constant column dropped", const_rows.encode(), OBJ, expect="ok",
             check=lambda t: "machine" not in t.params and
             any("constant" in n for n in t.all_notes)),
        Case("yes/no stays categorical, few integers stay integer", yes_no.encode(), OBJ,
             expect="ok", check=lambda t: t.space["coated"].kind == "categorical" and
             t.space["x2"].kind == "integer" and t.space["cat"].kind == "categorical"),
        Case("dates as order", date_rows.encode(), OBJ + ["--order", "when"], expect="ok",
             check=lambda t: np.all(np.diff(t.order_values) > 0)),
        Case("parquet", _parquet_bytes(_frame()), OBJ, filename="log.parquet", expect="ok",
             check=lambda t: t.n_used == 12 and t.space["x2"].kind == "integer"),
        Case("xlsx", _xlsx_bytes(_frame()), OBJ, filename="log.xlsx", expect="ok",
             check=lambda t: t.n_used == 12 and t.failures == []),
        Case("space file gives maximize", _good(), OBJ + ["--space", "{dir}/space.toml"],
             space="[objective]\ndirection = 'maximize'\nunit = 'mm'\n", expect="ok",
             check=lambda t: t.direction == "maximize" and t.units == "mm"),
    ]


REFUSALS = _refusals()
OK_CASES = _ok_cases()


def test_battery_is_large_enough():
    assert len(REFUSALS) + len(OK_CASES) >= 25


def _setup(case: Case, tmp_path: Path):
    log = tmp_path / case.filename
    if case.make_dir:
        log.mkdir()
    elif case.content is not None:
        log.write_bytes(case.content)
    if case.space is not None:
        (tmp_path / "space.toml").write_text(case.space, encoding="utf-8")
    args = [a.replace("{dir}", str(tmp_path)) for a in case.args]
    if "--out" not in args:
        args += ["--out", str(tmp_path / "out")]
    return log, args


def _kwargs(args: list[str]) -> dict:
    """The load_trials arguments the CLI would derive from these flags."""
    kw, it = {}, iter(args)
    for a in it:
        if a == "--maximize":
            kw["direction"] = "maximize"
        elif a == "--out":
            next(it)
        else:
            key = a.lstrip("-")
            val = next(it)
            kw[key] = val.split(",") if key in ("params", "success") else val
    return kw


@pytest.mark.parametrize("case", REFUSALS, ids=lambda c: c.name)
def test_refusal_through_cli(case, tmp_path, capsys):
    log, args = _setup(case, tmp_path)
    before = _sha(log)
    status = cli.main(["assess", str(log)] + args + ["--surrogates", _fast_surrogate(),
                                                      "--quick", "--quiet"])
    captured = capsys.readouterr()
    err_lines = captured.err.strip("\n").split("\n")
    assert status == 2, captured.err
    assert len(err_lines) == 1 and err_lines[0].startswith("error:"), captured.err
    line = err_lines[0].lower()
    named = {"log": str(log), "space": str(tmp_path / "space.toml"),
             "nope": str(tmp_path / "nope.toml"),
             "out": args[args.index("--out") + 1]}[case.names]
    assert named.lower() in line, line
    for s in case.says:
        assert s.lower() in line, (s, line)
    assert _sha(log) == before                               # input never modified
    out = tmp_path / "out"
    assert not out.exists() or not any(out.iterdir())       # nothing written on refusal


@pytest.mark.parametrize("case", OK_CASES, ids=lambda c: c.name)
def test_messy_but_readable(case, tmp_path):
    log, args = _setup(case, tmp_path)
    before = _sha(log)
    table = load_trials(log, **_kwargs(args))
    assert case.check(table), (table.notes, table.failures, table.space.to_dict())
    assert np.isfinite(table.y).all() and np.isfinite(table.features()).all()
    assert _sha(log) == before


def _fast_surrogate() -> str:
    from advisor.surrogates import surrogate_names
    names = surrogate_names()
    return "baseline" if "baseline" in names else names[0]


@pytest.mark.slow
@pytest.mark.parametrize("case", [c for c in OK_CASES if c.name in (
    "semicolon and decimal comma", "xlsx", "space file gives maximize",
    "missing parameter and text objective")], ids=lambda c: c.name)
def test_messy_but_readable_end_to_end(case, tmp_path, capsys):
    log, args = _setup(case, tmp_path)
    before = _sha(log)
    status = cli.main(["assess", str(log)] + args + [
        "--surrogates", _fast_surrogate(), "--quick", "--quiet", "--no-pdf",
        "--no-backtest", "--jobs", "1"])
    captured = capsys.readouterr()
    assert status == 0, captured.err
    assert any((tmp_path / "out").glob("*.json"))
    assert _sha(log) == before
