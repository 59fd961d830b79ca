"""Whole records (builder.forms.record.compute_unit) against data from outside the project.

Every record built here goes through ``check_record_identities`` (tests/forms_oracles.py):
a_1 = 1, Deligne's bound in every real embedding, multiplicativity and the Hecke recursion on
the exact a_p, a_p = −p^(k/2−1) ε_p for p ∥ N, a_p = 0 for p² | N, totally real fields, the
root number and L-value rules, the orbit order and labels.

Sources (full references in design.md §3 and in tests/oracles.py, tests/forms_oracles.py):
[MO] Y. Martin, K. Ono, Proc. AMS 125 (1997), the table of weight-2 eta-quotient newforms;
[Mn] Y. Martin, Trans. AMS 348 (1996), multiplicative eta-quotients of higher weight;
[Cr] J. Cremona, Algorithms for Modular Elliptic Curves, 2nd ed., Table 1;
[Mt] G. Martin, J. Number Theory 112 (2005); [DS] Diamond–Shurman ch. 3;
[CS] Cohen–Strömberg Thm 12.4.11 (Eichler–Selberg trace formula, in tests/oracles.py);
OEIS A000594 (Ramanujan τ).
"""

from __future__ import annotations

import copy
import json
import os
import subprocess
import sys
from fractions import Fraction
from functools import cache
from math import gcd, isqrt

import flint
import pytest

from builder.forms.record import Params, SpaceRecord, compute_unit
from tests import oracles as o
from tests.forms_oracles import (
    CURVES,
    check_record_identities,
    curve_ap,
    curve_discriminant,
    factorize,
    primes_upto,
    sigma0,
)

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


@cache
def unit(N: int, k: int, B: int = 30, ap_bound: int | None = None, dim_cap: int = 20):
    """compute_unit(N, k) with Tr a_n for n ≤ B and exact a_p for p ≤ ap_bound, checked once."""
    ap_bound = min(B, 100) if ap_bound is None else ap_bound
    R = compute_unit(N, k, Params(trace_bound=B, ap_bound=ap_bound, dim_cap=dim_cap))
    check_record_identities(R)
    return R


def rational_orbits_matching(R, coeffs: dict[int, int]):
    """The rational orbits of R whose a_n (= traces) equal coeffs[n] for every n given."""
    return [
        f for f in R.newforms if f.dim == 1 and all(f.traces[n - 1] == a for n, a in coeffs.items())
    ]


# ----------------------------------------------------------------------------------------------
# eta quotients
# ----------------------------------------------------------------------------------------------

#: Weight-2 eta quotients that are newforms — from memory of the table of [MO] (Theorem 1 and its
#: table of levels 11, 14, 15, 20, 24, 27, 32, 36, 48, 64, 80, 144).  The level-80 entry is
#: left out: we do not remember it reliably.  {m: e} means ∏ η(m z)^e.
MARTIN_ONO_WEIGHT2 = {
    11: {1: 2, 11: 2},
    14: {1: 1, 2: 1, 7: 1, 14: 1},
    15: {1: 1, 3: 1, 5: 1, 15: 1},
    20: {2: 2, 10: 2},
    24: {2: 1, 4: 1, 6: 1, 12: 1},
    27: {3: 2, 9: 2},
    32: {4: 2, 8: 2},
    36: {6: 4},
    48: {2: -1, 4: 4, 6: -1, 8: -1, 12: 4, 24: -1},  # η(4z)⁴η(12z)⁴/(η(2z)η(6z)η(8z)η(24z))
    64: {4: -2, 8: 8, 16: -2},  # η(8z)⁸/(η(4z)²η(16z)²)
    144: {6: -4, 12: 12, 24: -4},  # η(12z)¹²/(η(6z)⁴η(24z)⁴)
}

#: Higher-weight multiplicative eta products spanning S_k(Γ0(N)) — [Mn] (from memory of its list;
#: the issue names (5, 4) and (2, 8)); (N, k) ↦ {m: e}.
MARTIN_HIGHER_WEIGHT = {
    (5, 4): {1: 4, 5: 4},  # (η(z)η(5z))⁴
    (2, 8): {1: 8, 2: 8},  # (η(z)η(2z))⁸
    (8, 4): {2: 4, 4: 4},  # (η(2z)η(4z))⁴
    (9, 4): {3: 8},  # η(3z)⁸
    (3, 6): {1: 6, 3: 6},  # (η(z)η(3z))⁶
    (4, 6): {2: 12},  # η(2z)¹²
}

ETA_TERMS = 200


def _newman_conditions(N: int, k: int, exps: dict[int, int]) -> None:
    """Sanity of a transcribed eta quotient: weight k, q-order 1, and Newman's conditions for
    a form on Γ0(N) with trivial character (Σ m e_m ≡ 0, Σ (N/m) e_m ≡ 0 mod 24, ∏ m^e_m a
    square; G. Ligozat's criterion as stated in [MO] Thm 1 — from memory)."""
    assert sum(exps.values()) == 2 * k
    assert sum(m * e for m, e in exps.items()) == 24  # starts at q¹
    assert sum((N // m) * e for m, e in exps.items()) % 24 == 0
    prod = Fraction(1)
    for m, e in exps.items():
        assert N % m == 0
        prod *= Fraction(m) ** e
    assert prod.denominator == 1 and isqrt(prod.numerator) ** 2 == prod.numerator


@pytest.mark.parametrize("N", sorted(MARTIN_ONO_WEIGHT2))
def test_martin_ono_weight2_eta_quotients(N):
    # [MO] table: the eta quotient is a rational newform of level N; compare a_n, n ≤ 200.
    exps = MARTIN_ONO_WEIGHT2[N]
    _newman_conditions(N, 2, exps)
    series = o.eta_product(exps, ETA_TERMS)  # integer expansion of the product (tests/oracles.py)
    R = unit(N, 2, ETA_TERMS)
    found = rational_orbits_matching(R, {n: series[n - 1] for n in range(1, ETA_TERMS + 1)})
    assert len(found) == 1, [f.traces[:10] for f in R.newforms]


@pytest.mark.parametrize("N,k", sorted(MARTIN_HIGHER_WEIGHT))
def test_martin_higher_weight_eta_products(N, k):
    # [Mn]: (η(z)η(5z))⁴ ∈ S_4(Γ0(5)), (η(z)η(2z))⁸ ∈ S_8(Γ0(2)), … are newforms; a_n, n ≤ 200.
    exps = MARTIN_HIGHER_WEIGHT[(N, k)]
    _newman_conditions(N, k, exps)
    series = o.eta_product(exps, ETA_TERMS)
    R = unit(N, k, ETA_TERMS)
    found = rational_orbits_matching(R, {n: series[n - 1] for n in range(1, ETA_TERMS + 1)})
    assert len(found) == 1, [f.traces[:10] for f in R.newforms]


# OEIS A000594, τ(1..12) — from memory of the sequence (an independent check of the expansion).
TAU_OEIS_START = [1, -24, 252, -1472, 4830, -6048, -16744, 84480, -113643, -115920, 534612, -370944]


def test_delta_is_the_only_newform_of_level1_weight12():
    # Δ = q∏(1 − qⁿ)²⁴, τ(n) for n ≤ 100 (OEIS A000594); S_12(SL2(Z)) = CΔ ([DS] §3.5).
    tau = o.ramanujan_tau(100)
    assert tau[:12] == TAU_OEIS_START
    R = unit(1, 12, 100)
    assert R.dim_cusp == R.dim_new == 1 and R.dim_eis == 1
    (f,) = R.newforms
    assert f.dim == 1 and f.traces == tau
    assert f.atkin_lehner == {} and f.fricke_sign == 1 and f.root_number == 1
    assert not f.is_cm and f.cm_disc is None  # Δ has no CM (τ(p) ≠ 0 for small p; e.g. τ(3))
    # numerical cross-check (design.md §6): Σ τ(n) e^(−2πn) = Δ(i), python-flint's modular_delta
    q = flint.arb(-2 * flint.arb.pi()).exp()
    series = sum((flint.arb(t) * q**n for n, t in enumerate(f.traces, start=1)), flint.arb(0))
    delta_i = flint.acb(0, 1).modular_delta()
    assert abs(series - delta_i.real) < flint.arb(10) ** -14 and delta_i.imag.contains(0)


# ----------------------------------------------------------------------------------------------
# elliptic curves of small conductor ([Cr] Table 1)
# ----------------------------------------------------------------------------------------------

CURVE_BOUND = 500


@pytest.mark.parametrize("name", sorted(CURVES))
def test_curve_point_counts_match_a_rational_orbit(name):
    # [Cr] Table 1 (equations from memory): a_p = p + 1 − #E(F_p), counted here, good p < 500.
    c = CURVES[name]
    N, ainv = c["N"], c["ainv"]
    # transcription check: the discriminant is divisible exactly by the primes of N
    assert set(factorize(abs(curve_discriminant(ainv)))) == set(factorize(N))
    good = [p for p in primes_upto(CURVE_BOUND - 1) if N % p]
    R = unit(N, 2, CURVE_BOUND, 100)
    found = rational_orbits_matching(R, {p: curve_ap(ainv, p) for p in good})
    assert len(found) == 1
    (f,) = found
    # root number = (−1)^rank (parity of the rank in [Cr] Table 1, from memory)
    assert f.root_number == (-1) ** c["rank"]
    assert f.fricke_sign == -f.root_number  # weight 2: root = −ε_N  [AL]
    # L(E,1) = 0 iff rank > 0 for these curves (ranks ≤ 1 by Gross–Zagier–Kolyvagin; 389a1 has
    # L(E,1) = 0 as its rank is 2, [Cr] Table 1)
    assert f.lvalue_zero == (c["rank"] > 0)
    # l_ratio = 2·L(E,1)/Ω_E (builder/forms/winding.py normalisation; BSD data from memory:
    # 11a1 L/Ω = 1/5, 37b1 L/Ω = 1/3)
    assert Fraction(f.l_ratio) == 2 * c["L_over_omega"]
    # the exact a_p agree with the count as well
    assert all(f.ap[p] == [str(curve_ap(ainv, p))] for p in good if p <= 100)


def test_curve_levels_have_the_published_classes():
    # [Cr] Table 1 (from memory): conductor 11 has one isogeny class, 37 two (37a, 37b), 389 one;
    # weight-2 rational newforms ↔ isogeny classes (modularity; [Cr] ch. 2).
    assert [f.dim for f in unit(11, 2, CURVE_BOUND, 100).newforms] == [1]
    assert [f.dim for f in unit(37, 2, CURVE_BOUND, 100).newforms] == [1, 1]
    assert [f.dim for f in unit(389, 2, CURVE_BOUND, 100).newforms if f.dim == 1] == [1]
    # genus of X0(389) is 32 = dim S_2^new(Γ0(389)) (389 prime, genus 0 below) — [DS] formula
    assert unit(389, 2, CURVE_BOUND, 100).dim_new == o.genus(389) == 32


# ----------------------------------------------------------------------------------------------
# dimensions and the trace formula, N ≤ 100, k ∈ {2, 4}
# ----------------------------------------------------------------------------------------------

TRACE_LEVELS = range(1, 101)
TRACE_N = 30


@pytest.mark.parametrize("k", [2, 4])
def test_dimensions_of_records(k):
    # dim S_k(Γ0(N)) and dim E_k from [DS] Thm 3.5.1; dim new from [Mt]; Σ d = dim new (identities)
    for N in TRACE_LEVELS:
        R = unit(N, k, TRACE_N)
        assert (R.level, R.weight, R.char_index) == (N, k, 0)
        assert R.dim_cusp == o.dim_cusp(N, k), N
        assert R.dim_eis == o.dim_eisenstein(N, k), N
        assert R.dim_new == o.dim_new(N, k), N
        assert R.sturm_bound == k * o.psi(N) // 12  # [Su]: ⌊k ψ(N)/12⌋


@pytest.mark.parametrize("k", [2, 4])
def test_traces_satisfy_the_eichler_selberg_trace_formula(k):
    # S_k(Γ0(N)) = ⊕_{M|N} ⊕_{t | N/M} f(tz) over newforms f of level M (Atkin–Lehner [AL]),
    # so Tr T_n = Σ_{M|N} σ0(N/M) Σ_orbits Tr a_n for gcd(n, N) = 1; right side: [CS] Thm 12.4.11
    # (tests/oracles.py, written independently of the engine).
    for N in TRACE_LEVELS:
        for n in range(1, TRACE_N + 1):
            if gcd(n, N) != 1:
                continue
            lhs = 0
            for M in o.divisors(N):
                R = unit(M, k, TRACE_N)
                lhs += sigma0(N // M) * sum(f.traces[n - 1] for f in R.newforms)
            assert lhs == o.trace_hecke(n, N, k), (N, k, n)


# ----------------------------------------------------------------------------------------------
# CM
# ----------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "N,D",
    # the rational newforms of these levels are the curves 27a (j = 0), 32a (j = 1728),
    # 36a (j = 0), 49a (j = −3375): CM by −3, −4, −3, −7 ([Cr] Table 1, j-invariants from memory)
    [(27, -3), (32, -4), (36, -3), (49, -7)],
)
def test_cm_forms(N, D):
    R = unit(N, 2, ETA_TERMS)
    rational = [f for f in R.newforms if f.dim == 1]
    assert len(rational) == 1
    (f,) = rational
    assert f.is_cm and f.cm_disc == D


@pytest.mark.parametrize("N,k", [(11, 2), (37, 2), (389, 2), (1, 12)])
def test_no_cm(N, k):
    # 11a, 37a, 37b (j not a CM j-invariant; a_p ≠ 0 for p inert in every Q(√D), D | N) and Δ
    B = CURVE_BOUND if k == 2 else 100
    R = unit(N, k, B, 100)
    assert all(not f.is_cm and f.cm_disc is None for f in R.newforms if f.dim == 1)


# ----------------------------------------------------------------------------------------------
# level 23
# ----------------------------------------------------------------------------------------------


def test_level23_one_orbit_of_dimension_two():
    # [Cr] Table / [St] ch. 1 example: S_2(Γ0(23)) is spanned by one Galois orbit, d = 2,
    # coefficient field Q(√5) (a_2 = (−1 ± √5)/2): field polynomial of discriminant 5.
    R = unit(23, 2, 100)
    assert R.dim_new == 2 and R.num_orbits == 1
    (f,) = R.newforms
    assert f.dim == 2 and f.field_disc == "5"
    assert flint.fmpz_poly(f.field_poly).discriminant() == 5
    # a_2 is a root of x² + x − 1 (Tr a_2 = −1, N(a_2) = −1), from memory of [St]'s example
    assert f.traces[1] == -1


# ----------------------------------------------------------------------------------------------
# determinism and order (design.md §4)
# ----------------------------------------------------------------------------------------------

DET_UNITS = [(37, 2), (389, 2), (60, 4), (23, 2)]
DET_PARAMS = {"trace_bound": 40, "ap_bound": 40, "dim_cap": 20}


def test_same_unit_twice_gives_the_same_content_hash():
    for N, k in DET_UNITS:
        a = compute_unit(N, k, Params(**DET_PARAMS))
        b = compute_unit(N, k, Params(**DET_PARAMS))
        assert a.content_hash() == b.content_hash()
        assert a.to_dict() | {"seconds": 0} == b.to_dict() | {"seconds": 0}
        # the plain-dict (JSON) round trip keeps the content
        c = SpaceRecord.from_dict(json.loads(json.dumps(a.to_dict())))
        assert c.content_hash() == a.content_hash()
        check_record_identities(a)


def test_content_hash_independent_of_the_process_and_hash_seed():
    # identical output for any seed: another interpreter with another PYTHONHASHSEED
    code = (
        "import json,sys\n"
        "from builder.forms.record import compute_unit, Params\n"
        f"P = Params(**{DET_PARAMS!r})\n"
        f"print(json.dumps([compute_unit(N, k, P).content_hash() for N, k in {DET_UNITS!r}]))\n"
    )
    env = dict(os.environ, PYTHONHASHSEED="12345")
    out = subprocess.run(
        [sys.executable, "-c", code], cwd=ROOT, env=env, capture_output=True, text=True, check=True
    )
    there = json.loads(out.stdout)
    here = [compute_unit(N, k, Params(**DET_PARAMS)).content_hash() for N, k in DET_UNITS]
    assert there == here


def test_orbit_order_by_dimension_then_prime_traces():
    # design.md §4: (dim, Tr a_p for p = 2, 3, 5, … compared as integers), numbered from 1.
    # 57 has three rational classes (57a, 57b, 57c in [Cr] Table 1); 389 has d = 1, 2, 3, 6, 20.
    R = unit(57, 2, 100)
    assert [f.dim for f in R.newforms] == [1, 1, 1]
    ps = primes_upto(100)
    keys = [[f.traces[p - 1] for p in ps] for f in R.newforms]
    assert keys == sorted(keys) and len(set(map(tuple, keys))) == 3
    assert [f.label for f in R.newforms] == ["57w2-1", "57w2-2", "57w2-3"]
    assert [f.dim for f in unit(389, 2, CURVE_BOUND, 100).newforms] == [1, 2, 3, 6, 20]


# ----------------------------------------------------------------------------------------------
# bad input
# ----------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "args,word",
    [
        ((0, 2), "level"),
        ((-11, 2), "level"),
        ((11.0, 2), "level"),
        (("11", 2), "level"),
        ((True, 2), "level"),
        ((11, 1), "weight"),
        ((11, 0), "weight"),
        ((11, -2), "weight"),
        ((11, 2.5), "weight"),
        ((11, "2"), "weight"),
    ],
)
def test_bad_level_or_weight(args, word):
    with pytest.raises(ValueError, match=word):
        compute_unit(*args, Params(trace_bound=10, ap_bound=10))


@pytest.mark.parametrize(
    "kw,word",
    [
        ({"trace_bound": 0}, "trace_bound"),
        ({"trace_bound": -5}, "trace_bound"),
        ({"ap_bound": 1}, "ap_bound"),
        ({"dim_cap": -1}, "dim_cap"),
        ({"trace_bound": 10.5}, "trace_bound"),
        ({"trace_bound": "10"}, "trace_bound"),
        ({"ap_bound": 7.0}, "ap_bound"),
        ({"dim_cap": "3"}, "dim_cap"),
    ],
)
def test_bad_params(kw, word):
    params = {"trace_bound": 10, "ap_bound": 10, "dim_cap": 5} | kw
    with pytest.raises(ValueError, match=word):
        compute_unit(11, 2, Params(**params))


def test_bad_char_index():
    # (Z/11)^× is cyclic of order 10: four orbits of characters (orders 1, 2, 5, 10),
    # indices 0..3 (common practice)
    with pytest.raises(ValueError, match="char_index"):
        compute_unit(11, 2, Params(trace_bound=10, ap_bound=10), char_index=4)
    with pytest.raises(ValueError, match="char_index"):
        compute_unit(11, 2, Params(trace_bound=10, ap_bound=10), char_index=-1)


@pytest.mark.parametrize("N,k", [(1, 3), (11, 3), (23, 5), (100, 7)])
def test_odd_weight_gives_an_empty_record(N, k):
    # −1 ∈ Γ0(N) acts on S_k by (−1)^k: the spaces of odd weight are zero (common practice)
    R = compute_unit(N, k, Params(trace_bound=10, ap_bound=10))
    assert (R.level, R.weight) == (N, k)
    assert (R.dim_cusp, R.dim_new, R.dim_old, R.dim_eis, R.num_orbits) == (0, 0, 0, 0, 0)
    assert R.newforms == []
    check_record_identities(R)


def test_dim_cap_controls_exact_eigenvalues():
    # exact a_p only for orbits of dimension ≤ dim_cap; traces for every orbit (issue 3, item 3)
    R = unit(389, 2, 60, 30, 3)
    assert [f.ap is None for f in R.newforms] == [False, False, False, True, True]
    full = unit(389, 2, CURVE_BOUND, 100)
    assert [f.traces[:60] for f in R.newforms] == [f.traces[:60] for f in full.newforms]


def _same_trace_far(c: list[str]) -> list[str]:
    """a + bβ ↦ (a − 10) + (b + 20)β for β² = β + 1: same trace, embeddings beyond Deligne."""
    a, b = Fraction(c[0]), Fraction(c[1])
    return [str(a - 10), str(b + 20)]


def _corrupted(R, edit):
    S = copy.deepcopy(R)
    edit(S)
    return S


@pytest.mark.parametrize(
    "N,edit",
    [
        (37, lambda S: S.newforms[0].traces.__setitem__(0, 2)),  # a_1 ≠ 1
        (37, lambda S: S.newforms[0].traces.__setitem__(5, 7)),  # a_6 ≠ a_2 a_3
        (37, lambda S: S.newforms[0].traces.__setitem__(3, 5)),  # a_4 ≠ a_2² − 2
        (37, lambda S: setattr(S.newforms[0], "fricke_sign", -S.newforms[0].fricke_sign)),
        (37, lambda S: setattr(S.newforms[0], "root_number", -S.newforms[0].root_number)),
        (37, lambda S: setattr(S.newforms[0], "lvalue_zero", False)),
        (37, lambda S: S.newforms[0].traces.__setitem__(36, 1)),  # a_37 ≠ −ε_37
        (37, lambda S: S.newforms.reverse()),  # order / labels
        (23, lambda S: S.newforms[0].ap.__setitem__(3, ["3", "1"])),  # exact a_3 changed
        (23, lambda S: setattr(S.newforms[0], "field_poly", [1, -1, 1])),  # not totally real
        (23, lambda S: S.newforms[0].ap.__setitem__(13, _same_trace_far(S.newforms[0].ap[13]))),
    ],
)
def test_identity_checker_rejects_corrupted_records(N, edit):
    # the helper applied to every record is not vacuous: each corruption is caught
    R = unit(N, 2, 40)
    with pytest.raises(AssertionError):
        check_record_identities(_corrupted(R, edit))
