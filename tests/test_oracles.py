"""Validation of the oracles in tests/oracles.py against data that do not come from the engine.

The engine tests trust these oracles, so they are checked here first: published values
(OEIS A000594, class-number tables), independent expansions (eta products), point counts
on elliptic curves, and identities between two independently written formulas.
"""

from __future__ import annotations

from fractions import Fraction
from math import gcd

import flint
import pytest

from tests import oracles as o

# OEIS A000594: τ(1..30).
TAU_A000594 = [
    1, -24, 252, -1472, 4830, -6048, -16744, 84480, -113643, -115920,
    534612, -370944, -577738, 401856, 1217160, 987136, -6905934, 2727432, 10661420, -7109760,
    -4219488, -12830688, 18643272, 21288960, -25499225, 13865712, -73279080, 24647168,
    128406630, -29211840,
]  # fmt: skip

# Weight-k eta products spanning 1-dimensional spaces S_k(Γ0(N)) ([MO]; Dummit–Kisilevsky–McKay).
ETA_PRODUCTS = {
    (11, 2): {1: 2, 11: 2},
    (14, 2): {1: 1, 2: 1, 7: 1, 14: 1},
    (15, 2): {1: 1, 3: 1, 5: 1, 15: 1},
    (20, 2): {2: 2, 10: 2},
    (24, 2): {2: 1, 4: 1, 6: 1, 12: 1},
    (27, 2): {3: 2, 9: 2},
    (32, 2): {4: 2, 8: 2},
    (36, 2): {6: 4},
    (5, 4): {1: 4, 5: 4},
    (6, 4): {1: 2, 2: 2, 3: 2, 6: 2},
    (8, 4): {2: 4, 4: 4},
    (9, 4): {3: 8},
    (3, 6): {1: 6, 3: 6},
    (4, 6): {2: 12},
    (2, 8): {1: 8, 2: 8},
    (1, 12): {1: 24},
}


# -- elementary pieces ---------------------------------------------------------------------------


def test_tau_matches_oeis():
    # OEIS A000594 against the q-expansion of Δ = q∏(1 − q^n)^24.
    assert o.ramanujan_tau(30) == TAU_A000594


def test_delta_numerically_matches_flint():
    # python-flint acb.modular_delta (Arb) as a numerical cross-check of the expansion (design §6).
    tau = o.ramanujan_tau(60)
    z = flint.acb(flint.arb("0.1"), flint.arb("1.1"))
    q = (2 * flint.acb(0, 1) * flint.arb.pi() * z).exp()
    series = sum((tau[n - 1] * q**n for n in range(1, 61)), flint.acb(0))
    # tail: |τ(n)| ≤ n^6 (crude), |q| = e^(−2π·1.1) ≈ 1e−3, so the tail is < 1e−150
    assert abs(complex(series) - complex(z.modular_delta())) < 1e-14


def test_tau_multiplicative_and_hecke_recursion():
    # Ramanujan's conjectures (Mordell): τ(mn) = τ(m)τ(n) coprime; τ(p²) = τ(p)² − p^11.
    tau = [None] + o.ramanujan_tau(200)
    for m in range(1, 15):
        for n in range(1, 15):
            if gcd(m, n) == 1:
                assert tau[m * n] == tau[m] * tau[n]
    for p in (2, 3, 5, 7, 11, 13):
        assert tau[p * p] == tau[p] ** 2 - p**11


def test_hurwitz_small_values():
    # Values of H(n) (Cohen GTM 138 §5.3; Zagier's table): H(0) = −1/12, H(3) = 1/3, H(4) = 1/2.
    expected = {0: Fraction(-1, 12), 3: Fraction(1, 3), 4: Fraction(1, 2), 7: 1, 8: 1, 11: 1,
                12: Fraction(4, 3), 15: 2, 16: Fraction(3, 2), 19: 1, 20: 2, 23: 3, 24: 2,
                27: Fraction(4, 3), 28: 2, 31: 3, 32: 3, 35: 2, 36: Fraction(5, 2)}  # fmt: skip
    for n, h in expected.items():
        assert o.hurwitz(n) == h, n
    for n in (1, 2, 5, 6, 9, 10):
        assert o.hurwitz(n) == 0


def test_hurwitz_is_sum_of_weighted_class_numbers():
    # H(n) = Σ_{f² | n, −n/f² a discriminant} h_w(−n/f²) (Cohen GTM 138 §5.3.2).
    for n in range(3, 600):
        if n % 4 not in (0, 3):
            continue
        s = Fraction(0)
        f = 1
        while f * f <= n:
            if n % (f * f) == 0 and (-n // (f * f)) % 4 in (0, 1):
                s += o.class_number_weighted(-n // (f * f))
            f += 1
        assert s == o.hurwitz(n), n


def test_class_numbers_known():
    # Heegner–Stark: h(D) = 1 exactly for the 13 discriminants below among −D ≤ 200; h(−23)=3.
    ones = {-3, -4, -7, -8, -11, -12, -16, -19, -27, -28, -43, -67, -163}
    for D in range(-3, -200, -1):
        if D % 4 in (0, 1):
            h = len(o.reduced_forms(D))
            assert (h == 1) == (D in ones), D
    assert len(o.reduced_forms(-23)) == 3 and len(o.reduced_forms(-47)) == 5


def test_genus_small_levels():
    # Genus of X0(N), N = 1..50 (standard table, e.g. [DS] Exercise 3.1.4 / [Cr] Table 1 counts).
    g = [0, 0, 0, 0, 0, 0, 0, 0, 0, 0,
         1, 0, 0, 1, 1, 0, 1, 0, 1, 1,
         1, 2, 2, 1, 0, 2, 1, 2, 2, 3,
         2, 1, 3, 3, 3, 1, 2, 4, 3, 3,
         3, 5, 3, 4, 3, 5, 4, 3, 1, 2]  # fmt: skip
    assert [o.genus(N) for N in range(1, 51)] == g


def test_dims_level_one():
    # dim S_k(SL2(Z)) = ⌊k/12⌋ − [k ≡ 2 mod 12], dim M_k = dim S_k + 1 (k ≥ 4) ([DS] Thm 3.5.2).
    for k in range(4, 60, 2):
        expect = k // 12 - (1 if k % 12 == 2 else 0)
        assert o.dim_cusp(1, k) == expect
        assert o.dim_modular(1, k) == expect + 1
    assert o.dim_cusp(1, 2) == 0 and o.dim_modular(1, 2) == 0


def test_martin_new_dims_decompose_old_space():
    # Atkin–Lehner: S_k(Γ0(N)) = ⊕_{M|N} ⊕_{d | N/M} S_k^new(Γ0(M))|B_d, so
    # dim S_k = Σ_{M|N} σ0(N/M) dim S_k^new(M) — independent of the Möbius-type formula of [Mt].
    for k in (2, 4, 6, 8, 12):
        for N in range(1, 300):
            total = sum(len(o.divisors(N // M)) * o.dim_new(M, k) for M in o.divisors(N))
            assert total == o.dim_cusp(N, k), (N, k)
            assert o.dim_new(N, k) >= 0


def test_cremona_cusp_criterion_counts_cusps():
    # [Cr] Prop. 2.2.3 partitions the cusps a/c (c | N suffices) into ν∞ classes ([DS] §3.8).
    for N in range(1, 80):
        reps: list[tuple[int, int]] = []
        for c in o.divisors(N):
            for a in range(0, 2 * N + 1):
                if gcd(a, c) != 1:
                    continue
                if not any(o.cusps_equivalent_cremona(N, (a, c), r) for r in reps):
                    reps.append((a, c))
        assert len(reps) == o.nu_inf(N), N


# -- the trace formula --------------------------------------------------------------------------


@pytest.mark.parametrize("k", [2, 4, 6, 8, 10, 12, 14, 24])
def test_trace_formula_n1_is_dimension(k):
    # Tr T_1 = dim S_k(Γ0(N)) ([DS] Thm 3.5.1) for N < 400.
    for N in range(1, 400):
        assert o.trace_hecke(1, N, k) == o.dim_cusp(N, k), N


def test_trace_formula_level_one_weight_12_is_tau():
    # S_12(SL2(Z)) = C·Δ, so Tr T_n = τ(n) (OEIS A000594).
    tau = o.ramanujan_tau(60)
    for n in range(1, 61):
        assert o.trace_hecke(n, 1, 12) == tau[n - 1], n


def test_trace_formula_level_one_weight_24():
    # S_24(SL2(Z)) has dim 2 and Tr T_2 = 1080 (Hecke 1937; e.g. Zagier, "Elliptic modular
    # forms and their applications", §5: charpoly of T_2 is x² − 1080x − 20468736000).
    assert o.trace_hecke(2, 1, 24) == 1080


@pytest.mark.parametrize("N,k", sorted(ETA_PRODUCTS))
def test_trace_formula_matches_eta_products(N, k):
    # 1-dimensional S_k(Γ0(N)) spanned by an eta product ([MO], Dummit–Kisilevsky–McKay):
    # Tr T_n = a_n for gcd(n, N) = 1; n up to 250 exercises μ(t, f, n) with gcd(N, f) > 1.
    assert o.dim_cusp(N, k) == 1
    B = 250 if k == 2 else 120
    a = o.eta_product(ETA_PRODUCTS[(N, k)], B)
    for n in range(1, B + 1):
        if gcd(n, N) == 1:
            assert o.trace_hecke(n, N, k) == a[n - 1], (N, k, n)


# Spaces S_2(Γ0(N)) that are sums of the rational newforms of Cremona's curves (with
# oldforms counted σ0(N/M) times, Atkin–Lehner); [Cr] Table 1.
CURVE_SPACES = {
    11: {"11a1": 1},
    14: {"14a1": 1},
    15: {"15a1": 1},
    17: {"17a1": 1},
    19: {"19a1": 1},
    20: {"20a1": 1},
    21: {"21a1": 1},
    22: {"11a1": 2},
    24: {"24a1": 1},
    26: {"26a1": 1, "26b1": 1},
    27: {"27a1": 1},
    30: {"30a1": 1, "15a1": 2},
    32: {"32a1": 1},
    33: {"33a1": 1, "11a1": 2},
    36: {"36a1": 1},
    37: {"37a1": 1, "37b1": 1},
    49: {"49a1": 1},
}


@pytest.mark.parametrize("N", sorted(CURVE_SPACES))
def test_trace_formula_matches_elliptic_curves(N):
    # a_p = p + 1 − #E(F_p) (Eichler–Shimura) for Cremona's curves; Tr T_p summed over the space.
    spec = CURVE_SPACES[N]
    assert sum(spec.values()) == o.dim_cusp(N, 2)
    for p in o.primes_below(120):
        if N % p:
            expect = sum(m * o.curve_ap(o.CREMONA_CURVES[c], p) for c, m in spec.items())
            assert o.trace_hecke(p, N, 2) == expect, (N, p)


def test_eta_product_11_first_coefficients():
    # q∏(1 − q^n)²(1 − q^{11n})² = q − 2q² − q³ + 2q⁴ + q⁵ + 2q⁶ − 2q⁷ − 2q⁹ − 2q¹⁰ + q¹¹ …
    # ([Cr] Table 3, curve 11a; [DS] §6.6 example).
    assert o.eta_product({1: 2, 11: 2}, 12) == [1, -2, -1, 2, 1, 2, -2, 0, -2, -2, 1, -2]


def test_eta_products_agree_with_curves():
    # Eta product of level N and Cremona's curve of conductor N have the same a_p ([MO]).
    for (N, k), spec in ETA_PRODUCTS.items():
        if k != 2:
            continue
        name = f"{N}a1"
        a = o.eta_product(spec, 100)
        for p in o.primes_below(100):
            if N % p:
                assert a[p - 1] == o.curve_ap(o.CREMONA_CURVES[name], p), (N, p)
