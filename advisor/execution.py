"""Run a grid of independent tasks serially, in local processes, or on a Dask cluster.

Every stage that has many independent jobs (surrogate × fold, backtest seed, ...)
builds a list of tasks and hands it here; the results come back in task order whatever
ran them, so serial, local-parallel and cluster runs give identical output.

A task's randomness must come from :func:`task_seed` (the run seed plus the task's own
identity), never from the order in which workers pick tasks up.
"""

from __future__ import annotations

import hashlib
import os
import signal
import time
from dataclasses import dataclass
from typing import Any, Callable, Sequence

__all__ = ["Executor", "task_seed", "default_jobs", "stop_workers", "run_isolated",
           "IsolatedFailure"]


def task_seed(run_seed: int, *identity: Any) -> int:
    """A 32-bit seed from the run seed and a task's identity (names, fold numbers, ...).

    Uses SHA-256 of the text form, so it is the same in every process and on every
    machine (Python's ``hash`` is salted per process).
    """
    text = "\x1f".join([str(int(run_seed))] + [str(x) for x in identity])
    return int.from_bytes(hashlib.sha256(text.encode()).digest()[:4], "little")


def _one_blas_thread(fn, *args):
    """Run ``fn(*args)`` with one BLAS thread (cluster workers are not limited otherwise)."""
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1, user_api="blas"):
        return fn(*args)


def default_jobs() -> int:
    return max(1, os.cpu_count() or 1)


@dataclass
class Executor:
    """Where tasks run.

    Parameters
    ----------
    jobs : int
        Local worker processes (1 = serial, in this process).
    scheduler : str, optional
        Address of a Dask distributed scheduler (``tcp://host:8786``); overrides ``jobs``.
    progress : callable, optional
        ``progress(done, total, label)`` called as tasks finish (from this process).
    """

    jobs: int = 1
    scheduler: str | None = None
    progress: Callable[[int, int, str], None] | None = None

    def map(self, fn: Callable, tasks: Sequence[tuple], label: str = "") -> list:
        """``[fn(*t) for t in tasks]``, run wherever this executor says, in task order."""
        tasks = list(tasks)
        total = len(tasks)
        if total == 0:
            return []
        if self.scheduler:
            return self._map_dask(fn, tasks, label)
        if self.jobs <= 1 or total == 1:
            from threadpoolctl import threadpool_limits

            # One BLAS thread per task, as in the worker processes: the grid is the unit
            # of parallelism, and oversubscribed BLAS threads were measured to slow small
            # GP fits down ten-fold and more on a busy 2-core machine.
            out = []
            with threadpool_limits(limits=1, user_api="blas"):
                for i, t in enumerate(tasks):
                    out.append(fn(*t))
                    self._tick(i + 1, total, label)
            return out
        from joblib import Parallel, delayed

        # return_as="generator" keeps task order and lets us tick progress as results
        # arrive; loky workers are separate processes, so torch threads are per worker.
        import warnings

        par = Parallel(n_jobs=min(self.jobs, total), backend="loky", return_as="generator")
        out = []
        with warnings.catch_warnings():
            # loky says so when it replaces an idle worker it had shut down; the task is
            # resubmitted and nothing is lost, so the warning would only alarm users.
            warnings.filterwarnings("ignore", message="A worker stopped while some jobs")
            for i, res in enumerate(par(delayed(fn)(*t) for t in tasks)):
                out.append(res)
                self._tick(i + 1, total, label)
        return out

    def _map_dask(self, fn, tasks, label):
        from dask.distributed import Client, as_completed

        with Client(self.scheduler, set_as_default=False) as client:
            futures = [client.submit(_one_blas_thread, fn, *t, pure=False) for t in tasks]
            try:
                index = {f.key: i for i, f in enumerate(futures)}
                out: list = [None] * len(tasks)
                for done, fut in enumerate(as_completed(futures, loop=client.loop), start=1):
                    out[index[fut.key]] = fut.result()
                    self._tick(done, len(tasks), label)
            except BaseException:
                # Stopped (a signal, or a failure): cancel what is queued or running on
                # the cluster so its workers do not go on computing for nobody.
                try:
                    client.cancel(futures, force=True)
                except Exception:  # the cluster may already be gone; nothing to cancel
                    pass
                raise
        return out

    def _tick(self, done, total, label):
        if self.progress is not None:
            self.progress(done, total, label)


# ======================================================================================
# Ending worker processes, and running untrusted code in a process of its own
# ======================================================================================
def _descendants(pid: int) -> list[int]:
    """Process ids below ``pid`` (Linux ``/proc``; empty elsewhere).  Written by hand
    because no library among the project's dependencies lists child processes."""
    children: dict[int, list[int]] = {}
    try:
        entries = os.listdir("/proc")
    except OSError:
        return []
    for entry in entries:
        if not entry.isdigit():
            continue
        try:
            with open(f"/proc/{entry}/stat", "rb") as fh:
                stat = fh.read().decode(errors="replace")
        except OSError:
            continue
        # the command name (field 2) is in parentheses and may contain spaces
        ppid = int(stat.rsplit(")", 1)[1].split()[1])
        children.setdefault(ppid, []).append(int(entry))
    out, todo = [], [pid]
    while todo:
        for c in children.get(todo.pop(), []):
            out.append(c)
            todo.append(c)
    return out


def stop_workers(grace: float = 1.0) -> None:
    """End every worker process this run started: the loky pool (joblib), then any
    process still below this one (SIGTERM, then SIGKILL after ``grace`` seconds)."""
    try:
        from joblib.externals.loky import reusable_executor

        ex = getattr(reusable_executor, "_executor", None)
        if ex is not None:
            ex.shutdown(wait=False, kill_workers=True)
    except Exception:  # the pool may be half torn down already; the sweep below ends it
        pass
    left = _descendants(os.getpid())
    for pid in left:
        try:
            os.kill(pid, signal.SIGTERM)
        except OSError:
            pass
    deadline = time.monotonic() + grace
    while left and time.monotonic() < deadline:
        time.sleep(0.05)
        left = [p for p in left if _alive(p)]
    for pid in left:
        try:
            os.kill(pid, signal.SIGKILL)
        except OSError:
            pass


def _alive(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat", "rb") as fh:
            return fh.read().split(b")")[-1].split()[0] != b"Z"
    except OSError:
        return False


class IsolatedFailure(RuntimeError):
    """The isolated process ran over its time limit or ended without an answer."""


def _isolated_child(conn, fn, args):
    try:
        from threadpoolctl import threadpool_limits

        with threadpool_limits(limits=1, user_api="blas"):
            result = fn(*args)
        conn.send(("ok", result))
    except BaseException as exc:  # everything goes back to the parent as text
        conn.send(("error", f"{type(exc).__name__}: {exc}"))
    finally:
        conn.close()


def run_isolated(fn: Callable, args: tuple, time_limit: float):
    """``fn(*args)`` in a fresh process (``spawn``) that is killed after ``time_limit``
    seconds.

    Used for code the tool does not control (a user's model): an endless loop, an
    ``os._exit`` or a crash in compiled code then costs at most ``time_limit`` and ends
    as :class:`IsolatedFailure`, never the run.  ``fn`` and ``args`` must pickle.
    """
    import multiprocessing as mp

    ctx = mp.get_context("spawn")
    parent, child = ctx.Pipe(duplex=False)
    proc = ctx.Process(target=_isolated_child, args=(child, fn, args), daemon=True)
    proc.start()
    child.close()
    try:
        if parent.poll(time_limit):
            try:
                kind, value = parent.recv()
            except EOFError:
                kind, value = None, None
            if kind == "ok":
                return value
            if kind == "error":
                raise IsolatedFailure(value)
        proc.join(0.5)
        if proc.exitcode is None:
            raise IsolatedFailure(f"exceeded the time limit of {time_limit:g} s")
        raise IsolatedFailure(f"its process ended without an answer (exit code "
                              f"{proc.exitcode})")
    finally:
        if proc.is_alive():
            proc.kill()
        proc.join(1.0)
        parent.close()
