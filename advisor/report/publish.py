"""Publishing a report set: temporary files, permissions, one lock per folder, one rename
phase.

A run writes every output (JSON, CSV, PDF, proposals) to a temporary file beside its
destination.  Only when all are complete does it take the folder's lock and rename them
into place, with the interrupting signals held back for those few milliseconds, so a
reader never sees a mixed set:

* **Permissions.**  ``tempfile.mkstemp`` creates files readable by their owner only
  (mode 0600), and a rename keeps the mode; each temporary file is therefore given
  ``0o666 & ~umask`` first, the mode any new file gets (POSIX ``open(2)``).
* **Two runs into one folder.**  The rename phase holds an exclusive ``fcntl.flock`` on
  the output folder itself (no lock file is left behind).  The kernel drops a
  ``flock`` when its holder dies, so a lock can never go stale; a
  second run waits for the first to finish renaming (milliseconds), then publishes its
  own complete set.  A member of an older set that the new run does not produce (a
  proposals file, say) is removed in the same phase, so the folder never shows one
  run's JSON beside another run's proposals.  Where ``flock`` does not exist the
  renames still happen in one phase, without the lock.
* **Disk full, folder unwritable.**  A failure while writing removes every temporary
  file of the set and raises :class:`advisor.errors.OutputError` (one ``error:`` line);
  older outputs are untouched because nothing was renamed.
"""

from __future__ import annotations

import contextlib
import errno
import os
import signal
import tempfile
import time
from pathlib import Path

from ..errors import OutputError

__all__ = ["ReportSet", "new_file_mode", "LOCK_WAIT_SECONDS"]

#: How long a run waits for another run's rename phase before giving up.
LOCK_WAIT_SECONDS = 60.0
_HELD = (signal.SIGINT, signal.SIGTERM, signal.SIGHUP) if hasattr(signal, "SIGHUP") else (
    signal.SIGINT, signal.SIGTERM)


def new_file_mode() -> int:
    """The mode a newly created file gets under the current umask."""
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


def _describe(exc: OSError, path: Path) -> str:
    why = exc.strerror or str(exc)
    if exc.errno == errno.ENOSPC:
        why = "no space left on the device"
    return f"cannot write {path} ({why})"


class ReportSet:
    """The files of one run's report, published together or not at all.

    Use as a context manager; :meth:`path` gives a temporary path for each destination,
    and leaving the block without an exception publishes them all.  Any exception
    (including the interrupting ones) removes every temporary file instead.

    ``family`` lists destinations that belong to the same report set even when this run
    does not write them (they are removed on publication).
    """

    def __init__(self, folder: Path, family: list[Path] | None = None):
        self.folder = Path(folder)
        self.family = [Path(p) for p in (family or [])]
        self._tmp: dict[Path, Path] = {}
        self.published: list[Path] = []

    def path(self, dest: Path) -> Path:
        dest = Path(dest)
        try:
            fd, tmp = tempfile.mkstemp(prefix=f".{dest.name}.", suffix=".tmp",
                                       dir=dest.parent)
            try:
                os.fchmod(fd, new_file_mode())
            finally:
                os.close(fd)
        except OSError as exc:
            raise OutputError(_describe(exc, dest) + "; nothing was written",
                              fix="free some space or pass a writable folder with --out"
                              ) from None
        self._tmp[dest] = Path(tmp)
        return Path(tmp)

    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb):
        if exc_type is not None:
            self._discard()
            if isinstance(exc, OSError) and not isinstance(exc, OutputError):
                where = next(iter(self._tmp), self.folder)
                raise OutputError(_describe(exc, where) + "; nothing was written and "
                                  "older outputs are unchanged",
                                  fix="free some space or pass a writable folder "
                                      "with --out") from None
            return False
        try:
            self._publish()
        except BaseException:
            self._discard()
            raise
        return False

    def _discard(self):
        for tmp in self._tmp.values():
            with contextlib.suppress(OSError):
                os.unlink(tmp)

    def _publish(self):
        old_mask = None
        if hasattr(signal, "pthread_sigmask"):
            old_mask = signal.pthread_sigmask(signal.SIG_BLOCK, _HELD)
        try:
            with self._lock():
                for dest, tmp in self._tmp.items():
                    os.replace(tmp, dest)
                    self.published.append(dest)
                for extra in self.family:
                    if extra not in self._tmp:
                        with contextlib.suppress(FileNotFoundError):
                            os.unlink(extra)
        except OSError as exc:
            raise OutputError(_describe(exc, self.folder) + "; outputs may be incomplete",
                              fix="check the folder's permissions and free space") from None
        finally:
            if old_mask is not None:
                signal.pthread_sigmask(signal.SIG_SETMASK, old_mask)

    @contextlib.contextmanager
    def _lock(self):
        try:
            import fcntl
        except ImportError:  # not POSIX: renames in one phase, without a lock
            yield
            return
        fd = os.open(self.folder, os.O_RDONLY)
        try:
            deadline = time.monotonic() + LOCK_WAIT_SECONDS
            while True:
                try:
                    fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                    break
                except BlockingIOError:
                    if time.monotonic() > deadline:
                        raise OutputError(
                            f"{self.folder} is being written by another advisor run for "
                            f"over {LOCK_WAIT_SECONDS:.0f} s; nothing was written",
                            fix="wait for that run to finish, or pass another --out"
                        ) from None
                    time.sleep(0.05)
            yield
        finally:
            os.close(fd)  # closing the descriptor drops the flock
