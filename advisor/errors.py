"""The tool's own exceptions, each knowing its exit code.

Bad input or usage exits 2 with one line on stderr that starts ``error:``, names the
file, row or column where it applies, and says how to fix it.  Anything else that goes
wrong inside the tool exits 1.
"""

from __future__ import annotations

__all__ = ["AdvisorError", "InputError", "UsageError", "SurrogateError", "InternalError",
           "OutputError", "Interrupted"]


class AdvisorError(Exception):
    """Base of every error the tool raises on purpose."""

    exit_code = 1

    def one_line(self) -> str:
        """The message folded to a single line, as printed after ``error:``."""
        return " ".join(str(self).split())


class InputError(AdvisorError, ValueError):
    """The user's file, settings or arguments cannot be used as they are (exit 2).

    Parameters
    ----------
    message : str
        What is wrong and how to fix it.
    path, row, column : optional
        Where: ``row`` is the 1-based line number in the file (header is line 1).
    """

    exit_code = 2

    def __init__(self, message: str, *, path=None, row: int | None = None,
                 column: str | None = None, fix: str | None = None):
        self.path = None if path is None else str(path)
        self.row = row
        self.column = column
        self.fix = fix
        where = []
        if self.path is not None:
            where.append(self.path)
        if row is not None:
            where.append(f"line {row}")
        if column is not None:
            where.append(f"column '{column}'")
        text = (": ".join([", ".join(where), message]) if where else message)
        if fix:
            text = f"{text}; fix: {fix}"
        super().__init__(text)


class UsageError(InputError):
    """A command-line flag or API argument is wrong (exit 2)."""


class SurrogateError(AdvisorError):
    """A surrogate could not be fitted or returned unusable predictions.

    Caught per task by the orchestrator, recorded, and ranked last; never fatal.
    """


class InternalError(AdvisorError):
    """A bug or environment failure inside the tool (exit 1)."""


class OutputError(AdvisorError):
    """An output could not be written: disk full, folder unwritable, folder busy (exit 1).

    Not the user's input and not a bug: printed as one ``error:`` line with a fix, and no
    error log is written (the folder is the problem).
    """

    def __init__(self, message: str, *, fix: str | None = None):
        self.fix = fix
        super().__init__(f"{message}; fix: {fix}" if fix else message)


class Interrupted(BaseException):
    """The run was stopped by a signal (SIGINT, SIGTERM or SIGHUP): exit 128 + signum.

    A ``BaseException`` like ``KeyboardInterrupt``, so that no ``except Exception`` on
    the way (a surrogate task's own error handling, say) swallows it.
    """

    def __init__(self, signum: int):
        self.signum = int(signum)
        super().__init__(signum)

    @property
    def exit_code(self) -> int:
        return 128 + self.signum
