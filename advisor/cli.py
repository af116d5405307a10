"""The command line: flags → API calls → terminal table, files, exit codes.

Exit status 0 on success; 2 for bad input or usage (one line on stderr starting
``error:``); 1 for an internal failure (one line on stderr, details in
``DIR/advisor-error.log``) or an output that cannot be written; 128 + the signal's
number when SIGINT (130), SIGTERM (143) or SIGHUP (129) stops the run, after its worker
processes are ended and with nothing new written.
"""

from __future__ import annotations

import argparse
import os
import shlex
import signal
import sys
import traceback
from pathlib import Path

from .errors import AdvisorError, InputError, Interrupted, OutputError, UsageError
from .logs import DEFAULT_SUCCESS

__all__ = ["main", "entry", "build_parser"]

#: Signals that stop a run (SIGHUP where the platform has it).
_STOP_SIGNALS = tuple(getattr(signal, n) for n in ("SIGINT", "SIGTERM", "SIGHUP")
                      if hasattr(signal, n))


class _Parser(argparse.ArgumentParser):
    """argparse, but a usage error is our one-line UsageError, not a usage dump."""

    def error(self, message):
        raise UsageError(message, fix=f"see '{self.prog} --help'")


def _csv_list(text: str) -> list[str]:
    return [s.strip() for s in text.split(",") if s.strip()]


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog="advisor", description="Choose a surrogate model and an acquisition "
                "setting for the next Bayesian-optimization campaign from past trial logs.")
    sub = p.add_subparsers(dest="command", parser_class=_Parser)
    a = sub.add_parser("assess", help="cross-validate surrogates on a trial log and recommend one")
    a.add_argument("log", help="trial log: CSV (also .parquet, .xlsx)")
    a.add_argument("--objective", required=True, help="column holding the measured objective")
    a.add_argument("--maximize", action="store_true", help="larger objective is better")
    a.add_argument("--campaign", help="column naming the campaign of each trial")
    a.add_argument("--order", help="column with the trial order within its campaign")
    a.add_argument("--params", type=_csv_list, help="parameter columns, comma-separated "
                   "(default: all other columns)")
    a.add_argument("--status", help="column with the run status")
    a.add_argument("--success", type=_csv_list, help="status values meaning success, "
                   "comma-separated (default: " + ",".join(DEFAULT_SUCCESS) + ")")
    a.add_argument("--space", help="TOML file defining the parameter space")
    a.add_argument("--out", default="reports", help="output folder (default: reports)")
    a.add_argument("--seed", type=int, default=0, help="run seed (default 0)")
    a.add_argument("--quick", action="store_true", help="quick budget")
    a.add_argument("--surrogates", type=_csv_list, help="built-in surrogates to compare, "
                   "comma-separated (default: all); see 'advisor surrogates'")
    a.add_argument("--surrogate", action="append", default=[],
                   metavar="MODULE:CLASS[:NAME=VALUE...]",
                   help="add your own model: a class with fit(X, y) and predict(X) -> "
                        "(mean, std), or a scikit-learn regressor whose predict takes "
                        "return_std=True; constructor options follow as :name=value "
                        "(e.g. sklearn.linear_model:BayesianRidge:max_iter=500); "
                        "repeatable")
    a.add_argument("--validation", default="auto",
                   choices=["auto", "kfold", "forward", "campaign"],
                   help="validation scheme (default auto: forward chaining with an order "
                        "column, else leave-one-campaign-out with 3+ campaigns, else k-fold)")
    a.add_argument("--campaign-order", metavar="A,B,C",
                   help="campaigns in the order they ran, earliest first: forward chaining "
                        "then trains each fold on every earlier campaign in full")
    a.add_argument("--acquisitions", help="acquisition settings to backtest, e.g. "
                   "'ei:xi=0,0.01;ucb:beta=1,4;thompson'")
    a.add_argument("--budget", type=int, help="trials in the next campaign (default from logs)")
    a.add_argument("--batch", type=int, default=1, help="trials per batch in the next campaign")
    a.add_argument("--propose", type=int, default=0, metavar="K",
                   help="propose K settings for the next campaign's first batch")
    a.add_argument("--freeze-flagged", action="store_true",
                   help="hold freeze-candidate parameters at their best logged value in "
                        "the proposals (default: every parameter varies)")
    a.add_argument("--max-fit-seconds", type=float,
                   help="flag surrogates whose projected time per iteration exceeds this")
    a.add_argument("--jobs", type=int, help="local worker processes (default: all cores)")
    a.add_argument("--model-time-limit", type=float, default=600.0, metavar="SECONDS",
                   help="wall-clock limit for each user model (--surrogate) over all of "
                        "its validation folds; a model over it is recorded as failed "
                        "(default 600)")
    a.add_argument("--scheduler", help="Dask scheduler address, e.g. tcp://10.0.0.5:8786")
    a.add_argument("--no-backtest", action="store_true", help="skip the acquisition backtest")
    a.add_argument("--backtest-runs", type=int, metavar="N",
                   help="paired simulated runs per setting in the acquisition backtest "
                        "(default 24 quick, 32 thorough); more runs buy power against the "
                        "default at a cost about proportional to N")
    a.add_argument("--no-pdf", action="store_true", help="write JSON and CSV only")
    a.add_argument("--quiet", action="store_true", help="no progress bar, no table")
    sub.add_parser("surrogates", help="list the built-in surrogates")
    return p


def _check_out_dir(out: Path) -> Path:
    """Refuse an output path that cannot become a writable folder; create nothing yet
    (the folder is made only once the input has been read, so a refusal leaves no trace)."""
    if out.exists():
        if not out.is_dir():
            raise InputError("output path is a file, not a folder", path=out,
                             fix="pass a folder with --out")
        if not os.access(out, os.W_OK | os.X_OK):
            raise InputError("output folder is not writable", path=out,
                             fix="pass a writable folder with --out")
        return out
    parent = out.absolute().parent
    while not parent.exists():
        parent = parent.parent
    if not parent.is_dir() or not os.access(parent, os.W_OK | os.X_OK):
        raise InputError(f"cannot create the output folder under {parent}", path=out,
                         fix="pass a writable folder with --out")
    return out


def _make_out_dir(out: Path) -> None:
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"cannot create output folder ({exc.strerror})", path=out,
                         fix="pass a writable folder with --out") from None


def _validate_numbers(args):
    for flag, value, low in (("--budget", args.budget, 1), ("--batch", args.batch, 1),
                             ("--propose", args.propose, 0), ("--jobs", args.jobs, 1),
                             ("--backtest-runs", getattr(args, "backtest_runs", None), 2)):
        if value is not None and value < low:
            raise UsageError(f"{flag} must be at least {low}, got {value}",
                             fix=f"pass {flag} {max(low, 1)} or more")
    if args.max_fit_seconds is not None and not args.max_fit_seconds > 0:
        raise UsageError("--max-fit-seconds must be positive", fix="pass e.g. --max-fit-seconds 30")
    limit = getattr(args, "model_time_limit", None)
    if limit is not None and not (limit > 0 and limit < float("inf")):
        raise UsageError(f"--model-time-limit must be a positive number of seconds, got {limit}",
                         fix="pass e.g. --model-time-limit 300")


def _progress(quiet: bool):
    """A rich progress bar on stderr, or None when quiet or stderr is not a terminal."""
    if quiet or not sys.stderr.isatty():
        return None, None
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, \
        TimeElapsedColumn

    bar = Progress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(),
                   TimeElapsedColumn(), console=Console(stderr=True), transient=True)
    tasks = {}

    def tick(done, total, label):
        if label not in tasks:
            tasks[label] = bar.add_task(label or "working", total=total)
        bar.update(tasks[label], completed=done, total=total)

    return bar, tick


def _assess(args) -> int:
    from . import load_trials
    from .assessment import assess
    from .execution import default_jobs
    from .report.export import write_json, write_scores_csv
    from .report.publish import ReportSet

    _validate_numbers(args)
    out = _check_out_dir(Path(args.out))
    names = list(args.surrogates or [])
    if args.surrogate:
        from .surrogates import surrogate_names
        names = (names or surrogate_names()) + list(args.surrogate)
    load_kwargs = dict(objective=args.objective,
                       # None lets a space file give the direction (default minimize)
                       direction="maximize" if args.maximize else None,
                       params=args.params, campaign=args.campaign, order=args.order,
                       status=args.status)
    if args.success:
        load_kwargs["success"] = args.success
    if args.space:
        load_kwargs["space"] = args.space
    trials = load_trials(args.log, **load_kwargs)
    if args.surrogate:
        # a user's model that cannot be made (bad option, no uncertainty) is refused
        # before the output folder is created, so a refusal leaves no trace
        from .surrogates import make_surrogate
        for spec in args.surrogate:
            make_surrogate(spec, seed=args.seed, quick=args.quick)
    _make_out_dir(out)
    bar, tick = _progress(args.quiet)
    command = "advisor " + " ".join(shlex.quote(x) for x in sys.argv[1:]) \
        if Path(sys.argv[0]).name in ("advisor", "__main__.py") else None
    try:
        if bar is not None:
            bar.start()
        a = assess(trials, seed=args.seed, quick=args.quick, surrogates=names or None,
                   validation=args.validation, jobs=args.jobs or default_jobs(),
                   campaign_order=([c.strip() for c in args.campaign_order.split(",")]
                                   if args.campaign_order else None),
                   scheduler=args.scheduler, acquisitions=args.acquisitions,
                   budget=args.budget, batch=args.batch, propose=args.propose,
                   max_fit_seconds=args.max_fit_seconds, backtest=not args.no_backtest,
                   freeze=args.freeze_flagged, progress=tick, command=command,
                   model_time_limit=args.model_time_limit,
                   backtest_runs=args.backtest_runs)
    finally:
        if bar is not None:
            bar.stop()
    stem = Path(args.log).stem
    payload = a.to_dict()
    # Every output goes to a temporary file; only when all are complete are they renamed
    # into place together, under the folder's lock (advisor/report/publish.py).
    dests = {k: out / f"{stem}{suffix}" for k, suffix in
             (("json", ".json"), ("csv", ".csv"), ("proposals", "-proposals.csv"),
              ("pdf", ".pdf"))}
    with ReportSet(out, family=list(dests.values())) as report:
        write_json(payload, report.path(dests["json"]))
        write_scores_csv(a, report.path(dests["csv"]))
        if a.proposals is not None and len(a.proposals):
            a.proposals.to_csv(report.path(dests["proposals"]), index=False)
        if not args.no_pdf:
            from .report.pdf import write_pdf
            write_pdf(a, report.path(dests["pdf"]))
    written = report.published
    if not args.quiet:
        from .report.terminal import print_assessment
        print_assessment(a, payload, written)
    return 0


def _list_surrogates() -> int:
    from .surrogates import describe_surrogate, surrogate_names
    for n in surrogate_names():
        print(f"{n:16s} {describe_surrogate(n)}")
    return 0


def _raise_interrupted(signum, frame):
    raise Interrupted(signum)


def _signal_name(signum: int) -> str:
    try:
        return signal.Signals(signum).name
    except ValueError:
        return f"signal {signum}"


def main(argv: list[str] | None = None) -> int:
    """Run the CLI; return the exit status (0 ok, 2 bad input/usage, 1 internal failure
    or unwritable output, 128 + signal number when stopped by SIGINT/SIGTERM/SIGHUP)."""
    argv = sys.argv[1:] if argv is None else list(argv)
    out_dir = Path("reports")
    previous = {}
    try:
        for sig in _STOP_SIGNALS:
            previous[sig] = signal.signal(sig, _raise_interrupted)
    except ValueError:  # not the main thread: leave signal handling to the caller
        previous = {}
    try:
        parser = build_parser()
        if not argv:
            raise UsageError("no command given",
                             fix="run 'advisor assess LOG.csv --objective COL' or 'advisor --help'")
        args = parser.parse_args(argv)
        if args.command is None:
            raise UsageError("no command given",
                             fix="run 'advisor assess LOG.csv --objective COL' or 'advisor --help'")
        if args.command == "surrogates":
            return _list_surrogates()
        out_dir = Path(args.out)
        return _assess(args)
    except Interrupted as exc:
        return _interrupted(exc.signum)
    except KeyboardInterrupt:
        return _interrupted(signal.SIGINT)
    except OutputError as exc:
        print(f"error: {exc.one_line()}", file=sys.stderr)
        return exc.exit_code
    except AdvisorError as exc:
        if exc.exit_code == 2:
            print(f"error: {exc.one_line()}", file=sys.stderr)
            return 2
        return _internal(exc, out_dir)
    except SystemExit as exc:  # argparse's --help
        return int(exc.code or 0)
    except Exception as exc:  # last resort: one line, details to a log file
        return _internal(exc, out_dir)
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)


def _interrupted(signum: int) -> int:
    """End the worker processes, say so in one line, return 128 + signum."""
    from .execution import stop_workers

    for sig in _STOP_SIGNALS:  # a second signal must not interrupt the cleanup
        signal.signal(sig, signal.SIG_IGN)
    stop_workers()
    print(f"error: interrupted by {_signal_name(signum)}; no output was written",
          file=sys.stderr)
    return 128 + int(signum)


def entry() -> None:
    """Console-script entry: :func:`main`, then exit.  After a signal the process ends at
    once (``os._exit``), so no leftover worker-pool thread can delay the exit."""
    code = main()
    if code >= 128:
        sys.stdout.flush()
        sys.stderr.flush()
        os._exit(code)
    raise SystemExit(code)


def _internal(exc: BaseException, out_dir: Path) -> int:
    where = ""
    try:
        if out_dir.is_dir() and os.access(out_dir, os.W_OK):
            log = out_dir / "advisor-error.log"
            log.write_text(traceback.format_exc(), encoding="utf-8")
            where = f"; details in {log}"
    except OSError:
        pass
    msg = " ".join(f"{type(exc).__name__}: {exc}".split())[:300]
    print(f"error: internal failure ({msg}){where}; please report it", file=sys.stderr)
    return 1
