"""Job files and flags → validated jobs (builder/pipeline/jobs.py)."""

from __future__ import annotations

from pathlib import Path

import pytest

from builder.forms.record import Params
from builder.pipeline.errors import BadInput
from builder.pipeline.jobs import (
    TRIVIAL,
    CharacterSelection,
    character_table,
    compress_levels,
    load_job,
    parse_characters,
    parse_levels,
    parse_weights,
)

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
    c = load_job(ROOT / "jobs" / "characters.toml")
    assert c.characters.spec == "all" and c.weights == (2, 3, 4) and c.levels == tuple(range(1, 41))
    assert q.characters == o.characters == TRIVIAL


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
    # characters
    ('levels = "1-10"\nweights = [2]\ncharacters = "some"\n', "characters", ["cannot read"]),
    ('levels = "1-10"\nweights = [2]\ncharacters = "orders:2"\n', "characters", ["'order'"]),
    ('levels = "1-10"\nweights = [2]\ncharacters = "order:"\n', "characters", ["no order"]),
    ('levels = "1-10"\nweights = [2]\ncharacters = "order:0"\n', "characters", ["minimum 1"]),
    ('levels = "1-10"\nweights = [2]\ncharacters = "index:-1"\n', "characters", ["minimum 0"]),
    ('levels = "1-10"\nweights = [2]\ncharacters = "index:4-2"\n', "characters", ["reversed"]),
    ('levels = "1-10"\nweights = [2]\ncharacters = "order:2,x"\n', "characters", ["'x'"]),
    ('levels = "1-10"\nweights = [2]\ncharacters = 2\n', "characters", ['"all"']),
    ('levels = "1-10"\nweights = [2]\ncharacters = [1, 2]\n', "characters", ['"order:1,2,4"']),
    (
        'levels = "1-10"\nweights = [2]\ncharacters = { order = [2], index = [1] }\n',
        "characters",
        ["exactly one key"],
    ),
    ('levels = "1-10"\nweights = [2]\ncharacters = { degree = 2 }\n', "characters", ["order"]),
    ('levels = "1-10"\nweights = [2]\ncharacters = { order = [] }\n', "characters", ["empty"]),
    (
        'levels = "1-10"\nweights = [2, 3]\ncharacters = "trivial"\n',
        "weights",
        ["weight 3 is odd (trivial character"],
    ),
    (
        'levels = "1-10"\nweights = [3]\ncharacters = "order:1,3,5"\n',
        "weights",
        ["weight 3 is odd", "order:1,3,5", "odd order"],
    ),
    ('levels = "1-10"\nweights = [3]\ncharacters = "index:0"\n', "weights", ["trivial"]),
    # levels 1, 2 have only the (even) trivial character: nothing for weight 3
    ('levels = "1-2"\nweights = [3]\ncharacters = "all"\n', "characters", ["no unit"]),
    ('levels = "1-10"\nweights = [2]\ncharacters = "index:40"\n', "characters", ["no unit"]),
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


@pytest.mark.parametrize(
    "flags,word",
    [
        ({"levels": "1-5", "weights": "2", "characters": "every"}, "cannot read"),
        ({"levels": "1-5", "weights": "3", "characters": "order:3"}, "odd order"),
        ({"levels": "1-2", "weights": "3", "characters": "all"}, "no unit"),
    ],
)
def test_bad_characters_flag(flags, word):
    with pytest.raises(BadInput) as e:
        load_job(None, flags)
    key = "--weights" if word == "odd order" else "--characters"
    assert "command line" in str(e.value) and f"key '{key}'" in str(e.value), str(e.value)
    assert word in str(e.value) and e.value.exit_code == 2


def test_character_forms():
    assert parse_characters("trivial") == TRIVIAL == CharacterSelection()
    assert parse_characters(" ALL ").spec == "all"
    assert parse_characters("order:4,1,2,2").spec == "order:1,2,4"
    assert parse_characters("order: 1-4").values == (1, 2, 3, 4)
    assert parse_characters("index:3, 0").spec == "index:0,3"
    assert parse_characters({"order": [2, "4-5"]}).spec == "order:2,4,5"
    assert parse_characters({"index": [0, 3]}) == parse_characters("index:0,3")
    assert parse_characters({"order": "1,2"}).spec == "order:1,2"
    # only the trivial character: the same as "trivial"
    assert parse_characters("order:1") == TRIVIAL and parse_characters("index:0") == TRIVIAL
    assert not TRIVIAL.may_be_odd and parse_characters("all").may_be_odd
    assert not parse_characters("order:3,5").may_be_odd
    assert parse_characters("order:3,4").may_be_odd and parse_characters("index:0,1").may_be_odd


def test_characters_in_file_and_flag(tmp_path):
    p = write(tmp_path, 'levels = "13"\nweights = [2]\ncharacters = { order = [1, 2] }\n')
    job = load_job(p)
    assert job.characters.spec == "order:1,2" and job.units() == [(13, 2, 0), (13, 2, 1)]
    assert job.describe()["characters"] == "order:1,2"
    job = load_job(p, {"characters": "all"})  # the flag wins
    assert job.describe()["characters"] == "all"
    # default: trivial, and describe() says so
    job = load_job(None, {"levels": "13", "weights": "2"})
    assert job.characters == TRIVIAL and job.describe()["characters"] == "trivial"
    assert job.units() == [(13, 2, 0)]


def test_character_table_agrees_with_builder_characters():
    from builder.characters import character_orbits

    for N in [*range(1, 121), 180, 252, 341]:
        expect = tuple((o.index, o.order, o.parity) for o in character_orbits(N))
        assert character_table(N) == expect, N


def test_units_level_13_all_characters():
    # (Z/13)^× is cyclic of order 12: orbits of orders 1, 2, 3, 4, 6, 12 (indices 0..5);
    # the even ones (χ(−1) = 1) have order dividing 6, and there are φ(13)/2 = 6 even
    # characters: 1 + 1 + 2 + 2 in the orbits of orders 1, 2, 3, 6
    job = load_job(None, {"levels": "13", "weights": "2", "characters": "all"})
    assert job.units() == [(13, 2, 0), (13, 2, 1), (13, 2, 2), (13, 2, 4)]
    orders = {j: m for j, m, _ in character_table(13)}
    assert [orders[j] for _, _, j in job.units()] == [1, 2, 3, 6]
    degrees = {1: 1, 2: 1, 3: 2, 6: 2}
    assert sum(degrees[orders[j]] for _, _, j in job.units()) == 6
    # weight 3: the odd orbits, orders 4 and 12 (2 + 4 = 6 odd characters)
    job = load_job(None, {"levels": "13", "weights": "3", "characters": "all"})
    assert job.units() == [(13, 3, 3), (13, 3, 5)]


def test_units_order_index_and_canonical_order():
    job = load_job(None, {"levels": "11-13", "weights": "3,2", "characters": "all"})
    units = job.units()
    assert units == sorted(units, key=lambda u: (u[1], u[0], u[2]))
    assert units == [
        (11, 2, 0), (11, 2, 2), (12, 2, 0), (12, 2, 3), (13, 2, 0), (13, 2, 1), (13, 2, 2),
        (13, 2, 4), (11, 3, 1), (11, 3, 3), (12, 3, 1), (12, 3, 2), (13, 3, 3), (13, 3, 5),
    ]  # fmt: skip
    # order:2 — the quadratic characters of the right parity
    job = load_job(None, {"levels": "11-13", "weights": "2,3", "characters": "order:2"})
    assert job.units() == [(12, 2, 3), (13, 2, 1), (11, 3, 1), (12, 3, 1), (12, 3, 2)]
    # index:0,3 — index 3 where it exists with the right parity; 0 only for even k
    job = load_job(None, {"levels": "3,11-13", "weights": "2,3", "characters": "index:0,3"})
    assert job.units() == [
        (3, 2, 0), (11, 2, 0), (12, 2, 0), (12, 2, 3), (13, 2, 0), (11, 3, 3), (13, 3, 3)
    ]  # fmt: skip
    # every planned unit has χ(−1) = (−1)^k
    job = load_job(None, {"levels": "1-60", "weights": "2,3", "characters": "all"})
    for N, k, j in job.units():
        assert character_table(N)[j][2] == (-1) ** k


def test_odd_weights_need_odd_characters():
    job = load_job(None, {"levels": "1-10", "weights": "3", "characters": "order:2"})
    assert all(k == 3 for _, k, _ in job.units()) and job.units()
    with pytest.raises(BadInput, match=r"weight 3 is odd \(trivial character"):
        parse_weights("2,3")
    assert parse_weights("2,3", characters=parse_characters("all")) == (2, 3)


def test_ap_bound_default_vs_small_trace_bound():
    # trace_bound 50 from a flag, ap_bound from the default 100: the flag is named
    with pytest.raises(BadInput) as e:
        load_job(None, {"levels": "1", "weights": "2", "trace_bound": 50})
    assert "--trace-bound" in str(e.value)
