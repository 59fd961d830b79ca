"""Job files and flags → validated jobs (builder/pipeline/jobs.py)."""

from __future__ import annotations

from pathlib import Path

import pytest

from builder.forms.record import Params
from builder.pipeline.errors import BadInput
from builder.pipeline.jobs import compress_levels, load_job, parse_levels, parse_weights

ROOT = Path(__file__).resolve().parents[1]


def write(tmp_path: Path, text: str, name: str = "job.toml") -> Path:
    p = tmp_path / name
    p.write_text(text)
    return p


def test_level_forms():
    assert parse_levels("1-5") == (1, 2, 3, 4, 5)
    assert parse_levels(37) == (37,)
    assert parse_levels("1-3,7, 9-10") == (1, 2, 3, 7, 9, 10)
    assert parse_levels([11, "1-2", 11]) == (1, 2, 11)
    assert parse_levels("5..6") == (5, 6)
    assert compress_levels((1, 2, 3, 7, 9, 10)) == "1-3,7,9-10"


def test_weight_forms():
    assert parse_weights("2,4") == (2, 4)
    assert parse_weights([4, 2, 4]) == (2, 4)
    assert parse_weights(12) == (12,)


def test_file_and_flag_override(tmp_path):
    p = write(
        tmp_path,
        'name = "t"\nlevels = "1-10"\nweights = [2, 4]\ntrace_bound = 200\nap_bound = 50\n'
        'dim_cap = 4\nworkers = 3\nout = "o"\n',
    )
    job = load_job(p)
    assert job.levels == tuple(range(1, 11)) and job.weights == (2, 4)
    assert job.params == Params(200, 50, 4) and job.workers == 3 and job.name == "t"
    assert job.units()[:2] == [(1, 2, 0), (2, 2, 0)] and job.units()[-1] == (10, 4, 0)
    job2 = load_job(p, {"levels": "5", "trace_bound": 300, "workers": None, "out": "x"})
    assert job2.levels == (5,) and job2.params.trace_bound == 300 and job2.workers == 3
    assert str(job2.out) == "x"
    assert job2.db_url.startswith("sqlite:///") and job2.db_url.endswith("x/newforms.sqlite")
    # a flag --dask replaces the file's workers
    job3 = load_job(p, {"dask": "tcp://127.0.0.1:8786"})
    assert job3.dask == "tcp://127.0.0.1:8786" and job3.workers == 1


def test_flags_only():
    job = load_job(None, {"levels": "1-100", "weights": "2,4", "out": "d"})
    assert len(job.units()) == 200 and job.params == Params()
    assert job.source == "command line"


def test_shipped_jobs():
    q = load_job(ROOT / "jobs" / "quickstart.toml")
    assert q.weights == (2, 4) and q.levels == tuple(range(1, 101))
    o = load_job(ROOT / "jobs" / "overnight.toml")
    assert o.weights == (2,) and o.levels == tuple(range(1, 10001))
    text = (ROOT / "jobs" / "overnight.toml").read_text()
    assert "expected run time" in text.lower()


BAD_FILES = [
    # (toml text, key, words the problem must contain)
    ('levels = "1-10"\nweights = [2]\nlevles = 3\n', "levles", ["unknown key", "levels"]),
    ('levels = "0-10"\nweights = [2]\n', "levels", ["≥ 1", "0"]),
    ("levels = [-3]\nweights = [2]\n", "levels", ["≥ 1", "-3"]),
    ('levels = "10-5"\nweights = [2]\n', "levels", ["reversed", "10-5"]),
    ("levels = []\nweights = [2]\n", "levels", ["empty"]),
    ('levels = ""\nweights = [2]\n', "levels", ["empty"]),
    ('levels = "1-x"\nweights = [2]\n', "levels", ["1-x"]),
    ('levels = "1-10"\nweights = [3]\n', "weights", ["odd", "3"]),
    ('levels = "1-10"\nweights = [0]\n', "weights", ["< 2"]),
    ('levels = "1-10"\nweights = []\n', "weights", ["empty"]),
    ('levels = "1-10"\nweights = [2]\ntrace_bound = 0\n', "trace_bound", ["minimum 1"]),
    ('levels = "1-10"\nweights = [2]\nap_bound = 1\n', "ap_bound", ["minimum 2"]),
    ('levels = "1-10"\nweights = [2]\ndim_cap = -1\n', "dim_cap", ["minimum 0"]),
    (
        'levels = "1-10"\nweights = [2]\ntrace_bound = 50\nap_bound = 100\n',
        "trace_bound",
        ["below ap_bound", "trace_bound ≥ ap_bound"],
    ),
    ('levels = "1-10"\nweights = [2]\ntrace_bound = "many"\n', "trace_bound", ["integer"]),
    ('levels = "1-10"\nweights = [2]\nworkers = 0\n', "workers", ["minimum 1"]),
    ('levels = "1-10"\nweights = [2]\ndb = "mysql://x/y"\n', "db", ["unsupported"]),
    ('levels = "1-10"\nweights = [2]\ndask = "localhost"\n', "dask", ["tcp://"]),
    ("weights = [2]\n", "levels", ["no levels"]),
    ('levels = "1-10"\n[weights]\nk = 2\n', "weights", ["table"]),
]


@pytest.mark.parametrize("text,key,words", BAD_FILES)
def test_bad_job_file_names_file_key_problem(tmp_path, text, key, words):
    p = write(tmp_path, text)
    with pytest.raises(BadInput) as e:
        load_job(p)
    msg = str(e.value)
    assert str(p) in msg and f"key '{key}'" in msg, msg
    for w in words:
        assert w in msg, (w, msg)
    assert e.value.exit_code == 2


def test_malformed_toml(tmp_path):
    p = write(tmp_path, 'levels = "1-10\nweights = [2]\n')
    with pytest.raises(BadInput) as e:
        load_job(p)
    assert str(p) in str(e.value) and "malformed TOML" in str(e.value)
    assert "line 1" in str(e.value)


def test_missing_file(tmp_path):
    with pytest.raises(BadInput, match="no such job file"):
        load_job(tmp_path / "nope.toml")


@pytest.mark.parametrize(
    "flags,key,word",
    [
        ({"levels": "5-1", "weights": "2"}, "--levels", "reversed"),
        ({"levels": "1-5", "weights": "2,5"}, "--weights", "odd"),
        ({"levels": "1-5", "weights": "2", "ap_bound": 1}, "--ap-bound", "minimum 2"),
        ({"levels": "1-5", "weights": "2", "dask": "tcp://h:1", "workers": 2}, "--dask", "cannot"),
    ],
)
def test_bad_flags(flags, key, word):
    with pytest.raises(BadInput) as e:
        load_job(None, flags)
    assert "command line" in str(e.value) and f"key '{key}'" in str(e.value)
    assert word in str(e.value)


def test_ap_bound_default_vs_small_trace_bound():
    # trace_bound 50 from a flag, ap_bound from the default 100: the flag is named
    with pytest.raises(BadInput) as e:
        load_job(None, {"levels": "1", "weights": "2", "trace_bound": 50})
    assert "--trace-bound" in str(e.value)
