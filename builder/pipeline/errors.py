"""Errors the builder reports to the user, each with its exit code.

Exit codes (design.md §5, documented in README.md):

    0    done
    2    bad input: nothing was written (job file, flags, an incompatible database)
    3    environment: the disk is full, the database went away, an output file
         could not be written; what was committed stays intact, rerun to resume
    130  interrupted by SIGINT (143 for SIGTERM): clean stop, rerun to resume
    other  a bug (an unexpected exception; the traceback is in the log file)
"""

from __future__ import annotations


class NfbError(Exception):
    """Base of the errors that are reported as a message, not a traceback."""

    exit_code = 1


class BadInput(NfbError):
    """The job, a flag or the target database cannot be used; nothing was written.

    ``where`` is the file (or "command line"), ``key`` the job key or flag,
    ``problem`` the explanation.
    """

    exit_code = 2

    def __init__(self, where: str, key: str | None, problem: str) -> None:
        self.where = where
        self.key = key
        self.problem = problem
        super().__init__(self.message)

    @property
    def message(self) -> str:
        if self.key:
            return f"{self.where}: key '{self.key}': {self.problem}"
        return f"{self.where}: {self.problem}"


class StorageError(NfbError):
    """Writing failed because of the environment (full disk, lost database, I/O)."""

    exit_code = 3


class Interrupted(KeyboardInterrupt):
    """SIGINT / SIGTERM arrived; the run stopped cleanly and can be resumed.

    A ``KeyboardInterrupt`` (not an ``Exception``) so that no ``except Exception``
    on the way (e.g. the per-unit error capture) swallows it.
    """

    def __init__(self, signum: int = 2) -> None:
        self.signum = signum
        super().__init__("interrupted")

    @property
    def exit_code(self) -> int:
        return 128 + self.signum


class UnitsFailed(NfbError):
    """Some units raised inside the computation (a bug); the others were stored."""

    exit_code = 1
