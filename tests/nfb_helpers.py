"""Shared helpers for the builder's tests (pipeline, storage, CLI)."""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

from sqlalchemy import func, select

# A small job: quick on 2 cores, still with old forms, several orbits, a_p and AL signs.
SMALL = {"levels": "1-30", "weights": "2,4", "trace_bound": 40, "ap_bound": 20, "dim_cap": 6}
SMALL_FLAGS = [
    "--levels",
    "1-30",
    "--weights",
    "2,4",
    "--trace-bound",
    "40",
    "--ap-bound",
    "20",
    "--dim-cap",
    "6",
]


def nfb_exe() -> list[str]:
    here = Path(sys.executable).parent / "nfb"
    if here.exists():
        return [str(here)]
    found = shutil.which("nfb")
    assert found, "the nfb console script is not installed (pip install -e .)"
    return [found]


def run_nfb(*args: str, env: dict | None = None, timeout: float = 600, cwd=None):
    return subprocess.run(
        nfb_exe() + [str(a) for a in args],
        capture_output=True,
        text=True,
        timeout=timeout,
        env={**os.environ, **(env or {})},
        cwd=cwd,
        stdin=subprocess.DEVNULL,
    )


def start_nfb(*args: str, env: dict | None = None, log=None) -> subprocess.Popen:
    return subprocess.Popen(
        nfb_exe() + [str(a) for a in args],
        stdout=log or subprocess.DEVNULL,
        stderr=subprocess.STDOUT if log else subprocess.DEVNULL,
        env={**os.environ, **(env or {})},
        stdin=subprocess.DEVNULL,
    )


def wait_for_log(path: Path, needle: str, proc: subprocess.Popen, timeout: float = 120) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if path.exists() and needle in path.read_text(errors="replace"):
            return
        if proc.poll() is not None:
            raise AssertionError(f"nfb ended (rc {proc.returncode}) before logging {needle!r}")
        time.sleep(0.05)
    raise AssertionError(f"timed out waiting for {needle!r} in {path}")


def kill(proc: subprocess.Popen, sig=signal.SIGKILL) -> int:
    proc.send_signal(sig)
    return proc.wait(timeout=60)


def snapshot(url: str) -> dict:
    """Everything that must agree between two builds of the same table."""
    from builder.storage.db import make_engine
    from builder.storage.models import Eigenvalue, Newform, Space

    engine = make_engine(url)
    try:
        with engine.connect() as conn:
            S, N, E = Space.__table__, Newform.__table__, Eigenvalue.__table__
            spaces = {
                (r.level, r.weight, r.char_index): (r.status, r.content_hash)
                for r in conn.execute(select(S))
            }
            labels = [r[0] for r in conn.execute(select(N.c.label).order_by(N.c.label))]
            n_forms = conn.execute(select(func.count()).select_from(N)).scalar()
            n_eigen = conn.execute(select(func.count()).select_from(E)).scalar()
            per_unit = {
                (r[0], r[1]): r[2]
                for r in conn.execute(
                    select(N.c.level, N.c.weight, func.count()).group_by(N.c.level, N.c.weight)
                )
            }
    finally:
        engine.dispose()
    return {
        "spaces": spaces,
        "labels": labels,
        "n_forms": n_forms,
        "n_eigen": n_eigen,
        "per_unit": per_unit,
    }


def sqlite_url(out: Path) -> str:
    return f"sqlite:///{(Path(out) / 'newforms.sqlite').resolve()}"


def parquet_bytes(root: Path) -> dict[str, bytes]:
    return {
        name: (Path(root) / name / "part-0.parquet").read_bytes()
        for name in ("spaces", "newforms", "eigenvalues")
    }


def tree_listing(path: Path) -> list[str]:
    return sorted(str(p.relative_to(path)) for p in Path(path).rglob("*"))
