"""Real services for the builder's tests: a throwaway PostgreSQL server and a Dask cluster.

Import the fixtures into the one test module that needs them (each fixture is
session-scoped and starts its service once). Without the binaries the tests
are skipped with a visible reason — unless NFB_REQUIRE_SERVICES=1 (as in
.ci/run), where a missing service is a failure.
"""

from __future__ import annotations

import glob
import os
import pwd
import shutil
import socket
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pytest

REQUIRE = os.environ.get("NFB_REQUIRE_SERVICES") == "1"


def unavailable(reason: str):
    if REQUIRE:
        pytest.fail(f"{reason} (NFB_REQUIRE_SERVICES=1)")
    pytest.skip(reason)


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


# ----------------------------------------------------------------------------- PostgreSQL


def _pg_bindir() -> Path | None:
    found = sorted(
        glob.glob("/usr/lib/postgresql/*/bin/initdb"),
        key=lambda p: int(Path(p).parts[-3]) if Path(p).parts[-3].isdigit() else 0,
    )
    return Path(found[-1]).parent if found else None


class PgServer:
    def __init__(self, bindir: Path) -> None:
        self.bindir = bindir
        self.port = free_port()
        self.root = Path(tempfile.mkdtemp(prefix="nfb-pg-"))
        self.data = self.root / "data"
        self.as_user: list[str] = []
        if os.geteuid() == 0:  # initdb refuses root: run the server as 'postgres'
            try:
                pw = pwd.getpwnam("postgres")
            except KeyError:
                unavailable("running as root and there is no 'postgres' user for the server")
            os.chown(self.root, pw.pw_uid, pw.pw_gid)
            runuser = shutil.which("runuser")
            self.as_user = (
                [runuser, "-u", "postgres", "--"] if runuser else ["su", "postgres", "-c"]
            )
        self.proc_started = False

    def _run(self, *cmd: str) -> subprocess.CompletedProcess:
        full = [str(c) for c in cmd]
        if self.as_user and self.as_user[0] == "su":
            full = self.as_user + [" ".join(full)]
        else:
            full = self.as_user + full
        return subprocess.run(full, capture_output=True, text=True, timeout=120)

    def start(self) -> None:
        r = self._run(
            self.bindir / "initdb",
            "-D",
            self.data,
            "-U",
            "nfb",
            "--auth=trust",
            "-E",
            "UTF8",
            "--no-locale",
        )
        if r.returncode:
            raise RuntimeError(f"initdb failed: {r.stdout}\n{r.stderr}")
        opts = (
            f"-p {self.port} -k {self.root} -c listen_addresses=127.0.0.1 "
            "-c fsync=off -c synchronous_commit=off -c full_page_writes=off"
        )
        r = self._run(
            self.bindir / "pg_ctl",
            "-D",
            self.data,
            "-o",
            opts,
            "-l",
            self.root / "log",
            "-w",
            "start",
        )
        if r.returncode:
            log = (self.root / "log").read_text() if (self.root / "log").exists() else ""
            raise RuntimeError(f"pg_ctl start failed: {r.stdout}\n{r.stderr}\n{log}")
        self.proc_started = True

    def stop(self) -> None:
        if self.proc_started:
            self._run(self.bindir / "pg_ctl", "-D", self.data, "-m", "fast", "-w", "stop")
        shutil.rmtree(self.root, ignore_errors=True)

    def url(self, db: str = "postgres") -> str:
        return f"postgresql+psycopg://nfb@127.0.0.1:{self.port}/{db}"

    def create_database(self, name: str) -> str:
        import psycopg

        with psycopg.connect(
            f"host=127.0.0.1 port={self.port} user=nfb dbname=postgres", autocommit=True
        ) as conn:
            conn.execute(f'DROP DATABASE IF EXISTS "{name}"')
            conn.execute(f'CREATE DATABASE "{name}"')
        return self.url(name)


@pytest.fixture(scope="session")
def pg_server():
    bindir = _pg_bindir()
    if bindir is None:
        unavailable("PostgreSQL server binaries not installed (apt-get install postgresql)")
    try:
        import psycopg  # noqa: F401
    except ImportError:
        unavailable("psycopg not installed (pip install -e '.[test]')")
    server = PgServer(bindir)
    try:
        server.start()
    except RuntimeError as e:
        server.stop()
        unavailable(f"could not start a PostgreSQL server: {e}")
    yield server
    server.stop()


_db_counter = [0]


@pytest.fixture
def pg_url(pg_server):
    """A fresh, empty PostgreSQL database for one test."""
    _db_counter[0] += 1
    return pg_server.create_database(f"nfb_test_{os.getpid()}_{_db_counter[0]}")


# ----------------------------------------------------------------------------- Dask


def _dask_cli() -> str | None:
    here = Path(sys.executable).parent / "dask"
    if here.exists():
        return str(here)
    return shutil.which("dask")


@pytest.fixture(scope="session")
def dask_cluster(tmp_path_factory):
    """A real `dask scheduler` and two `dask worker` processes on 127.0.0.1."""
    cli = _dask_cli()
    if cli is None:
        unavailable("the dask CLI is not installed (pip install 'dask[distributed]')")
    try:
        from distributed import Client
    except ImportError:
        unavailable("dask.distributed is not importable")
    logdir = tmp_path_factory.mktemp("dask")
    port = free_port()
    address = f"tcp://127.0.0.1:{port}"
    procs: list[subprocess.Popen] = []
    env = {**os.environ, "OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1"}

    def start(name: str, *args: str) -> None:
        f = open(logdir / f"{name}.log", "w")
        procs.append(
            subprocess.Popen([cli, *args], stdout=f, stderr=subprocess.STDOUT, env=env, cwd=logdir)
        )

    start("scheduler", "scheduler", "--host", "127.0.0.1", "--port", str(port), "--no-dashboard")
    for i in range(2):
        start(
            f"worker{i}",
            "worker",
            address,
            "--host",
            "127.0.0.1",
            "--nworkers",
            "1",
            "--nthreads",
            "1",
            "--no-dashboard",
            "--memory-limit",
            "0",
            "--name",
            f"nfb-test-{i}",
        )
    try:
        deadline = time.monotonic() + 90
        client = None
        while time.monotonic() < deadline:
            if any(p.poll() is not None for p in procs):
                break
            try:
                client = client or Client(address, timeout=5, set_as_default=False)
                if len(client.nthreads()) >= 2:
                    break
            except OSError:
                pass
            time.sleep(0.5)
        ok = client is not None and len(client.nthreads()) >= 2
        if client is not None:
            client.close()
        if not ok:
            logs = "\n".join(
                f"--- {p.name}\n{p.read_text()[-2000:]}" for p in sorted(logdir.glob("*.log"))
            )
            unavailable(f"the Dask cluster did not come up at {address}:\n{logs}")
        yield address
    finally:
        for p in reversed(procs):
            if p.poll() is None:
                p.terminate()
        for p in procs:
            try:
                p.wait(timeout=20)
            except subprocess.TimeoutExpired:
                p.kill()
                p.wait()
