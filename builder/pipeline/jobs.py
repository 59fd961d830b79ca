"""Job files (TOML) and command-line flags → one validated ``Job``.

A job file is a flat TOML table; every key is optional and a flag of
``nfb run`` overrides it::

    name        = "quickstart"           # free text, shown in logs
    description = "..."                  # free text
    levels      = "1-100"                # "a-b", an int, "1-50,77", or a list of those
    weights     = [2, 4]                 # an int ≥ 2, a list, or "2,4" (odd: see characters)
    characters  = "trivial"              # which Dirichlet characters χ mod N (below)
    trace_bound = 1000                   # Tr a_n for n = 1..trace_bound
    ap_bound    = 100                    # exact a_p for primes p ≤ ap_bound ...
    dim_cap     = 20                     # ... for orbits of dimension ≤ dim_cap
    workers     = 1                      # local processes (1 = serial, in-process)
    dask        = "tcp://host:8786"      # run on a Dask cluster instead
    out         = "output/quickstart"    # directory: log, SQLite db, parquet/
    db          = "postgresql+psycopg://user@host/db"   # default: OUT/newforms.sqlite

Relative paths are taken relative to the current directory (where nfb runs).

Characters (key ``characters``, flag ``--characters``). A unit is (N, k, j): level,
weight and the index j of a Galois orbit of Dirichlet characters mod N
(``builder.characters``: index 0 is the trivial character, then by order, conductor,
smallest number). A selection is one of::

    characters = "trivial"           # the default: j = 0 only, S_k(Γ0(N)) as before
    characters = "all"               # every orbit mod N with χ(−1) = (−1)^k
    characters = "order:1,2,4"       # the orbits of these orders ("a-b" ranges allowed)
    characters = "index:0,3"         # these indices at every level
    characters = { order = [1, 2, 4] }   # TOML table form of "order:1,2,4"
    characters = { index = [0, 3] }      # TOML table form of "index:0,3"

The flag takes the string forms (``--characters all``, ``--characters order:2``).
Units that are zero by parity (χ(−1) ≠ (−1)^k: −1 acts on S_k(N, χ) by χ(−1)(−1)^k)
are never planned; with ``index:`` an index that a level does not have, or whose
parity does not match the weight, is skipped at that level. ``order:1`` and
``index:0`` are the same as ``"trivial"``. Odd weights need a selection that can
hold odd characters (``all``, an even order, or an index ≠ 0); with ``"trivial"`` an
odd weight is an error, as is a job whose selection leaves no unit at all. The
selection is not a bound: it is recorded in the ``runs`` table (the job JSON), and
a rerun with another selection just plans other units of the same database.

Bounds the data needs (each violation is an error, exit code 2):

* ``trace_bound ≥ 1`` — ``traces[0] = Tr a_1 = dim`` is always stored;
* ``ap_bound ≥ 2`` — at least a_2 is stored exactly;
* ``trace_bound ≥ ap_bound`` — every exact a_p stored has its trace in
  ``traces`` too, so a table can always be checked against itself
  (Tr_{K/Q} of the stored a_p equals ``traces[p-1]``);
* ``dim_cap ≥ 0`` (0 stores no exact eigenvalues).

``trace_bound`` below the Sturm bound k·ψ(N)/12 [Su] of some unit is allowed
(the overnight job needs it) but reported as a warning: the stored traces then
need not tell every pair of orbits apart, although labels and exact a_p are
unaffected (the math orders orbits on its own).
"""

from __future__ import annotations

import difflib
import os
import re
import tomllib
from collections.abc import Iterator
from dataclasses import asdict, dataclass, field, replace
from functools import lru_cache
from math import gcd
from pathlib import Path
from typing import Any

from builder.forms.record import Params
from builder.pipeline.errors import BadInput

JOB_KEYS = (
    "name",
    "description",
    "levels",
    "weights",
    "characters",
    "trace_bound",
    "ap_bound",
    "dim_cap",
    "workers",
    "dask",
    "out",
    "db",
)

FLAG_NAMES = {
    "levels": "--levels",
    "weights": "--weights",
    "characters": "--characters",
    "trace_bound": "--trace-bound",
    "ap_bound": "--ap-bound",
    "dim_cap": "--dim-cap",
    "workers": "--workers",
    "dask": "--dask",
    "out": "--out",
    "db": "--db",
}

DEFAULT_OUT = "output"
COMMAND_LINE = "command line"
MAX_LEVEL = 10**7  # far beyond what the engine can do; catches typos such as 1-10000000000


# ----------------------------------------------------------------------------- characters


@lru_cache(maxsize=1 << 16)
def character_table(N: int) -> tuple[tuple[int, int, int], ...]:
    """(index, order, parity) of every Galois orbit of characters mod N, by index.

    The same orbits and indices as ``builder.characters.character_orbits`` (sorted by
    order, conductor, smallest member number; tests/test_jobs.py checks the agreement),
    without the value tables that make that function ~20 ms per level: planning "all"
    for levels 1-1000 takes 0.3 s here.
    """
    if N <= 2:
        return ((0, 1, 1),)
    import flint
    import numpy as np

    seen = np.gcd(np.arange(N), N) != 1  # non-units count as seen
    raw = []
    for s in np.flatnonzero(~seen).tolist():
        if seen[s]:
            continue
        chi = flint.dirichlet_char(N, s)
        m = int(chi.order())
        x = s  # the orbit of χ_s is {χ_(s^a) : gcd(a, m) = 1}; s is its smallest number
        for a in range(1, m + 1):
            if gcd(a, m) == 1:
                seen[x] = True
            x = x * s % N
        parity = 1 if int(chi.chi_exponent(N - 1)) == 0 else -1
        raw.append((m, int(chi.conductor()), s, parity))
    raw.sort()
    return tuple((i, m, parity) for i, (m, _, _, parity) in enumerate(raw))


@dataclass(frozen=True)
class CharacterSelection:
    """Which character orbits a job computes (see the module docstring)."""

    kind: str = "trivial"  # trivial | all | order | index
    values: tuple[int, ...] = ()  # the orders or indices (sorted, distinct)
    _set: frozenset = field(init=False, repr=False, compare=False, hash=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "_set", frozenset(self.values))

    @property
    def spec(self) -> str:
        """The canonical string form: "trivial", "all", "order:1,2", "index:0,3"."""
        if self.kind in ("trivial", "all"):
            return self.kind
        return f"{self.kind}:{','.join(map(str, self.values))}"

    def __str__(self) -> str:
        return self.spec

    @property
    def is_trivial(self) -> bool:
        return self.kind == "trivial"

    @property
    def may_be_odd(self) -> bool:
        """Whether the selection can hold an odd character at some level.

        Characters of odd order are even (χ(−1)^m = 1), so "order:" needs an even order.
        """
        if self.kind == "all":
            return True
        if self.kind == "order":
            return any(m % 2 == 0 for m in self.values)
        return self.kind == "index" and any(j > 0 for j in self.values)

    def indices(self, N: int, k: int) -> list[int]:
        """The orbit indices j of the units (N, k, j): selected, with χ(−1) = (−1)^k."""
        if self.kind == "trivial":
            return [] if k % 2 else [0]
        parity = -1 if k % 2 else 1
        table = character_table(N)
        if self.kind == "all":
            return [j for j, _, p in table if p == parity]
        if self.kind == "order":
            return [j for j, m, p in table if p == parity and m in self._set]
        return [j for j, _, p in table if p == parity and j in self._set]


TRIVIAL = CharacterSelection()
CHARACTER_FORMS = '"trivial", "all", "order:1,2,4" or "index:0,3"'


def _int_list(value: Any, where: str, key: str, what: str, minimum: int) -> tuple[int, ...]:
    """ "1,2,4", "1-4", [1, 2, "5-6"] → sorted distinct ints ≥ minimum."""
    items = value if isinstance(value, list) else [value]
    out: set[int] = set()
    for item in items:
        if _is_int(item):
            parts = [(item, item)]
        elif isinstance(item, str) and item.strip():
            parts = []
            for part in item.split(","):
                m = _RANGE.match(part) or _INT.match(part)
                if not m:
                    raise BadInput(
                        where, key, f"cannot read '{part.strip()}' as a {what} or a range 'a-b'"
                    )
                a = int(m.group(1))
                b = int(m.group(2)) if m.lastindex == 2 else a
                if a > b:
                    raise BadInput(
                        where, key, f"range '{part.strip()}' is reversed (start {a} > end {b})"
                    )
                parts.append((a, b))
        else:
            raise BadInput(where, key, f"expected a list of {what}s, got {item!r}")
        for a, b in parts:
            if a < minimum:
                raise BadInput(where, key, f"{what} {a} is below the minimum {minimum}")
            if b > MAX_LEVEL:
                raise BadInput(where, key, f"{what} {b} is beyond the maximum {MAX_LEVEL}")
            out.update(range(a, b + 1))
    if not out:
        raise BadInput(where, key, f"the list of {what}s is empty")
    return tuple(sorted(out))


def _selection(kind: str, value: Any, where: str, key: str) -> CharacterSelection:
    if kind == "order":
        values = _int_list(value, where, key, "character order", 1)
        trivial = values == (1,)
    else:
        values = _int_list(value, where, key, "character index", 0)
        trivial = values == (0,)
    return TRIVIAL if trivial else CharacterSelection(kind, values)


def parse_characters(
    value: Any, where: str = COMMAND_LINE, key: str = "characters"
) -> CharacterSelection:
    """ "trivial", "all", "order:1,2", "index:0,3", {order = [1, 2]}, {index = [0, 3]}."""
    if isinstance(value, dict):
        if len(value) != 1 or next(iter(value)) not in ("order", "index"):
            raise BadInput(
                where,
                key,
                "a characters table has exactly one key, order or index "
                f"(e.g. {{ order = [1, 2] }}), got keys {sorted(value)}",
            )
        kind, items = next(iter(value.items()))
        return _selection(kind, items, where, key)
    if not isinstance(value, str):
        raise BadInput(where, key, f"expected {CHARACTER_FORMS}, got {value!r}")
    text = value.strip()
    if text.lower() in ("trivial", "all"):
        return TRIVIAL if text.lower() == "trivial" else CharacterSelection("all")
    head, sep, rest = text.partition(":")
    head = head.strip().lower()
    if sep and head in ("order", "index"):
        if not rest.strip():
            raise BadInput(where, key, f"'{text}' lists no {head} (e.g. \"{head}:1,2\")")
        return _selection(head, rest, where, key)
    close = difflib.get_close_matches(head, ["trivial", "all", "order", "index"], n=1)
    hint = f" (did you mean '{close[0]}'?)" if close else ""
    raise BadInput(where, key, f"cannot read {value!r}{hint}; expected {CHARACTER_FORMS}")


# ----------------------------------------------------------------------------- the job


@dataclass(frozen=True)
class Job:
    """A validated job: which units, which bounds, where to write, how to run."""

    levels: tuple[int, ...]
    weights: tuple[int, ...]
    params: Params = field(default_factory=Params)
    characters: CharacterSelection = TRIVIAL
    out: Path = Path(DEFAULT_OUT)
    db: str = ""  # SQLAlchemy URL; "" means sqlite:///OUT/newforms.sqlite
    workers: int = 1
    dask: str | None = None
    name: str = ""
    description: str = ""
    source: str = COMMAND_LINE  # the job file, or "command line"
    # key ↦ (where, key name) it came from, for error messages about that key
    origins: dict = field(default_factory=dict, compare=False, hash=False)

    @property
    def db_url(self) -> str:
        if self.db:
            return self.db
        return f"sqlite:///{(self.out / 'newforms.sqlite').resolve()}"

    @property
    def is_sqlite(self) -> bool:
        return self.db_url.startswith("sqlite")

    def origin(self, key: str) -> tuple[str, str]:
        return self.origins.get(key, (self.source, key))

    def iter_units(self) -> Iterator[tuple[int, int, int]]:
        """The units (N, k, j) of the job in the canonical order (weight, level, j)."""
        for k in self.weights:
            for N in self.levels:
                for j in self.characters.indices(N, k):
                    yield (N, k, j)

    def units(self) -> list[tuple[int, int, int]]:
        """All units (N, k, j) of the job in the canonical order (weight, level, j)."""
        return list(self.iter_units())

    def describe(self) -> dict:
        """A JSON-able summary (stored in the runs table and the log)."""
        return {
            "name": self.name,
            "source": self.source,
            "levels": compress_levels(self.levels),
            "weights": list(self.weights),
            "characters": self.characters.spec,
            "params": asdict(self.params),
            "workers": self.workers,
            "dask": self.dask,
            "out": str(self.out),
            "db": redact_url(self.db_url),
        }


# ----------------------------------------------------------------------------- parsing


def _is_int(v: Any) -> bool:
    return isinstance(v, int) and not isinstance(v, bool)


_RANGE = re.compile(r"^\s*(-?\d+)\s*(?:-|\.\.)\s*(-?\d+)\s*$")
_INT = re.compile(r"^\s*(-?\d+)\s*$")


def _level_item(item: Any, where: str, key: str) -> list[int]:
    if _is_int(item):
        return [_check_level(item, where, key)]
    if isinstance(item, str):
        out: list[int] = []
        parts = [p for p in item.split(",")]
        if not item.strip():
            raise BadInput(where, key, "empty level specification")
        for part in parts:
            m = _RANGE.match(part)
            if m:
                a, b = int(m.group(1)), int(m.group(2))
                if a > b:
                    raise BadInput(
                        where, key, f"range '{part.strip()}' is reversed (start {a} > end {b})"
                    )
                _check_level(a, where, key)
                _check_level(b, where, key)
                out.extend(range(a, b + 1))
                continue
            m = _INT.match(part)
            if m:
                out.append(_check_level(int(m.group(1)), where, key))
                continue
            raise BadInput(
                where,
                key,
                f"cannot read '{part.strip()}' as a level or a range 'a-b' (e.g. \"1-100\")",
            )
        return out
    raise BadInput(where, key, f'expected a level, a range string "a-b" or a list, got {item!r}')


def _check_level(N: int, where: str, key: str) -> int:
    if N <= 0:
        raise BadInput(where, key, f"level N must be ≥ 1, got {N}")
    if N > MAX_LEVEL:
        raise BadInput(where, key, f"level {N} is beyond the supported maximum {MAX_LEVEL}")
    return N


def parse_levels(value: Any, where: str = COMMAND_LINE, key: str = "levels") -> tuple[int, ...]:
    """ "1-100", 37, "1-50,77", [1, "10-20"] → sorted distinct levels."""
    items = value if isinstance(value, list) else [value]
    if not items:
        raise BadInput(where, key, "the list of levels is empty")
    levels: set[int] = set()
    for item in items:
        levels.update(_level_item(item, where, key))
    if not levels:
        raise BadInput(where, key, "no levels selected")
    return tuple(sorted(levels))


def parse_weights(
    value: Any,
    where: str = COMMAND_LINE,
    key: str = "weights",
    characters: CharacterSelection = TRIVIAL,
) -> tuple[int, ...]:
    """2, [2, 4], "2,4" → sorted distinct weights ≥ 2.

    Odd weights only with a ``characters`` selection that can hold odd characters.
    """
    if isinstance(value, str):
        if not value.strip():
            raise BadInput(where, key, "empty weight list")
        items: list[Any] = []
        for part in value.split(","):
            m = _INT.match(part)
            if not m:
                raise BadInput(
                    where, key, f"cannot read '{part.strip()}' as a weight (e.g. \"2,4\")"
                )
            items.append(int(m.group(1)))
    elif isinstance(value, list):
        items = value
    else:
        items = [value]
    if not items:
        raise BadInput(where, key, "the list of weights is empty")
    weights: set[int] = set()
    for k in items:
        if not _is_int(k):
            raise BadInput(where, key, f"a weight must be an integer, got {k!r}")
        if k < 2:
            raise BadInput(where, key, f"weight {k} is < 2 (cusp forms need k ≥ 2)")
        if k % 2 and characters.is_trivial:
            raise BadInput(
                where, key, f"weight {k} is odd (trivial character: S_k(Γ0(N)) = 0 for odd k)"
            )
        if k % 2 and not characters.may_be_odd:
            raise BadInput(
                where,
                key,
                f'weight {k} is odd but characters = "{characters.spec}" selects only '
                "characters of odd order, which are even (χ(−1) = 1): S_k(N, χ) = 0 for odd k",
            )
        weights.add(k)
    return tuple(sorted(weights))


def _int_value(value: Any, where: str, key: str, minimum: int, why: str) -> int:
    if isinstance(value, str) and _INT.match(value):
        value = int(value)
    if not _is_int(value):
        raise BadInput(where, key, f"expected an integer, got {value!r}")
    if value < minimum:
        raise BadInput(where, key, f"{value} is below the minimum {minimum} ({why})")
    return value


def _str_value(value: Any, where: str, key: str) -> str:
    if not isinstance(value, str):
        raise BadInput(where, key, f"expected a string, got {value!r}")
    return value


def _check_db_url(url: str, where: str, key: str) -> str:
    from sqlalchemy.engine import make_url
    from sqlalchemy.exc import ArgumentError

    try:
        u = make_url(url)
    except ArgumentError as e:
        raise BadInput(where, key, f"not a database URL: {url!r} ({e})") from None
    if u.get_backend_name() not in ("sqlite", "postgresql"):
        raise BadInput(
            where,
            key,
            f"unsupported database '{u.get_backend_name()}': use sqlite:///PATH or "
            "postgresql+psycopg://USER@HOST/DB",
        )
    if u.get_backend_name() == "postgresql" and u.get_driver_name() not in ("psycopg",):
        raise BadInput(where, key, "for PostgreSQL use the psycopg driver: postgresql+psycopg://…")
    return url


_DASK = re.compile(r"^(tcp|tls|inproc|ucx|ws|wss)://[^\s]+$")


def _check_dask(addr: str, where: str, key: str) -> str:
    if not _DASK.match(addr):
        raise BadInput(
            where, key, f"not a Dask scheduler address: {addr!r} (expected tcp://HOST:PORT)"
        )
    return addr


def _read_toml(path: Path) -> dict:
    where = str(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise BadInput(where, None, "no such job file") from None
    except OSError as e:
        raise BadInput(where, None, f"cannot read the job file: {e.strerror or e}") from None
    try:
        return tomllib.loads(raw.decode("utf-8"))
    except UnicodeDecodeError as e:
        raise BadInput(where, None, f"malformed TOML: not UTF-8 ({e})") from None
    except tomllib.TOMLDecodeError as e:
        raise BadInput(where, None, f"malformed TOML: {e}") from None


def _check_keys(data: dict, where: str) -> None:
    for key, value in data.items():
        if key not in JOB_KEYS:
            close = difflib.get_close_matches(key, JOB_KEYS, n=1)
            hint = f" (did you mean '{close[0]}'?)" if close else ""
            known = ", ".join(JOB_KEYS)
            raise BadInput(where, key, f"unknown key{hint}; known keys: {known}")
        if isinstance(value, dict) and key != "characters":
            raise BadInput(where, key, "expected a value, got a TOML table")


def load_job(path: str | os.PathLike | None = None, overrides: dict[str, Any] | None = None) -> Job:
    """Read the job file (if any), apply the flag ``overrides``, validate.

    ``overrides`` uses the job-file keys (``levels``, ``trace_bound``, …); a value
    of None means "not given". Raises ``BadInput`` naming the file (or
    "command line"), the key and the problem.
    """
    file_data: dict = {}
    file_where = COMMAND_LINE
    if path is not None:
        p = Path(path)
        file_where = str(path)
        file_data = _read_toml(p)
        _check_keys(file_data, file_where)
    flags = {k: v for k, v in (overrides or {}).items() if v is not None}
    for key in flags:
        if key not in FLAG_NAMES:
            raise BadInput(COMMAND_LINE, key, "unknown option")

    origins: dict[str, tuple[str, str]] = {}

    def source_of(key: str) -> tuple[Any, str, str]:
        if key in flags:
            found = flags[key], COMMAND_LINE, FLAG_NAMES[key]
        elif key in file_data:
            found = file_data[key], file_where, key
        else:
            found = None, file_where, (key if path is not None else FLAG_NAMES[key])
        origins[key] = found[1:]
        return found

    # executors: a flag --dask replaces the file's workers and vice versa
    if "dask" in flags and "workers" in flags and int(flags["workers"]) != 1:
        raise BadInput(COMMAND_LINE, "--dask", "--dask and --workers cannot be combined")
    if "dask" in flags:
        file_data = {k: v for k, v in file_data.items() if k != "workers"}
    if "workers" in flags:
        file_data = {k: v for k, v in file_data.items() if k != "dask"}
    if "dask" in file_data and "workers" in file_data and file_data["workers"] != 1:
        raise BadInput(file_where, "dask", "'dask' and 'workers' cannot both be set")

    value, where, key = source_of("levels")
    if value is None:
        raise BadInput(where, "levels", 'no levels given (set levels = "1-100" or --levels)')
    levels = parse_levels(value, where, key)

    value, where, key = source_of("characters")
    characters = TRIVIAL if value is None else parse_characters(value, where, key)
    char_where, char_key = where, key

    value, where, key = source_of("weights")
    if value is None:
        raise BadInput(where, "weights", "no weights given (set weights = [2] or --weights)")
    weights = parse_weights(value, where, key, characters)

    defaults = Params()
    bounds: dict[str, int] = {}
    rules = {
        "trace_bound": (1, "traces[0] = dim is always stored"),
        "ap_bound": (2, "at least a_2 is stored exactly"),
        "dim_cap": (0, "0 stores no exact eigenvalues"),
    }
    where_of: dict[str, tuple[str, str]] = {}
    given: dict[str, bool] = {}
    for name, (minimum, why) in rules.items():
        value, where, key = source_of(name)
        where_of[name] = (where, key)
        given[name] = value is not None
        bounds[name] = (
            getattr(defaults, name)
            if value is None
            else _int_value(value, where, key, minimum, why)
        )
    if bounds["trace_bound"] < bounds["ap_bound"]:
        blame = "trace_bound" if given["trace_bound"] or not given["ap_bound"] else "ap_bound"
        where, key = where_of[blame]
        raise BadInput(
            where,
            key,
            f"trace_bound {bounds['trace_bound']} is below ap_bound {bounds['ap_bound']}: "
            "every exact a_p must have its trace stored (need trace_bound ≥ ap_bound)",
        )
    params = Params(**bounds)

    value, where, key = source_of("workers")
    workers = 1 if value is None else _int_value(value, where, key, 1, "1 = serial")
    value, where, key = source_of("dask")
    dask = None if value is None else _check_dask(_str_value(value, where, key), where, key)

    value, where, key = source_of("out")
    out = Path(DEFAULT_OUT if value is None else _str_value(value, where, key))
    if not str(out).strip():
        raise BadInput(where, key, "empty output directory")
    value, where, key = source_of("db")
    db = "" if value is None else _check_db_url(_str_value(value, where, key), where, key)

    name = file_data.get("name", "")
    description = file_data.get("description", "")
    for key, v in (("name", name), ("description", description)):
        _str_value(v, file_where, key)
    if not name and path is not None:
        name = Path(path).stem

    job = Job(
        levels=levels,
        weights=weights,
        params=params,
        characters=characters,
        out=out,
        db=db,
        workers=workers,
        dask=dask,
        name=name,
        description=description,
        source=file_where,
        origins=origins,
    )
    if not characters.is_trivial and next(job.iter_units(), None) is None:
        raise BadInput(
            char_where,
            char_key,
            f'characters = "{characters.spec}" leaves no unit: no selected character orbit '
            f"mod N for levels {compress_levels(levels)} has the parity χ(−1) = (−1)^k of "
            f"weights {list(weights)}",
        )
    return job


def with_params(job: Job, **bounds: int) -> Job:
    return replace(job, params=replace(job.params, **bounds))


# ----------------------------------------------------------------------------- helpers


def compress_levels(levels: tuple[int, ...] | list[int]) -> str:
    """(1, 2, 3, 7, 9, 10) → "1-3,7,9-10"."""
    out: list[str] = []
    levels = sorted(levels)
    i = 0
    while i < len(levels):
        j = i
        while j + 1 < len(levels) and levels[j + 1] == levels[j] + 1:
            j += 1
        out.append(str(levels[i]) if i == j else f"{levels[i]}-{levels[j]}")
        i = j + 1
    return ",".join(out)


def redact_url(url: str) -> str:
    """Hide a password in a database URL (for logs and the runs table)."""
    try:
        from sqlalchemy.engine import make_url

        return make_url(url).render_as_string(hide_password=True)
    except Exception:
        return url
