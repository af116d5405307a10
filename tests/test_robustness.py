"""Runs that behave like a well-made tool: stopped by a signal, sharing a folder, writing
onto a full disk, hosting a model that hangs or kills its process."""

from __future__ import annotations

import errno
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from advisor.cli import main
from advisor.execution import _descendants

ROOT = Path(__file__).resolve().parent.parent
MOULDING = ROOT / "sample_logs" / "moulding_warpage.csv"
FAST = ["--quick", "--no-backtest", "--jobs", "1", "--quiet"]


@pytest.fixture
def tiny_log(tmp_path):
    rng = np.random.default_rng(0)
    df = pd.DataFrame({"a": rng.random(40), "b": rng.random(40),
                       "run": np.arange(1, 41)})
    df["y"] = (df["a"] - 0.3) ** 2 + df["b"] + 0.05 * rng.standard_normal(40)
    path = tmp_path / "tiny.csv"
    df.to_csv(path, index=False)
    return path


def _session_processes(sid: int) -> list[int]:
    out = []
    for entry in os.listdir("/proc"):
        if entry.isdigit():
            try:
                stat = Path(f"/proc/{entry}/stat").read_text()
            except OSError:
                continue
            fields = stat.rsplit(")", 1)[1].split()
            if int(fields[3]) == sid and fields[0] != "Z":  # field 6: session id
                out.append(int(entry))
    return out


@pytest.mark.slow
@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGINT, signal.SIGHUP])
def test_signal_ends_run_and_its_workers(tmp_path, sig):
    out = tmp_path / "out"
    out.mkdir()
    old = out / "moulding_warpage.json"
    old.write_text("an older report\n")
    cmd = [sys.executable, "-m", "advisor", "assess", str(MOULDING), "--objective",
           "warpage_mm", "--campaign", "lot", "--order", "run", "--quick", "--jobs", "2",
           "--surrogates", "gp,forest,dngo,ensemble", "--out", str(out)]
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            stdin=subprocess.DEVNULL, start_new_session=True, cwd=tmp_path)
    deadline = time.monotonic() + 60
    while len(_descendants(proc.pid)) < 2 and time.monotonic() < deadline:
        time.sleep(0.1)  # wait until the worker pool is up
    assert len(_descendants(proc.pid)) >= 2, "the run never started its workers"
    time.sleep(1.0)
    proc.send_signal(sig)
    # communicate() returns only when every holder of the pipes has closed them, so a
    # worker left holding stdout/stderr would make this time out
    stdout, stderr = proc.communicate(timeout=10)
    assert proc.returncode == 128 + sig
    lines = stderr.decode().strip().splitlines()
    assert lines == [f"error: interrupted by {signal.Signals(sig).name}; "
                     "no output was written"]
    time.sleep(5)
    assert _session_processes(proc.pid) == []   # the session leader's pid is its sid
    assert old.read_text() == "an older report\n"
    assert sorted(p.name for p in out.iterdir()) == ["moulding_warpage.json"]


@pytest.mark.parametrize("umask", [0o022, 0o077])
def test_outputs_get_the_umask_mode(tmp_path, tiny_log, umask):
    before = os.umask(umask)
    try:
        code = main(["assess", str(tiny_log), "--objective", "y", "--surrogates",
                     "baseline", "--out", str(tmp_path / "out"), *FAST])
    finally:
        os.umask(before)
    assert code == 0
    files = [p for p in (tmp_path / "out").iterdir() if not p.name.startswith(".")]
    assert {p.suffix for p in files} == {".json", ".csv", ".pdf"}
    for p in files:
        assert (p.stat().st_mode & 0o777) == (0o666 & ~umask), p


@pytest.mark.slow
def test_two_runs_into_one_folder_leave_one_complete_set(tmp_path, tiny_log):
    # One run proposes a batch, the other does not; whichever publishes last, the
    # folder must hold that run's set only: its JSON and, iff it proposed, proposals.
    out = tmp_path / "out"
    base = [sys.executable, "-m", "advisor", "assess", str(tiny_log), "--objective", "y",
            "--surrogates", "baseline,gp", "--out", str(out), "--no-pdf", *FAST]
    for attempt in range(3):
        procs = [subprocess.Popen(base + ["--seed", "1", "--propose", "2"],
                                  stderr=subprocess.PIPE, cwd=tmp_path),
                 subprocess.Popen(base + ["--seed", "2"], stderr=subprocess.PIPE,
                                  cwd=tmp_path)]
        for p in procs:
            _, err = p.communicate(timeout=300)
            assert p.returncode == 0, err
        d = json.loads((out / "tiny.json").read_text())
        has_props = (out / "tiny-proposals.csv").exists()
        proposed = bool((d.get("planning") or {}).get("proposals"))
        assert has_props == proposed, f"attempt {attempt}: mixed report set"
        assert d["seed"] == (1 if proposed else 2)
        assert not [p for p in out.iterdir() if p.name.endswith(".tmp")]


def test_disk_full_leaves_nothing_and_keeps_older_outputs(tmp_path, tiny_log,
                                                          monkeypatch, capsys):
    out = tmp_path / "out"
    out.mkdir()
    (out / "tiny.json").write_text("older\n")
    from advisor.report import export

    real = export.write_scores_csv

    def full_disk(a, dest):
        Path(dest).write_text("half a fi")  # part of the file reached the disk
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(export, "write_scores_csv", full_disk)
    code = main(["assess", str(tiny_log), "--objective", "y", "--surrogates", "baseline",
                 "--out", str(out), *FAST])
    monkeypatch.setattr(export, "write_scores_csv", real)
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 1
    assert len(err) == 1 and err[0].startswith("error: cannot write")
    assert "no space left" in err[0] and "older outputs are unchanged" in err[0]
    assert sorted(p.name for p in out.iterdir()) == ["tiny.json"]
    assert (out / "tiny.json").read_text() == "older\n"


def test_folder_unwritable_at_write_time(tmp_path, tiny_log, monkeypatch, capsys):
    out = tmp_path / "out"
    out.mkdir()
    (out / "tiny.json").write_text("older\n")
    import tempfile

    def refuse(*a, **k):
        raise PermissionError(errno.EACCES, os.strerror(errno.EACCES))

    monkeypatch.setattr(tempfile, "mkstemp", refuse)
    code = main(["assess", str(tiny_log), "--objective", "y", "--surrogates", "baseline",
                 "--out", str(out), *FAST])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 1 and len(err) == 1 and err[0].startswith("error: cannot write")
    assert sorted(p.name for p in out.iterdir()) == ["tiny.json"]


@pytest.mark.slow
def test_hostile_models_cost_at_most_the_time_limit(tmp_path, tiny_log, monkeypatch):
    # A model that loops forever and one that ends its process are recorded as failed
    # with the reason and ranked last; the run completes.  The limit is 8 s per model.
    # "One limit per model, not one per fold" is checked by counting the isolated
    # processes started (serial run, so the count is seen here), not by a wall clock.
    import advisor.execution as execution
    started = []
    real = execution.run_isolated

    def counting(fn, args, time_limit):
        started.append(time_limit)
        return real(fn, args, time_limit)

    monkeypatch.setattr(execution, "run_isolated", counting)
    code = main(["assess", str(tiny_log), "--objective", "y", "--order", "run",
                 "--surrogates", "baseline", "--surrogate", "hostile_models:Hangs",
                 "--surrogate", "hostile_models:ExitsProcess",
                 "--surrogate", "hostile_models:FailsOnSomeFolds",
                 "--model-time-limit", "8", "--out", str(tmp_path / "out"), "--no-pdf",
                 *FAST])
    assert code == 0
    d = json.loads((tmp_path / "out" / "tiny.json").read_text())
    rank = {r["surrogate"]: r for r in d["ranking"]}
    assert rank["baseline"]["rank"] == 1
    hang = rank["hostile_models:Hangs"]
    assert hang["status"] == "failed"
    assert "time limit of 8 s" in hang["failures"][0]["error"]
    gone = rank["hostile_models:ExitsProcess"]
    assert gone["status"] == "failed"
    assert "ended without an answer" in gone["failures"][0]["error"]
    some = rank["hostile_models:FailsOnSomeFolds"]
    assert some["status"] == "failed"
    assert any("not enough training rows" in f["error"] for f in some["failures"])
    # the hang cost one limit, not one per fold: one isolated process per user model,
    # all its folds inside it, each limited to 8 s
    assert started == [8.0, 8.0, 8.0]
    assert all(len(rank[n]["failures"]) >= 1 for n in
               ("hostile_models:Hangs", "hostile_models:ExitsProcess"))
