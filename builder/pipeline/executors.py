"""Where units are computed: in-process (serial), a local process pool, or Dask.

Every executor runs the same pure function ``compute_task(unit, params)`` and
yields ``Outcome``s as units complete; the caller (the one writer, in the main
process) stores them. Executors keep ``ahead`` units submitted beyond the ones
running and submit the next unit *before* handing a finished one to the
writer, so workers never wait for a commit.

The order of completion depends on the executor and the machine; the stored
data does not (each unit is a pure function of (N, k, χ, params), and the
export sorts rows), so every executor gives the same tables.

This module imports neither the database nor Dask at import time: it is what
a process-pool or Dask worker unpickles.
"""

from __future__ import annotations

import os
import signal
import time
import traceback
from collections.abc import Iterator
from dataclasses import dataclass

Unit = tuple[int, int, int]  # (N, k, char_index)


@dataclass
class Outcome:
    unit: Unit
    record: object | None  # SpaceRecord, or None if the computation raised
    error: str | None  # the traceback text if it raised
    seconds: float  # wall time of compute_unit in the worker


def _test_unit_sleep(unit: Unit) -> None:
    # test hook, see DEVELOPERS.md: "N,k,SECONDS" (the unit (N, k, 0)) or "N,k,j,SECONDS"
    raw = os.environ.get("NFB_TEST_UNIT_SLEEP")
    if raw:
        *key, secs = raw.split(",")
        if tuple(int(x) for x in key) + (0,) * (3 - len(key)) == tuple(unit):
            time.sleep(float(secs))


def compute_task(unit: Unit, params: dict) -> Outcome:
    """Compute one unit (runs in a worker). Never raises: errors come back as text."""
    from builder.forms.record import Params, compute_unit

    N, k, c = unit
    t0 = time.perf_counter()
    try:
        _test_unit_sleep(unit)
        rec = compute_unit(N, k, Params(**params), char_index=c)
    except Exception:  # a bug in the math for this unit: report it, keep the run going
        return Outcome(unit, None, traceback.format_exc(), time.perf_counter() - t0)
    seconds = time.perf_counter() - t0
    if not getattr(rec, "seconds", 0):
        rec.seconds = seconds
    return Outcome(unit, rec, None, seconds)


BLAS_THREAD_VARS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


def _worker_init() -> None:
    # Ctrl-C goes to the whole process group: only the main process handles it.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    for var in BLAS_THREAD_VARS:
        os.environ.setdefault(var, "1")
    # If the main process dies (e.g. SIGKILL), do not keep computing for nobody.
    import threading

    parent = os.getppid()

    def watch() -> None:
        while True:
            time.sleep(1.0)
            if os.getppid() != parent:
                os._exit(1)

    threading.Thread(target=watch, daemon=True, name="nfb-parent-watch").start()


class Executor:
    name = "executor"

    def __init__(self) -> None:
        self.in_flight: list[Unit] = []
        self.on_change = None  # called with in_flight when it changes (progress display)

    def _changed(self, in_flight: list[Unit]) -> None:
        self.in_flight = in_flight
        if self.on_change is not None:
            self.on_change(in_flight)

    def run(self, units: list[Unit], params: dict) -> Iterator[Outcome]:
        raise NotImplementedError

    def close(self, cancel: bool = False) -> None:
        pass

    def describe(self) -> str:
        return self.name


class SerialExecutor(Executor):
    """Compute in the main process, one unit after the other."""

    name = "serial"

    def run(self, units: list[Unit], params: dict) -> Iterator[Outcome]:
        for unit in units:
            self._changed([unit])
            out = compute_task(unit, params)
            yield out
        self._changed([])


class PoolExecutor(Executor):
    """A local pool of ``workers`` processes (spawned, so safe with threads)."""

    name = "processes"

    def __init__(self, workers: int, ahead: int | None = None) -> None:
        super().__init__()
        import multiprocessing as mp
        from concurrent.futures import ProcessPoolExecutor

        self.workers = workers
        self.ahead = ahead or 2 * workers
        self._closed = False
        # one BLAS thread per worker: the workers already fill the cores (set before the
        # workers are spawned, since BLAS reads it when numpy is first imported)
        for var in BLAS_THREAD_VARS:
            os.environ.setdefault(var, "1")
        self.pool = ProcessPoolExecutor(
            max_workers=workers, mp_context=mp.get_context("spawn"), initializer=_worker_init
        )

    def describe(self) -> str:
        return f"{self.workers} local worker processes"

    def run(self, units: list[Unit], params: dict) -> Iterator[Outcome]:
        from concurrent.futures import FIRST_COMPLETED, wait

        order = {u: i for i, u in enumerate(units)}
        pending: dict = {}
        it = iter(units)

        def fill() -> None:
            while len(pending) < self.ahead:
                unit = next(it, None)
                if unit is None:
                    return
                pending[self.pool.submit(compute_task, unit, params)] = unit

        fill()
        while pending:
            self._changed(sorted(pending.values(), key=order.__getitem__)[: self.workers])
            done, _ = wait(list(pending), return_when=FIRST_COMPLETED)
            for fut in sorted(done, key=lambda f: order[pending[f]]):
                pending.pop(fut)
                out = fut.result()  # BrokenProcessPool (a worker died) propagates
                fill()
                yield out
        self.in_flight = []

    def close(self, cancel: bool = False) -> None:
        if self._closed:
            return
        self._closed = True
        if cancel:
            procs = list((getattr(self.pool, "_processes", None) or {}).values())
            self.pool.shutdown(wait=False, cancel_futures=True)
            for p in procs:  # stop units in progress now rather than after they finish
                try:
                    p.terminate()
                except Exception:
                    pass
            for p in procs:
                p.join(timeout=5)
        else:
            self.pool.shutdown(wait=True)


class DaskExecutor(Executor):
    """Units run as tasks on an existing Dask distributed cluster."""

    name = "dask"

    def __init__(self, address: str, ahead: int | None = None, timeout: float = 10) -> None:
        super().__init__()
        from distributed import Client

        self.address = address
        self.client = Client(address, timeout=timeout, set_as_default=False)
        threads = sum(self.client.nthreads().values()) or 1
        self.threads = threads
        self.ahead = ahead or max(2 * threads, 4)
        self._pending: dict = {}
        self._closed = False

    def describe(self) -> str:
        return f"Dask cluster {self.address} ({self.threads} worker threads)"

    def run(self, units: list[Unit], params: dict) -> Iterator[Outcome]:
        import uuid

        from distributed import as_completed

        token = uuid.uuid4().hex[:12]
        order = {u: i for i, u in enumerate(units)}
        it = iter(units)
        pending: dict = {}
        self._pending = pending
        ac = as_completed(loop=self.client.loop)

        def fill() -> None:
            while len(pending) < self.ahead:
                unit = next(it, None)
                if unit is None:
                    return
                N, k, c = unit
                fut = self.client.submit(
                    compute_task, unit, params, key=f"nfb-{token}-{N}-{k}-{c}", pure=False
                )
                pending[fut.key] = (fut, unit)
                ac.add(fut)

        fill()
        for fut in ac:
            _, unit = pending.pop(fut.key)
            self._changed(
                sorted((u for _, u in pending.values()), key=order.__getitem__)[: self.threads]
            )
            try:
                out = fut.result()
            except Exception:
                out = Outcome(unit, None, traceback.format_exc(), 0.0)
            fut.release()
            fill()
            yield out
        self.in_flight = []

    def close(self, cancel: bool = False) -> None:
        if self._closed:
            return
        self._closed = True
        try:
            if cancel and self._pending:
                self.client.cancel([f for f, _ in self._pending.values()])
            self.client.close(timeout=10)
        except Exception:
            pass


def make_executor(workers: int = 1, dask: str | None = None) -> Executor:
    if dask:
        return DaskExecutor(dask)
    if workers > 1:
        return PoolExecutor(workers)
    return SerialExecutor()
