"""Compute one unit (N, k, χ = trivial) into a SpaceRecord.

Steps: sign +1 symbols → cuspidal subspace → new subspace → Galois orbits →
for each orbit an eigen-functional (builder.forms.eigen) → exact a_p for
small orbits, traces of a_n for all, field polynomial, Atkin–Lehner and
Fricke signs, CM, L-value data.  Orbits are ordered by (dimension, traces of
a_p for p = 2, 3, 5, … as integers, then traces of a_n) and numbered from 1.
"""

from __future__ import annotations

import gc
import time
from math import gcd

import flint

from builder.arith import (
    check_level,
    check_weight,
    divisors,
    factor,
    is_prime,
    iter_primes,
    primes_up_to,
    sturm_bound,
)
from builder.characters import character_orbit
from builder.forms.eigen import EigenForm, eigen_system, fill_multiplicative, prove_exact_duals
from builder.forms.fields import canonical_polynomial, change_basis_matrix
from builder.forms.newspace import NewSpace
from builder.forms.record import NewformRecord, Params, SpaceRecord, make_label
from builder.forms.winding import l_ratio
from builder.symbols.cusps import point_cusp_classes
from builder.symbols.space import clear_caches, cuspidal_space

FIELD_BOUND = 50  # a_n for n ≤ 50·2^j span the order used for the field polynomial


def compute(N: int, k: int, params: Params, char_index: int = 0) -> SpaceRecord:
    """The record of S_k(Γ0(N), χ) for the character orbit ``char_index`` of
    builder.characters (0 = trivial); pure and deterministic."""
    N, k = check_level(N), check_weight(k)
    params.validate()
    chi = character_orbit(N, char_index)  # ValueError naming char_index if absent
    t0 = time.perf_counter()
    try:
        if not chi.is_trivial:
            return _compute_char(N, k, chi, params, t0)
        return _compute(N, k, params, t0)
    finally:
        clear_caches()  # bounded memory across the units of a long run
        gc.collect()  # the space ↔ eigen-system cycles hold big arrays: free them now


def _compute(N: int, k: int, params: Params, t0: float) -> SpaceRecord:
    base = dict(level=N, weight=k, char_index=0, params=_params_dict(params))
    if k % 2:
        return SpaceRecord(
            dim_cusp=0, dim_new=0, dim_old=0, dim_eis=0, num_orbits=0,
            sturm_bound=sturm_bound(N, k), **base,
        )
    S = cuspidal_space(N, k, 1)
    ncusp = len(point_cusp_classes(S.P1)[1])
    dim_eis = ncusp - 1 if k == 2 else ncusp
    V = NewSpace(S)
    orbits = V.orbits()
    eigs = [EigenForm(V, o) for o in orbits]
    traces = eigen_system(V).traces(params.trace_bound) if eigs else []
    cms = cm_discriminants(eigs)
    if k == 2:  # L(f, 1)/Ω⁺ of every rational orbit needs its exact functional
        prove_exact_duals([E for E in eigs if E.d == 1])
    forms = [_orbit_data(E, t, cm, params) for E, t, cm in zip(eigs, traces, cms, strict=True)]
    forms.sort(key=lambda f: f["_key"])
    records = []
    for i, f in enumerate(forms, start=1):
        f.pop("_key")
        records.append(NewformRecord(label=make_label(N, k, i), orbit=i, **f))
    return SpaceRecord(
        dim_cusp=S.dim_cuspidal,
        dim_new=V.dim,
        dim_old=S.dim_cuspidal - V.dim,
        dim_eis=dim_eis,
        num_orbits=len(records),
        sturm_bound=sturm_bound(N, k),
        newforms=records,
        seconds=round(time.perf_counter() - t0, 4),
        **base,
    )


def _compute_char(N: int, k: int, chi, params: Params, t0: float) -> SpaceRecord:
    from builder.forms.charforms import compute_char

    if (k % 2 == 0) != (chi.parity == 1):  # χ(−1) ≠ (−1)^k: the zero space
        return SpaceRecord(
            level=N, weight=k, char_index=chi.index, params=_params_dict(params),
            dim_cusp=0, dim_new=0, dim_old=0, dim_eis=0, num_orbits=0,
            sturm_bound=sturm_bound(N, k), char_order=chi.order,
            char_conductor=chi.conductor, char_parity=chi.parity, char_number=chi.number,
            char_degree=chi.degree,
        )
    return compute_char(N, k, chi, params, t0)


def _params_dict(p: Params) -> dict:
    return {"trace_bound": p.trace_bound, "ap_bound": p.ap_bound, "dim_cap": p.dim_cap}


# -- one orbit ------------------------------------------------------------------


def _orbit_data(E: EigenForm, traces: list[int], cm: int | None, params: Params) -> dict:
    orbit = E.orbit
    N, k, d = E.N, E.k, orbit.dim
    B = params.trace_bound
    exact = d <= params.dim_cap
    if exact:
        poly, beta, ap = _exact_field_data(E, params.ap_bound)
    else:
        poly, ap = orbit.poly, None
    signs = {p: orbit.signs[p] for p, _ in factor(N)}
    fricke = 1
    for s in signs.values():
        fricke *= s
    root = (-1) ** (k // 2) * fricke
    lzero, ratio = _lvalue(E, root)
    ptraces = [traces[p - 1] for p in primes_up_to(B)]
    return {
        "dim": d,
        "rel_dim": d,
        "field_poly": [int(c) for c in poly.coeffs()],
        # above the cap the discriminant of the Hecke polynomial has up to ~10⁵ digits: not kept
        "field_disc": (str(int(poly.discriminant())) if d > 1 else "1") if exact else None,
        "traces": traces,
        "atkin_lehner": signs,
        "fricke_sign": fricke,
        "root_number": root,
        "is_cm": cm is not None,
        "cm_disc": cm,
        "lvalue_zero": lzero,
        "l_ratio": ratio,
        "ap": ap,
        "hecke_poly_2": [int(c) for c in orbit.hecke_poly.coeffs()],
        "_key": (d, ptraces, traces),
    }


def _exact_field_data(E: EigenForm, ap_bound: int):
    """Canonical polynomial, its root β, and exact a_p (p ≤ ap_bound) in β's power basis."""
    K = E.K
    bound = FIELD_BOUND
    while True:
        an = exact_an(E, bound, None)
        try:
            poly, beta = canonical_polynomial(K, an[1:])
            break
        except ArithmeticError:
            if bound > 4 * sturm_bound(E.N, E.k) + 100:
                raise
            bound *= 2
    P = change_basis_matrix(K, beta)
    out = {}
    aps = E.aps(primes_up_to(ap_bound))
    for p in primes_up_to(ap_bound):
        c = K.coords(aps[p])
        row = flint.fmpq_mat(1, K.d, c) * P
        out[p] = [str(row[0, j]) for j in range(K.d)]
    return poly, beta, out


def exact_an(E: EigenForm, B: int, ap=None) -> list:
    """Exact a_n ∈ K for 0 ≤ n ≤ B (index 0 unused) by multiplicativity and recursion."""
    K = E.K
    aps = E.aps(primes_up_to(B)) if ap is None else {p: ap(p) for p in primes_up_to(B)}
    a: list = [None] * (B + 1)
    a[1] = K.elt([1])
    for p, v in aps.items():
        a[p] = v
    fill_multiplicative(a, B, E.N, E.k, K.mul, K.elt([1]))
    return a


# -- traces -----------------------------------------------------------------------


def hecke_traces(E: EigenForm, B: int) -> list[int]:
    """[Tr_{K/Q} a_n for n = 1..B] for one orbit."""
    return E.system.traces(B)[E.index]


def all_traces(eigs: list[EigenForm], B: int) -> list[list[int]]:
    """Exact [Tr a_n, n = 1..B] for every orbit (builder.forms.eigen.EigenSystem.traces)."""
    if not eigs:
        return []
    tr = eigs[0].system.traces(B)
    return [tr[E.index] for E in eigs]

# -- CM -------------------------------------------------------------------------------


def kronecker(D: int, n: int) -> int:
    """Kronecker symbol (D/n) for n ≥ 1 (common practice)."""
    if n == 1:
        return 1
    res = 1
    for p, e in factor(n):
        if p == 2:
            if D % 2 == 0:
                return 0
            s = 1 if D % 8 in (1, 7) else -1
        else:
            r = D % p
            if r == 0:
                return 0
            s = 1 if pow(r, (p - 1) // 2, p) == 1 else -1
        res *= s**e
    return res


def _fundamental_discriminants_dividing(N: int) -> list[int]:
    out = []
    for m in divisors(N):
        D = -m
        if D % 4 == 1 and _squarefree(m):
            out.append(D)
        elif D % 4 == 0 and (-D // 4) % 4 in (1, 2) and _squarefree(m // 4):
            out.append(D)
    return sorted(out, key=lambda x: -x)


def _squarefree(m: int) -> bool:
    return all(e == 1 for _, e in factor(m))


def cm_discriminant(E: EigenForm) -> int | None:
    """The CM discriminant D < 0 of the orbit, or None; proved by a Sturm-bound check.

    f has CM by D iff a_p = 0 for every prime p with (D/p) = −1.  The series
    Σ_{(n,D)=1} (1 − (D/n)) a_n q^n is a form on Γ0(lcm(N, D²)) ([Shimura],
    twists), so by Sturm's theorem [Su] it vanishes once a_p = 0 for all such
    p up to the Sturm bound of that level.  a_p = 0 is decided exactly by
    Tr(a_p²) = 0 (K totally real), computed modulo primes above its Deligne bound.
    """
    for D in _fundamental_discriminants_dividing(E.N):
        L = E.N * D * D // gcd(E.N, D * D)
        bound = sturm_bound(L, E.k)
        ok = True
        for p in iter_primes(bound):
            if kronecker(D, p) != -1:
                continue
            if not _ap_is_zero(E, p):
                ok = False
                break
        if ok:
            return D
    return None


def cm_discriminants(eigs: list[EigenForm]) -> list[int | None]:
    """The CM discriminant (or None) of every orbit of one space, all orbits together,
    from the count of CM newforms by Hecke characters (builder.forms.hecke_characters):
    usually a few inert primes instead of the Sturm bound of ``cm_discriminant``."""
    from builder.forms import hecke_characters

    if not eigs:
        return []
    return hecke_characters.cm_discriminants(eigs[0].N, eigs[0].k, 1, lambda n: 0, eigs,
                                             _ap_is_zero, lambda E: E.d)


def _ap_is_zero(E: EigenForm, p: int) -> bool:
    """a_p = 0, decided exactly: Tr(a_p²) = 0 (K totally real), |Tr(a_p²)| ≤ 4d·p^(k−1)."""
    bound = 4 * E.d * p ** (E.k - 1)
    prod = 1
    for ell in E.good_primes():
        if not E.ap_mod(p, ell).is_zero():
            return False
        prod *= ell
        if prod > 2 * bound:
            return True
    return True  # pragma: no cover


# -- L-values ---------------------------------------------------------------------------


def _lvalue(E: EigenForm, root: int) -> tuple[bool | None, str | None]:
    """Whether the critical value seen by the winding element vanishes, and L(f,1)/Ω⁺.

    Weight 2: L(f, 1) = 0 iff φ({0, ∞}) = 0 ([Cr] §2.8, Manin–Drinfeld).
    Weight k ≡ 2 (mod 4): the central value L(f, k/2) via X^(w/2)Y^(w/2){0, ∞},
    which lies in the +1 part.  Weight k ≡ 0 (mod 4): that symbol is odd, so
    the +1 functional cannot see it; we record True when the root number is −1
    (the functional equation forces the zero) and None otherwise.
    φ(e) ≠ 0 modulo a good prime proves φ(e) ≠ 0; otherwise the exact dual decides
    (u_j(e) = 0 for its basis u_j; the entries of an eigenvector are Q-independent).
    """
    S = E.space
    w = S.w
    if (w // 2) % 2 == 1:
        return (True if root == -1 else None), None
    x = (w // 2) * S.psi + S.P1.index_one(0, 1)
    row = S.coords_row(x)
    ell = next(E.good_primes())
    if E.value_nonzero_mod(row, ell):
        zero = False
    elif root == -1:
        zero = True  # the functional equation forces the central zero
    else:
        zero = E.vanishes_on(row)
    ratio = l_ratio(E) if (E.d == 1 and E.k == 2) else None
    return zero, ratio


__all__ = [
    "compute", "hecke_traces", "all_traces", "exact_an", "cm_discriminant", "cm_discriminants",
    "kronecker", "is_prime",
]
