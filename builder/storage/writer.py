"""The one writer: commits each unit's record in one transaction.

Only the main process of a run writes (workers compute and return plain
records).  ``Writer.commit(record)`` replaces whatever the database holds for
the unit (a failed attempt, or a row with smaller bounds when extending) by
the new space row, its newform rows and its eigenvalue rows — all in one
transaction, so a unit is either completely present or absent.  A run killed
at any point therefore leaves only whole units behind; the next run plans the
absent ones again ("interrupted units are redone on resume").

Test hooks (environment variables, read at construction; used by
tests/test_resume.py to make a kill land inside a transaction or to inject a
full disk; harmless when unset):

* ``NFB_TEST_COMMIT_SLEEP="N,k,SECONDS"`` — sleep inside the transaction of unit
  (N, k) after its rows are inserted, before COMMIT (logs a line first);
* ``NFB_TEST_COMMIT_FAIL="N,k,ERRNO"`` — raise ``OSError(ERRNO)`` (e.g. ENOSPC) there.
"""

from __future__ import annotations

import errno
import logging
import os
import socket
import time
from collections.abc import Callable
from contextlib import AbstractContextManager, nullcontext
from datetime import UTC, datetime

from sqlalchemy import Engine, delete, insert, update
from sqlalchemy.exc import DBAPIError, SQLAlchemyError

from builder.forms.record import SpaceRecord
from builder.pipeline.errors import StorageError
from builder.storage.models import STATUS_FAILED, Eigenvalue, Newform, Run, Space
from builder.storage.rows import character_columns, record_to_rows

log = logging.getLogger("nfb")

_SPACES = Space.__table__
_NEWFORMS = Newform.__table__
_EIGEN = Eigenvalue.__table__
_RUNS = Run.__table__


def _hook(name: str) -> tuple[int, int, str] | None:
    raw = os.environ.get(name)
    if not raw:
        return None
    N, k, arg = raw.split(",", 2)
    return int(N), int(k), arg


def now() -> datetime:
    return datetime.now(UTC)


def unit_name(N: int, k: int, c: int = 0) -> str:
    """37w2, or 13w2c4 for a nontrivial character (the label without the orbit)."""
    return f"{N}w{k}" + (f"c{c}" if c else "")


def describe_storage_error(e: BaseException) -> str:
    """A one-line explanation of an I/O or database failure."""
    if isinstance(e, OSError):
        if e.errno == errno.ENOSPC:
            return "the disk is full (No space left on device)"
        return f"{e.strerror or e} (errno {e.errno})"
    orig = getattr(e, "orig", None)
    text = str(orig if orig is not None else e).strip().splitlines()[0]
    low = text.lower()
    if "disk is full" in low or "no space left" in low or "diskfull" in low:
        return f"the disk is full ({text})"
    return text


class Writer:
    """The single writer of a run."""

    def __init__(
        self,
        engine: Engine,
        run_id: int | None = None,
        critical: Callable[[], AbstractContextManager] | None = None,
    ) -> None:
        self.engine = engine
        self.run_id = run_id
        self.critical = critical or nullcontext
        self.sleep_hook = _hook("NFB_TEST_COMMIT_SLEEP")
        self.fail_hook = _hook("NFB_TEST_COMMIT_FAIL")
        self.commit_seconds = 0.0
        self.commits = 0

    # -- runs ------------------------------------------------------------------------

    @staticmethod
    def start_run(engine: Engine, code_version: str, params: dict, job: dict, planned: int) -> int:
        try:
            with engine.begin() as conn:
                result = conn.execute(
                    insert(_RUNS).values(
                        code_version=code_version,
                        params=params,
                        job=job,
                        host=socket.gethostname(),
                        pid=os.getpid(),
                        started_at=now(),
                        status="running",
                        units_planned=planned,
                        units_done=0,
                    )
                )
                return int(result.inserted_primary_key[0])
        except (OSError, SQLAlchemyError) as e:
            raise StorageError(f"cannot record the run: {describe_storage_error(e)}") from e

    def finish_run(self, status: str, done: int, message: str | None = None) -> None:
        if self.run_id is None:
            return
        try:
            with self.engine.begin() as conn:
                conn.execute(
                    update(_RUNS)
                    .where(_RUNS.c.id == self.run_id)
                    .values(status=status, finished_at=now(), units_done=done, message=message)
                )
        except (OSError, SQLAlchemyError) as e:  # best effort: the units are what matter
            log.warning("could not record the end of run %s: %s", self.run_id, e)

    # -- units -----------------------------------------------------------------------

    def _delete_unit(self, conn, N: int, k: int, c: int) -> None:
        labels = (
            _NEWFORMS.select()
            .with_only_columns(_NEWFORMS.c.label)
            .where(_NEWFORMS.c.level == N, _NEWFORMS.c.weight == k, _NEWFORMS.c.char_index == c)
        )
        conn.execute(delete(_EIGEN).where(_EIGEN.c.label.in_(labels)))
        conn.execute(
            delete(_NEWFORMS).where(
                _NEWFORMS.c.level == N, _NEWFORMS.c.weight == k, _NEWFORMS.c.char_index == c
            )
        )
        conn.execute(
            delete(_SPACES).where(
                _SPACES.c.level == N, _SPACES.c.weight == k, _SPACES.c.char_index == c
            )
        )

    def _test_hooks(self, N: int, k: int) -> None:
        if self.sleep_hook and self.sleep_hook[:2] == (N, k):
            log.info("test hook: sleeping inside the commit of %dw%d", N, k)
            for h in log.handlers:
                h.flush()
            time.sleep(float(self.sleep_hook[2]))
        if self.fail_hook and self.fail_hook[:2] == (N, k):
            code = getattr(errno, self.fail_hook[2], None) or int(self.fail_hook[2])
            raise OSError(code, f"{os.strerror(code)} (injected by NFB_TEST_COMMIT_FAIL)")

    def commit(self, rec: SpaceRecord) -> str:
        """Store one unit: space + newforms + eigenvalues, atomically; return its hash."""
        space, newforms, eigen = record_to_rows(rec, self.run_id)
        t0 = time.perf_counter()
        try:
            with self.critical(), self.engine.begin() as conn:
                self._delete_unit(conn, rec.level, rec.weight, rec.char_index)
                conn.execute(insert(_SPACES), [space])
                if newforms:
                    conn.execute(insert(_NEWFORMS), newforms)
                if eigen:
                    conn.execute(insert(_EIGEN), eigen)
                self._test_hooks(rec.level, rec.weight)
        except (OSError, DBAPIError) as e:
            raise StorageError(
                f"storing unit {unit_name(rec.level, rec.weight, rec.char_index)} failed: "
                f"{describe_storage_error(e)}; "
                "the transaction was rolled back and the database is intact — "
                "fix the cause and rerun the same command to resume"
            ) from e
        self.commit_seconds += time.perf_counter() - t0
        self.commits += 1
        return space["content_hash"]

    def commit_failure(
        self, unit: tuple[int, int, int], params: dict, error: str, seconds: float
    ) -> None:
        """Record a unit whose computation raised (status 'failed'; replanned next run)."""
        N, k, c = unit
        row = {
            "level": N,
            "weight": k,
            "char_index": c,
            **character_columns(N, c),  # the unit's character is known without its record
            "status": STATUS_FAILED,
            "seconds": float(seconds),
            "params": dict(params),
            "trace_bound": params["trace_bound"],
            "ap_bound": params["ap_bound"],
            "dim_cap": params["dim_cap"],
            "run_id": self.run_id,
            "error": error[-4000:],
        }
        try:
            with self.critical(), self.engine.begin() as conn:
                old = conn.execute(
                    _SPACES.select()
                    .with_only_columns(_SPACES.c.status)
                    .where(_SPACES.c.level == N, _SPACES.c.weight == k, _SPACES.c.char_index == c)
                ).scalar()
                if old is not None and old != STATUS_FAILED:
                    return  # keep the data computed earlier (with other bounds)
                self._delete_unit(conn, N, k, c)
                conn.execute(insert(_SPACES), [row])
        except (OSError, DBAPIError) as e:
            raise StorageError(
                f"recording the failure of unit {unit_name(N, k, c)} failed: "
                f"{describe_storage_error(e)}"
            ) from e
