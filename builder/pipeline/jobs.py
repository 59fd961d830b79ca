"""Job files (TOML) and command-line flags → one validated ``Job``.

A job file is a flat TOML table; every key is optional and a flag of
``nfb run`` overrides it::

    name        = "quickstart"           # free text, shown in logs
    description = "..."                  # free text
    levels      = "1-100"                # "a-b", an int, "1-50,77", or a list of those
    weights     = [2, 4]                 # an even int ≥ 2, a list, or "2,4"
    trace_bound = 1000                   # Tr a_n for n = 1..trace_bound
    ap_bound    = 100                    # exact a_p for primes p ≤ ap_bound ...
    dim_cap     = 20                     # ... for orbits of dimension ≤ dim_cap
    workers     = 1                      # local processes (1 = serial, in-process)
    dask        = "tcp://host:8786"      # run on a Dask cluster instead
    out         = "output/quickstart"    # directory: log, SQLite db, parquet/
    db          = "postgresql+psycopg://user@host/db"   # default: OUT/newforms.sqlite

Relative paths are taken relative to the current directory (where nfb runs).

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
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path
from typing import Any

from builder.forms.record import Params
from builder.pipeline.errors import BadInput

JOB_KEYS = (
    "name",
    "description",
    "levels",
    "weights",
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


@dataclass(frozen=True)
class Job:
    """A validated job: which units, which bounds, where to write, how to run."""

    levels: tuple[int, ...]
    weights: tuple[int, ...]
    params: Params = field(default_factory=Params)
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

    def units(self) -> list[tuple[int, int, int]]:
        """All units (N, k, χ) of the job in the canonical order (weight, then level)."""
        return [(N, k, 0) for k in self.weights for N in self.levels]

    def describe(self) -> dict:
        """A JSON-able summary (stored in the runs table and the log)."""
        return {
            "name": self.name,
            "source": self.source,
            "levels": compress_levels(self.levels),
            "weights": list(self.weights),
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


def parse_weights(value: Any, where: str = COMMAND_LINE, key: str = "weights") -> tuple[int, ...]:
    """2, [2, 4], "2,4" → sorted distinct even weights ≥ 2."""
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
        if k % 2:
            raise BadInput(
                where, key, f"weight {k} is odd (trivial character: S_k(Γ0(N)) = 0 for odd k)"
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
        if isinstance(value, dict):
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

    value, where, key = source_of("weights")
    if value is None:
        raise BadInput(where, "weights", "no weights given (set weights = [2] or --weights)")
    weights = parse_weights(value, where, key)

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

    return Job(
        levels=levels,
        weights=weights,
        params=params,
        out=out,
        db=db,
        workers=workers,
        dask=dask,
        name=name,
        description=description,
        source=file_where,
        origins=origins,
    )


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
