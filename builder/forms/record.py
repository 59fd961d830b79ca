"""One unit (N, k, χ) → one plain record: the contract between math and storage.

The math core returns a ``SpaceRecord`` made only of plain Python values
(ints, strings, lists, dicts, None), so that a worker process or a Dask worker
can pickle it and the single writer can store it without importing any of
the math.  ``to_dict``/``from_dict`` give the JSON-able form.

Exact rationals are written as strings "p/q" (or "p"); big integers (field
discriminants) as decimal strings, so that no value is silently rounded.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import asdict, dataclass, field

RECORD_VERSION = 2


@dataclass(frozen=True)
class Params:
    """Bounds a unit is computed with (a job's mathematical parameters)."""

    trace_bound: int = 1000  # Tr a_n for n = 1..trace_bound
    ap_bound: int = 100  # exact a_p for primes p ≤ ap_bound ...
    dim_cap: int = 20  # ... for orbits of dimension ≤ dim_cap

    def validate(self) -> None:
        for name in ("trace_bound", "ap_bound", "dim_cap"):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, int):
                raise ValueError(f"{name} must be an integer, got {v!r}")
        if self.trace_bound < 1:
            raise ValueError(f"trace_bound must be ≥ 1, got {self.trace_bound}")
        if self.ap_bound < 2:
            raise ValueError(f"ap_bound must be ≥ 2, got {self.ap_bound}")
        if self.dim_cap < 0:
            raise ValueError(f"dim_cap must be ≥ 0, got {self.dim_cap}")


@dataclass
class NewformRecord:
    """One Galois orbit of newforms in S_k(Γ0(N), χ)."""

    label: str  # e.g. "37w2-1"; with a character later "63w2c4-2"
    orbit: int  # 1-based position in the space's canonical order
    dim: int  # degree of the coefficient field K_f over Q
    field_poly: list[int]  # canonical defining polynomial, constant term first
    field_disc: str | None  # discriminant of field_poly (decimal string); None if dim > dim_cap
    traces: list[int]  # Tr_{K/Q} a_n for n = 1..trace_bound; traces[0] == dim
    atkin_lehner: dict[int, int]  # p ↦ eigenvalue of W_{p^e} (p^e ∥ N), ±1
    fricke_sign: int | None  # eigenvalue of W_N (None for a nontrivial character)
    root_number: int | None  # sign of the functional equation = (−1)^(k/2)·fricke_sign
    is_cm: bool
    cm_disc: int | None  # the CM discriminant (negative) when is_cm
    # whether L(f, 1) = 0 (k = 2) / L(f, k/2) = 0 (k > 2); None when the +1 symbols cannot tell
    lvalue_zero: bool | None
    l_ratio: str | None  # L(f,1)/Ω⁺ as "p/q" for rational orbits of weight 2, else None
    ap: dict[int, list[str]] | None  # p ↦ coordinates of a_p in the power basis
    # of a root of field_poly (length dim, rationals as strings); None if dim > dim_cap
    hecke_poly_2: list[int] | None = None  # charpoly of a_p for the first p ∤ N (const first)
    rel_dim: int | None = None  # degree over Q(χ) = dim / char_degree (None: = dim)
    # χ ≠ 1: p ↦ coordinates (like ap) of the Atkin–Lehner pseudo-eigenvalue
    # w_{p^e} = p^(e(k/2−1))·λ_{p^e} ∈ K for p | N with χ trivial mod p; None without exact a_p
    al_pseudo: dict[int, list[str]] | None = None


@dataclass
class SpaceRecord:
    """Everything computed for one unit (N, k, χ)."""

    level: int
    weight: int
    char_index: int  # 0 = trivial character
    dim_cusp: int  # dim S_k(Γ0(N), χ)
    dim_new: int
    dim_old: int
    dim_eis: int  # dim of the Eisenstein subspace of M_k(Γ0(N), χ)
    num_orbits: int
    sturm_bound: int
    params: dict  # asdict(Params)
    newforms: list[NewformRecord] = field(default_factory=list)
    seconds: float = 0.0  # compute time; not part of the content hash
    record_version: int = RECORD_VERSION
    char_order: int = 1  # the character orbit of the unit (builder.characters)
    char_conductor: int = 1
    char_parity: int = 1  # χ(−1)
    char_number: int = 1  # python-flint's number of the orbit's representative χ
    char_degree: int = 1  # [Q(χ):Q] = φ(order): orbit dims are absolute, dims of spaces
    # (dim_cusp, dim_new, …) are over Q(χ), so Σ orbit dims = char_degree·dim_new

    def to_dict(self) -> dict:
        return asdict(self)

    @staticmethod
    def from_dict(d: dict) -> SpaceRecord:
        forms = [NewformRecord(**_int_keys(f)) for f in d.get("newforms", [])]
        rest = {k: v for k, v in d.items() if k != "newforms"}
        return SpaceRecord(newforms=forms, **rest)

    def content_hash(self) -> str:
        """SHA-256 of the mathematical content (everything but timing)."""
        d = self.to_dict()
        d.pop("seconds", None)
        blob = json.dumps(d, sort_keys=True, separators=(",", ":"), default=str)
        return hashlib.sha256(blob.encode()).hexdigest()


def _int_keys(f: dict) -> dict:
    """JSON turns int dict keys into strings; undo that for the maps."""
    f = dict(f)
    for key in ("atkin_lehner", "ap", "al_pseudo"):
        if f.get(key) is not None:
            f[key] = {int(p): v for p, v in f[key].items()}
    return f


def make_label(N: int, k: int, orbit: int, char_index: int = 0) -> str:
    """Our label: level, 'w', weight, optional 'c' + character index, '-', orbit."""
    ch = f"c{char_index}" if char_index else ""
    return f"{N}w{k}{ch}-{orbit}"


def compute_unit(N: int, k: int, params: Params | None = None, char_index: int = 0) -> SpaceRecord:
    """Compute the full record of the unit (N, k, χ); pure, deterministic."""
    from builder.forms.unit import compute

    return compute(N, k, params or Params(), char_index)
