"""Helpers for the tests of builder/tables (find, sql, verify, report): the small real table."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
from pathlib import Path

import pytest

from builder.checks.formulas import is_prime

REQUIRE = os.environ.get("NFB_REQUIRE_SERVICES") == "1"

# The small REAL table of these tests: levels ≤ 40, weights 2 and 4, small bounds
# (dim_cap 6 leaves a few weight-4 orbits without exact eigenvalues).
SMALL_TABLE = {
    "levels": "1-40",
    "weights": "2,4",
    "trace_bound": 40,
    "ap_bound": 40,
    "dim_cap": 6,
}


def build_small_table(out: Path) -> Path:
    """Build the table once with the library API (builder/pipeline/run.py)."""
    from builder.pipeline.jobs import load_job
    from builder.pipeline.run import run_job

    job = load_job(None, {**SMALL_TABLE, "out": str(out)})
    summary = run_job(job, progress="none")
    assert summary.status == "done", summary
    return out


_BUILT: dict[str, Path] = {}


def small_table(tmp_path_factory) -> Path:
    """The small real table, built once per test session (shared by the five test modules).

    Tests must not change it: corrupt a ``copy_table`` of it instead.
    """
    if "small" not in _BUILT:
        _BUILT["small"] = build_small_table(tmp_path_factory.mktemp("tables") / "small")
    return _BUILT["small"]


# A small REAL table with characters: every character orbit (builder/characters.py) of
# these (level, weight) units, stored through the Writer and exported. Odd weights have
# newforms only for odd characters; 13w2c4 (order 6), 13w4c2 (order 3, two orbits),
# 16w3c4 (order 4, an orbit of dimension 6 = 2 · 3) and the zero spaces of the other
# orbits. Everything computes in a few seconds.
CHAR_PARAMS = {"trace_bound": 40, "ap_bound": 20, "dim_cap": 6}
CHAR_UNITS = [(7, 3), (11, 2), (13, 2), (13, 4), (16, 3), (21, 2)]


def build_char_table(out: Path) -> Path:
    """Compute every character unit of CHAR_UNITS, commit, export (OUT/newforms.sqlite,
    OUT/parquet), like a run would."""
    from builder.characters import character_orbits
    from builder.forms.record import Params, compute_unit
    from builder.storage.db import init_schema, make_engine
    from builder.storage.parquet import export
    from builder.storage.writer import Writer

    out.mkdir(parents=True, exist_ok=True)
    params = Params(**CHAR_PARAMS)
    engine = make_engine(f"sqlite:///{out / 'newforms.sqlite'}")
    try:
        init_schema(engine, params)
        w = Writer(engine)
        for N, k in CHAR_UNITS:
            for chi in character_orbits(N):
                w.commit(compute_unit(N, k, params, char_index=chi.index))
        export(engine, out / "parquet")
    finally:
        engine.dispose()
    return out


def char_table(tmp_path_factory) -> Path:
    """The table with characters, built once per test session; tests must not change it."""
    if "char" not in _BUILT:
        _BUILT["char"] = build_char_table(tmp_path_factory.mktemp("tables") / "char")
    return _BUILT["char"]


def read_export(out: Path):
    """The table straight from its Parquet export with plain pandas (the tests' reference)."""
    import pandas as pd

    root = Path(out) / "parquet"
    nf = pd.read_parquet(root / "newforms")
    sp = pd.read_parquet(root / "spaces")
    ev = pd.read_parquet(root / "eigenvalues")
    return sp, nf, ev


def copy_table(src: Path, dst: Path) -> Path:
    """A private copy of a built table (database + export) that a test may corrupt."""
    shutil.copytree(src, dst)
    return dst


def copy_database(src_url: str, dst_url: str) -> None:
    """Copy every row of an nfb database into a new (empty) one, e.g. SQLite → PostgreSQL."""
    from sqlalchemy import select

    from builder.forms.record import Params
    from builder.storage.db import init_schema, make_engine, read_meta
    from builder.storage.models import Base

    src = make_engine(src_url)
    dst = make_engine(dst_url)
    try:
        meta = read_meta(src)
        init_schema(dst, Params(**json.loads(meta["params"])))
        with src.connect() as s, dst.begin() as d:
            for name in ("runs", "spaces", "newforms", "eigenvalues"):
                table = Base.metadata.tables[name]
                rows = [dict(r) for r in s.execute(select(table)).mappings()]
                if rows:
                    d.execute(table.insert(), rows)
    finally:
        src.dispose()
        dst.dispose()


def primes(B: int) -> list[int]:
    return [p for p in range(2, B + 1) if is_prime(p)]


# ----------------------------------------------------------------------------- Chromium


def chromium() -> str | None:
    for name in ("chromium", "chromium-browser", "google-chrome"):
        found = shutil.which(name)
        if found:
            return found
    return "/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None


def need_chromium() -> str:
    exe = chromium()
    if exe is None:
        reason = "Chromium is not installed (apt-get install chromium chromium-driver)"
        if REQUIRE:
            pytest.fail(f"{reason} (NFB_REQUIRE_SERVICES=1)")
        pytest.skip(reason)
    return exe


def chromium_run(exe: str, profile: Path, *args: str, timeout: float = 90) -> str:
    """Headless Chromium with a fresh profile and no network chatter; returns stdout."""
    cmd = [
        exe,
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--disable-dev-shm-usage",
        f"--user-data-dir={profile}",
        *args,
    ]
    r = subprocess.run(
        cmd, capture_output=True, text=True, timeout=timeout, stdin=subprocess.DEVNULL
    )
    assert r.returncode == 0, f"chromium failed ({r.returncode}): {r.stderr[-2000:]}"
    return r.stdout
