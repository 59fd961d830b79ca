"""Resume after SIGKILL (early, mid-unit, inside a commit) and after Ctrl-C (exit 130).

Each test starts a real `nfb run` subprocess, interrupts it, reruns the same
command and compares the tables with an uninterrupted run: identical content
hashes per unit, the same labels (no duplicate, none missing), the same row
counts and the same Parquet bytes for the newforms and eigenvalues.

The kill points are made deterministic with the test hooks of
builder/pipeline/executors.py (NFB_TEST_UNIT_SLEEP holds a unit mid-computation)
and builder/storage/writer.py (NFB_TEST_COMMIT_SLEEP holds a transaction open
after its rows are inserted).
"""

from __future__ import annotations

import signal
import sqlite3
import time

import pytest

from builder.pipeline.jobs import load_job
from builder.pipeline.run import run_job
from tests.nfb_helpers import (
    SMALL,
    SMALL_FLAGS,
    kill,
    parquet_bytes,
    run_nfb,
    snapshot,
    sqlite_url,
    start_nfb,
    wait_for_log,
)


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    d = tmp_path_factory.mktemp("ref") / "out"
    run_job(load_job(None, {**SMALL, "out": str(d)}), progress="none")
    return {"snap": snapshot(sqlite_url(d)), "pq": parquet_bytes(d / "parquet")}


def rerun_and_compare(out, reference, extra=()):
    r = run_nfb("run", *SMALL_FLAGS, "--out", out, *extra)
    assert r.returncode == 0, r.stderr
    snap = snapshot(sqlite_url(out))
    assert snap == reference["snap"]
    got = parquet_bytes(out / "parquet")
    assert got["newforms"] == reference["pq"]["newforms"]
    assert got["eigenvalues"] == reference["pq"]["eigenvalues"]
    return r


def db_rows(out, sql):
    con = sqlite3.connect(out / "newforms.sqlite")
    try:
        return con.execute(sql).fetchall()
    finally:
        con.close()


def test_sigkill_early(tmp_path, reference):
    out = tmp_path / "out"
    p = start_nfb("run", *SMALL_FLAGS, "--out", out)
    wait_for_log(out / "nfb.log", "start:", p)
    assert kill(p) == -signal.SIGKILL
    rerun_and_compare(out, reference)


def test_sigkill_mid_unit(tmp_path, reference):
    out = tmp_path / "out"
    p = start_nfb("run", *SMALL_FLAGS, "--out", out, env={"NFB_TEST_UNIT_SLEEP": "20,2,60"})
    wait_for_log(out / "nfb.log", "stored 19w2", p)
    time.sleep(0.3)  # now inside unit 20w2
    kill(p)
    done = db_rows(out, "select level from spaces where weight = 2 order by level")
    assert [r[0] for r in done] == list(range(1, 20))
    r = rerun_and_compare(out, reference)
    assert "computed" in r.stderr


def test_sigkill_inside_a_commit(tmp_path, reference):
    out = tmp_path / "out"
    p = start_nfb("run", *SMALL_FLAGS, "--out", out, env={"NFB_TEST_COMMIT_SLEEP": "23,2,60"})
    wait_for_log(out / "nfb.log", "sleeping inside the commit of 23w2", p)
    time.sleep(0.2)
    kill(p)
    # the interrupted transaction left nothing of 23w2 behind
    assert db_rows(out, "select count(*) from spaces where level = 23 and weight = 2") == [(0,)]
    assert db_rows(out, "select count(*) from newforms where level = 23 and weight = 2") == [(0,)]
    assert db_rows(out, "select count(*) from eigenvalues where label like '23w2-%'") == [(0,)]
    assert db_rows(out, "pragma integrity_check") == [("ok",)]
    assert db_rows(out, "select status from runs") == [("running",)]
    rerun_and_compare(out, reference)


def test_sigkill_with_workers_mid_run(tmp_path, reference):
    out = tmp_path / "out"
    p = start_nfb(
        "run",
        *SMALL_FLAGS,
        "--out",
        out,
        "--workers",
        "2",
        env={"NFB_TEST_UNIT_SLEEP": "15,4,60"},
    )
    wait_for_log(out / "nfb.log", "stored 14w4", p)
    kill(p)  # the main process; its spawned workers exit when their pipe closes
    rerun_and_compare(out, reference, ["--workers", "2"])


@pytest.mark.parametrize("workers", ["1", "2"])
def test_sigint_exits_130_and_resumes(tmp_path, reference, workers):
    out = tmp_path / "out"
    log = open(tmp_path / "stderr.txt", "w")
    p = start_nfb(
        "run",
        *SMALL_FLAGS,
        "--out",
        out,
        "--workers",
        workers,
        "--progress",
        "lines",
        env={"NFB_TEST_UNIT_SLEEP": "10,4,60"},
        log=log,
    )
    wait_for_log(out / "nfb.log", "stored 9w4", p)
    time.sleep(0.3)
    t0 = time.monotonic()
    rc = kill(p, signal.SIGINT)
    log.close()
    assert rc == 130
    assert time.monotonic() - t0 < 20  # a clean stop, not waiting for the held unit
    assert "Rerun the same command to resume" in (tmp_path / "stderr.txt").read_text()
    assert db_rows(out, "select status from runs") == [("interrupted",)]
    assert db_rows(out, "pragma integrity_check") == [("ok",)]
    rerun_and_compare(out, reference)


CHAR_FLAGS = [
    "--levels",
    "11-13",
    "--weights",
    "2,3",
    "--characters",
    "all",
    "--trace-bound",
    "40",
    "--ap-bound",
    "20",
    "--dim-cap",
    "6",
]


def test_sigkill_mid_character_unit(tmp_path):
    """Resume keys on (N, k, j): a unit with a character killed mid-computation is redone."""
    ref = tmp_path / "ref"
    assert run_nfb("run", *CHAR_FLAGS, "--out", ref).returncode == 0
    out = tmp_path / "out"
    p = start_nfb("run", *CHAR_FLAGS, "--out", out, env={"NFB_TEST_UNIT_SLEEP": "13,2,2,60"})
    wait_for_log(out / "nfb.log", "stored 13w2c1", p)
    time.sleep(0.3)  # now inside unit 13w2c2
    kill(p)
    done = db_rows(out, "select level, weight, char_index from spaces")
    assert sorted(done) == [(11, 2, 0), (11, 2, 2), (12, 2, 0), (12, 2, 3), (13, 2, 0), (13, 2, 1)]
    r = run_nfb("run", *CHAR_FLAGS, "--out", out)
    assert r.returncode == 0, r.stderr
    assert "8 units to compute (6 already done)" in r.stderr
    assert snapshot(sqlite_url(out)) == snapshot(sqlite_url(ref))
    got, want = parquet_bytes(out / "parquet"), parquet_bytes(ref / "parquet")
    assert got["newforms"] == want["newforms"] and got["eigenvalues"] == want["eigenvalues"]
