"""The `nfb` command line: exit codes, messages, nothing written on bad input."""

from __future__ import annotations

import errno
import json
import os
import sqlite3

import pytest
from typer.testing import CliRunner

from builder.cli import app
from tests.nfb_helpers import (
    SMALL_FLAGS,
    parquet_bytes,
    run_nfb,
    snapshot,
    sqlite_url,
    tree_listing,
)

runner = CliRunner()

SMALLER = [
    "--levels",
    "1-14",
    "--weights",
    "2,4",
    "--trace-bound",
    "40",
    "--ap-bound",
    "20",
    "--dim-cap",
    "6",
]


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    out = tmp_path_factory.mktemp("cli") / "out"
    r = run_nfb("run", *SMALLER, "--out", out)
    assert r.returncode == 0, r.stderr
    return out


@pytest.mark.parametrize("cmd", [[], ["run"], ["status"], ["export"], ["show"]])
def test_help(cmd):
    r = runner.invoke(app, [*cmd, "--help"])
    assert r.exit_code == 0 and "Usage" in r.output


BAD = [
    ('levels = "1-10"\nweights = [2]\ncolour = "red"\n', "colour", "unknown key"),
    ('levels = "0-10"\nweights = [2]\n', "levels", "must be ≥ 1"),
    ('levels = "9-3"\nweights = [2]\n', "levels", "reversed"),
    ("levels = []\nweights = [2]\n", "levels", "empty"),
    ('levels = "1-10"\nweights = [2, 5]\n', "weights", "odd"),
    ('levels = "1-10"\nweights = [0]\n', "weights", "< 2"),
    ('levels = "1-10"\nweights = [2]\nap_bound = 1\n', "ap_bound", "minimum 2"),
    (
        'levels = "1-10"\nweights = [2]\ntrace_bound = 10\nap_bound = 20\n',
        "trace_bound",
        "below ap_bound",
    ),
    ('levels = "1-10"\nweights = [2\n', None, "malformed TOML"),
    ('levels = "1-10"\nweights = [2]\ncharacters = "odd"\n', "characters", "cannot read"),
    ('levels = "1-10"\nweights = [3]\ncharacters = "order:3"\n', "weights", "odd order"),
]


@pytest.mark.parametrize("text,key,problem", BAD)
def test_bad_job_file_exit_2_nothing_written(tmp_path, text, key, problem):
    job = tmp_path / "bad.toml"
    job.write_text(text)
    r = run_nfb("run", job, "--out", tmp_path / "out")
    assert r.returncode == 2, (r.returncode, r.stderr)
    assert str(job) in r.stderr and problem in r.stderr, r.stderr
    if key:
        assert f"key '{key}'" in r.stderr
    assert tree_listing(tmp_path) == ["bad.toml"]


@pytest.mark.parametrize(
    "flags,key,problem",
    [
        (["--levels", "0-5", "--weights", "2"], "--levels", "≥ 1"),
        (["--levels", "5-1", "--weights", "2"], "--levels", "reversed"),
        (["--levels", "1-5", "--weights", "3"], "--weights", "odd"),
        (["--levels", "1-5", "--weights", "2", "--trace-bound", "0"], "--trace-bound", "minimum"),
        (["--levels", "1-5", "--weights", "2", "--db", "oracle://x"], "--db", "unsupported"),
        (["--levels", "1-5", "--weights", "2", "--characters", "some"], "--characters", "read"),
        (["--levels", "1-5", "--weights", "2", "--characters", "order:0"], "--characters", "min"),
        (["--levels", "1-2", "--weights", "3", "--characters", "all"], "--characters", "no unit"),
        (["--levels", "1-5", "--weights", "2,3"], "--weights", "trivial character"),
    ],
)
def test_bad_flags_exit_2(tmp_path, flags, key, problem):
    r = runner.invoke(app, ["run", *flags, "--out", str(tmp_path / "out")])
    assert r.exit_code == 2
    assert "command line" in r.output and f"key '{key}'" in r.output and problem in r.output
    assert not (tmp_path / "out").exists()


def test_typer_type_error_is_exit_2(tmp_path):
    r = runner.invoke(app, ["run", "--levels", "1", "--weights", "2", "--workers", "many"])
    assert r.exit_code == 2


def test_other_params_refused_then_extend(tmp_path, built):
    out = tmp_path / "copy"
    r = run_nfb("run", *SMALLER, "--out", out)
    assert r.returncode == 0
    before = snapshot(sqlite_url(out))
    listing = tree_listing(out)
    log_before = (out / "nfb.log").read_text()
    flags = [f if f != "40" else "60" for f in SMALLER]
    r = run_nfb("run", *flags, "--out", out)
    assert r.returncode == 2
    assert "newforms.sqlite" in r.stderr and "key 'trace_bound'" in r.stderr
    assert "--extend" in r.stderr
    assert snapshot(sqlite_url(out)) == before and tree_listing(out) == listing
    assert (out / "nfb.log").read_text() == log_before
    r = run_nfb("run", *flags, "--out", out, "--extend")
    assert r.returncode == 0, r.stderr
    con = sqlite3.connect(out / "newforms.sqlite")
    assert con.execute("select distinct trace_bound from spaces").fetchall() == [(60,)]
    assert (
        json.loads(con.execute("select value from meta where key='params'").fetchone()[0])[
            "trace_bound"
        ]
        == 60
    )
    con.close()


def test_schema_version_mismatch_exit_2(tmp_path, built):
    out = tmp_path / "v"
    run_nfb(
        "run",
        "--levels",
        "1-3",
        "--weights",
        "2",
        "--trace-bound",
        "20",
        "--ap-bound",
        "10",
        "--out",
        out,
    )
    con = sqlite3.connect(out / "newforms.sqlite")
    con.execute("update meta set value = '999' where key = 'schema_version'")
    con.commit()
    con.close()
    r = run_nfb(
        "run",
        "--levels",
        "1-3",
        "--weights",
        "2",
        "--trace-bound",
        "20",
        "--ap-bound",
        "10",
        "--out",
        out,
    )
    assert r.returncode == 2 and "schema version 999" in r.stderr and "upgrade nfb" in r.stderr
    r = run_nfb("status", "--out", out)
    assert r.returncode == 2 and "schema version 999" in r.stderr


def test_status_show_export(built, tmp_path):
    r = run_nfb("status", "--out", built)
    assert r.returncode == 0, r.stderr
    assert "done" in r.stdout and "newform orbits" in r.stdout
    r = run_nfb("show", "11w2-1", "--out", built)
    assert r.returncode == 0, r.stderr
    assert "11w2-1" in r.stdout and "Atkin–Lehner" in r.stdout
    r = run_nfb("show", "11w2-1", "--out", built, "--json")
    doc = json.loads(r.stdout)
    assert doc["label"] == "11w2-1" and doc["traces"][0] == doc["dim"] == 1
    r = run_nfb("show", "11w2-9", "--out", built)
    assert r.returncode == 2 and "no newform '11w2-9'" in r.stderr
    r = run_nfb("export", "--out", built, "--to", tmp_path / "pq", "--no-timings")
    assert r.returncode == 0, r.stderr
    r2 = run_nfb("export", "--out", built, "--to", tmp_path / "pq2", "--no-timings")
    assert r2.returncode == 0
    assert parquet_bytes(tmp_path / "pq") == parquet_bytes(tmp_path / "pq2")
    r = run_nfb("status", "--out", tmp_path / "nothing-here")
    assert r.returncode == 2 and "no nfb database" in r.stderr


def test_dry_run_prints_plan_writes_nothing(tmp_path, built):
    r = run_nfb("run", *SMALL_FLAGS, "--out", tmp_path / "o", "--dry-run")
    assert r.returncode == 0 and "to compute" in r.stderr and "estimate" in r.stderr
    assert tree_listing(tmp_path) == []
    # on an existing db: the plan counts what is done and estimates from measured rates
    r = run_nfb("run", *SMALL_FLAGS, "--out", built, "--dry-run")
    assert r.returncode == 0
    assert "28 done" in r.stderr and "fitted on" in r.stderr


def test_unwritable_output_directory_exit_2(tmp_path, built, monkeypatch):
    # a real OSError: the output directory would be below a regular file
    (tmp_path / "f").write_text("")
    r = run_nfb("run", *SMALLER, "--out", tmp_path / "f" / "out")
    assert r.returncode == 2 and "not a directory" in r.stderr and "--out" in r.stderr
    # an existing table in a directory that became read-only (root ignores mode bits,
    # so the refusal is injected at the access check): clear error, db untouched
    out = tmp_path / "ro"
    r = run_nfb(
        "run",
        "--levels",
        "1-6",
        "--weights",
        "2",
        "--trace-bound",
        "20",
        "--ap-bound",
        "10",
        "--out",
        out,
    )
    assert r.returncode == 0
    before, listing = snapshot(sqlite_url(out)), tree_listing(out)
    real_access = os.access
    monkeypatch.setattr(
        os,
        "access",
        lambda p, m, **k: False if str(p) == str(out) and m & os.W_OK else real_access(p, m, **k),
    )
    res = runner.invoke(
        app,
        [
            "run",
            "--levels",
            "1-8",
            "--weights",
            "2",
            "--trace-bound",
            "20",
            "--ap-bound",
            "10",
            "--out",
            str(out),
        ],
    )
    assert res.exit_code == 2 and "not writable" in res.output
    monkeypatch.undo()
    assert snapshot(sqlite_url(out)) == before and tree_listing(out) == listing


def test_full_disk_during_commit_exit_3_db_intact(tmp_path):
    out = tmp_path / "o"
    r = run_nfb("run", *SMALLER, "--out", out, env={"NFB_TEST_COMMIT_FAIL": "9,2,ENOSPC"})
    assert r.returncode == 3, r.stderr
    assert "disk is full" in r.stderr and "intact" in r.stderr and "rerun" in r.stderr
    assert "Traceback" not in r.stderr
    con = sqlite3.connect(out / "newforms.sqlite")
    assert con.execute("pragma integrity_check").fetchall() == [("ok",)]
    levels = [r[0] for r in con.execute("select level from spaces order by level")]
    assert levels == list(range(1, 9))
    assert con.execute("select status from runs").fetchall() == [("error",)]
    con.close()
    r = run_nfb("run", *SMALLER, "--out", out)
    assert r.returncode == 0
    fresh = tmp_path / "fresh"
    assert run_nfb("run", *SMALLER, "--out", fresh).returncode == 0
    assert snapshot(sqlite_url(out)) == snapshot(sqlite_url(fresh))


def test_full_disk_during_export_exit_3(tmp_path, built, monkeypatch):
    import pyarrow.parquet as pq

    def full(*a, **k):
        raise OSError(errno.ENOSPC, "No space left on device")

    before = snapshot(sqlite_url(built))
    monkeypatch.setattr(pq.ParquetWriter, "write_table", full)
    res = runner.invoke(app, ["export", "--out", str(built), "--to", str(tmp_path / "x")])
    assert res.exit_code == 3 and "disk is full" in res.output and "intact" in res.output
    monkeypatch.undo()
    assert snapshot(sqlite_url(built)) == before


def test_characters_dry_run_and_status(tmp_path, built):
    r = runner.invoke(
        app,
        [
            "run",
            "--levels",
            "11-13",
            "--weights",
            "2,3",
            "--characters",
            "all",
            "--out",
            str(tmp_path / "o"),
            "--dry-run",
        ],
    )
    assert r.exit_code == 0, r.output
    assert "characters all" in r.output and "14 to compute" in r.output
    assert "weight 3: 6 units (0 trivial χ, 6 nontrivial χ)" in r.output
    assert not (tmp_path / "o").exists()
    # status with a job file that selects characters: what is done, what is missing
    job = tmp_path / "chars.toml"
    job.write_text(
        'levels = "1-14"\nweights = [2]\ncharacters = { order = [1, 2] }\n'
        "trace_bound = 40\nap_bound = 20\ndim_cap = 6\n"
    )
    r = runner.invoke(app, ["status", str(job), "--out", str(built)])
    assert r.exit_code == 0, r.output
    assert "(characters order:1,2): 14 units done, 5 to compute" in r.output
    assert "5 with a nontrivial character" in r.output


def test_show_a_newform_with_character(tmp_path_factory):
    """`nfb show` of an orbit with a nontrivial character names the character, says that
    the signs are not defined (not ±1 for χ ≠ 1; schema/README.md) and prints the
    Atkin–Lehner pseudo-eigenvalue where χ is trivial at p: 21w2c4-1 (cond χ = 7) has
    w_3 = x with x² − x + 1 = 0 (w_3·a_3 = −1, a_3 = x − 1: Atkin–Li, λ_p = −ā_p)."""
    from tests.tables_helpers import char_table

    out = char_table(tmp_path_factory)
    r = run_nfb("show", "13w2c4-1", "--out", out)
    assert r.returncode == 0, r.stderr
    assert "character orbit 4: order 6, conductor 13, even" in r.stdout
    assert "not defined for a nontrivial χ" in r.stdout and "pseudo" not in r.stdout
    r = run_nfb("show", "21w2c4-1", "--out", out)
    assert "field polynomial (constant first) [1, -1, 1]" in r.stdout
    assert "W_3 pseudo-eigenvalue w = 3^(k/2−1)·λ (power basis): ['0', '1']" in r.stdout
    assert "a_3 = ['-1', '1']" in r.stdout
