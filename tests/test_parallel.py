"""Serial, --workers 2 and a real Dask cluster give byte-identical Parquet.

Levels ≤ 60, weights 2 and 4 (small bounds to keep the test quick), and a job
with every character (levels 11-20, weights 2 and 3). The Dask cluster is a
real `dask scheduler` and two `dask worker` processes on 127.0.0.1, started
from the installed dask CLI by tests/nfb_services.py.

The runs' own exports must agree byte for byte on newforms and eigenvalues;
spaces carries the measured `seconds`, so it is compared after
`nfb export --no-timings`, which must agree byte for byte too.
"""

from __future__ import annotations

import pytest

from tests.nfb_helpers import parquet_bytes, run_nfb, snapshot, sqlite_url
from tests.nfb_services import dask_cluster  # noqa: F401  (fixture)

FLAGS = [
    "--levels",
    "1-60",
    "--weights",
    "2,4",
    "--trace-bound",
    "40",
    "--ap-bound",
    "20",
    "--dim-cap",
    "6",
    "--progress",
    "none",
]


@pytest.fixture(scope="module")
def serial(tmp_path_factory):
    out = tmp_path_factory.mktemp("serial") / "out"
    r = run_nfb("run", *FLAGS, "--out", out)
    assert r.returncode == 0, r.stderr
    r = run_nfb("export", "--out", out, "--to", out / "notimes", "--no-timings")
    assert r.returncode == 0, r.stderr
    return out


def check_same(out, serial):
    a, b = parquet_bytes(serial / "parquet"), parquet_bytes(out / "parquet")
    assert a["newforms"] == b["newforms"]
    assert a["eigenvalues"] == b["eigenvalues"]
    r = run_nfb("export", "--out", out, "--to", out / "notimes", "--no-timings")
    assert r.returncode == 0, r.stderr
    assert parquet_bytes(serial / "notimes") == parquet_bytes(out / "notimes")
    assert snapshot(sqlite_url(out)) == snapshot(sqlite_url(serial))


def test_workers_2(tmp_path, serial):
    out = tmp_path / "out"
    r = run_nfb("run", *FLAGS, "--out", out, "--workers", "2")
    assert r.returncode == 0, r.stderr
    check_same(out, serial)


def test_dask_cluster(tmp_path, serial, dask_cluster):  # noqa: F811
    out = tmp_path / "out"
    r = run_nfb("run", *FLAGS, "--out", out, "--dask", dask_cluster)
    assert r.returncode == 0, r.stderr
    assert "Dask cluster" in r.stderr
    check_same(out, serial)


def test_dask_unreachable_is_bad_input(tmp_path):
    from tests.nfb_services import free_port

    out = tmp_path / "out"
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
        "--dask",
        f"tcp://127.0.0.1:{free_port()}",
        timeout=120,
    )
    assert r.returncode == 2, r.stderr
    assert "--dask" in r.stderr and "cannot reach the Dask scheduler" in r.stderr
    assert not out.exists()


CHAR_FLAGS = [
    "--levels",
    "11-20",
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
    "--progress",
    "none",
]


@pytest.fixture(scope="module")
def char_serial(tmp_path_factory):
    out = tmp_path_factory.mktemp("char_serial") / "out"
    r = run_nfb("run", *CHAR_FLAGS, "--out", out)
    assert r.returncode == 0, r.stderr
    r = run_nfb("export", "--out", out, "--to", out / "notimes", "--no-timings")
    assert r.returncode == 0, r.stderr
    return out


def test_characters_workers_2(tmp_path, char_serial):
    out = tmp_path / "out"
    r = run_nfb("run", *CHAR_FLAGS, "--out", out, "--workers", "2")
    assert r.returncode == 0, r.stderr
    check_same(out, char_serial)
    assert any(c for _, _, c in snapshot(sqlite_url(out))["spaces"])


def test_characters_dask_cluster(tmp_path, char_serial, dask_cluster):  # noqa: F811
    out = tmp_path / "out"
    r = run_nfb("run", *CHAR_FLAGS, "--out", out, "--dask", dask_cluster)
    assert r.returncode == 0, r.stderr
    check_same(out, char_serial)
