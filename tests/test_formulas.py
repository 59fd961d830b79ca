"""builder/checks/formulas.py against published values and classical identities.

Each test names its source. The formulas module must stand on its own: it may
not import the engine (builder.symbols, builder.forms, builder.arith).
"""

from __future__ import annotations

import ast
import math
from fractions import Fraction
from pathlib import Path

import pytest

from builder.checks import formulas as F

# ----------------------------------------------------------------------------- independence


def test_formulas_import_nothing_from_the_engine():
    tree = ast.parse(Path(F.__file__).read_text())
    mods = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            mods |= {a.name for a in node.names}
        elif isinstance(node, ast.ImportFrom):
            mods.add(node.module or "")
    assert not [m for m in mods if m.startswith("builder")], mods


# ----------------------------------------------------------------------------- genus


# OEIS A001617, genus of X0(N), N = 1..50
A001617 = [
    0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 1, 0, 0, 1, 1, 0, 1, 0, 1, 1, 1, 2, 2, 1, 0,
    2, 1, 2, 2, 3, 2, 1, 3, 3, 3, 1, 2, 4, 3, 3, 3, 5, 3, 4, 3, 5, 4, 3, 1, 2,
]  # fmt: skip


def test_genus_oeis_a001617():
    assert [F.genus(N) for N in range(1, 51)] == A001617


def test_genus_zero_one_two_complete_lists():
    # A. Ogg, "Hyperelliptic modular curves", Bull. SMF 102 (1974), and the classical
    # lists of X0(N) of genus 0 and 1 (e.g. [DS] exercises 3.1.4–3.1.5 and tables)
    genus0 = {1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 12, 13, 16, 18, 25}
    genus1 = {11, 14, 15, 17, 19, 20, 21, 24, 27, 32, 36, 49}
    genus2 = {22, 23, 26, 28, 29, 31, 37, 50}
    for N in range(1, 1001):
        g = F.genus(N)
        assert (g == 0) == (N in genus0), N
        assert (g == 1) == (N in genus1), N
        assert (g == 2) == (N in genus2), N


def test_genus_prime_level():
    # the classical closed form for prime p ≥ 5: g(X0(p)) = (p + 1)/12 − 1 + corrections,
    # i.e. ⌊(p+1)/12⌋ − 1 for p ≡ 1 (mod 12), ⌊(p+1)/12⌋ otherwise ([DS] §3.9 with N = p)
    for p in F.primes_up_to(3000):
        if p < 5:
            continue
        want = (p + 1) // 12 - (1 if p % 12 == 1 else 0)
        assert F.genus(p) == want, p


def test_cusps_and_index():
    # [DS] §3.8: ν∞(p^2) = p + 1, ν∞(p) = 2; ψ(N) = |P¹(Z/NZ)|
    for p in (2, 3, 5, 7, 11):
        assert F.nu_inf(p) == 2 and F.nu_inf(p * p) == p + 1
    for N in range(1, 90):
        brute = {
            (c % N, d % N) for c in range(N) for d in range(N) if math.gcd(math.gcd(c, d), N) == 1
        }
        # number of points of P¹(Z/NZ) = pairs up to units
        units = [u for u in range(N) if math.gcd(u, N) == 1] or [0]
        assert len(brute) == len(units) * F.psi(N)


# ----------------------------------------------------------------------------- dimensions


def test_level_one_dimensions():
    # J.-P. Serre, A Course in Arithmetic, VII §3.2 Thm 4: dim M_k(SL2(Z)) = ⌊k/12⌋ + 1
    # for even k ≥ 0, k ≢ 2 (mod 12), and ⌊k/12⌋ for k ≡ 2 (mod 12); S_k has one less (k ≥ 4)
    for k in range(4, 200, 2):
        m = k // 12 + (0 if k % 12 == 2 else 1)
        assert F.dim_modular(1, k) == m
        assert F.dim_cusp(1, k) == m - 1
    assert F.dim_cusp(1, 2) == 0 and F.dim_modular(1, 2) == 0


def test_dim_cusp_weight_two_is_genus_and_eisenstein():
    for N in range(1, 500):
        assert F.dim_cusp(N, 2) == F.genus(N)
        # [DS] Thm 3.5.1: dim E_2 = ν∞ − 1, dim E_k = ν∞ for k ≥ 4
        assert F.dim_eisenstein(N, 2) == F.nu_inf(N) - 1
        assert F.dim_eisenstein(N, 4) == F.nu_inf(N)
        assert F.dim_modular(N, 4) == F.dim_cusp(N, 4) + F.nu_inf(N)


def test_martin_closed_form_equals_the_beta_convolution():
    # [Mt] Thm 1 (closed form) against the defining relation Σ β(N/M) dim S_k(M)
    for N in range(1, 1500):
        for k in (2, 4, 6, 12):
            assert F.dim_new(N, k) == F.dim_new_by_divisors(N, k), (N, k)


def test_old_plus_new_decomposition():
    # Atkin–Lehner [AL]: S_k(Γ0(N)) = ⊕_{M|N} ⊕_{d | N/M} S_k^new(M)(dz)
    for N in range(1, 400):
        for k in (2, 4, 8):
            total = sum(F.sigma0(N // M) * F.dim_new(M, k) for M in F.divisors(N))
            assert total == F.dim_cusp(N, k), (N, k)


def test_new_dimensions_small_published_values():
    # weight 2: dim S_2^new(Γ0(N)) for N = 11, 37, 389 is 1, 2, 32 (Cremona [Cr] Table 1:
    # one isogeny class at 11; two (37a, 37b) at 37); prime p: = genus
    assert F.dim_new(11, 2) == 1
    assert F.dim_new(37, 2) == 2
    assert F.dim_new(389, 2) == F.genus(389) == 32
    assert F.dim_new(12, 2) == 0 and F.dim_new(16, 2) == 0


# ----------------------------------------------------------------------------- class numbers


def _is_fundamental(D: int) -> bool:
    if D % 4 == 1:
        m = -D
        return all(m % (q * q) for q in range(2, math.isqrt(m) + 1))
    if D % 4 == 0:
        m = -D // 4
        if m % 4 not in (1, 2):
            return False
        return all(m % (q * q) for q in range(2, math.isqrt(m) + 1))
    return False


def test_class_number_one_and_two_complete_lists():
    # Heegner–Baker–Stark: the nine imaginary quadratic fields of class number 1;
    # Baker / Stark (1971): the eighteen of class number 2
    one = {-3, -4, -7, -8, -11, -19, -43, -67, -163}
    two = {-15, -20, -24, -35, -40, -51, -52, -88, -91, -115, -123, -148, -187, -232, -235,
           -267, -403, -427}  # fmt: skip
    for D in range(-3, -3000, -1):
        if not _is_fundamental(D):
            continue
        h = F.class_number(D)
        assert (h == 1) == (D in one), D
        assert (h == 2) == (D in two), D


def test_class_numbers_gauss_table():
    # Gauss's tables (Disquisitiones, art. 303; [Co] Table B.1): h(−23) = 3, h(−47) = 5,
    # h(−71) = 7, h(−56) = 4, h(−84) = 4; non-fundamental: h(−12) = 1, h(−16) = 1, h(−27) = 1
    for D, h in {-23: 3, -47: 5, -71: 7, -56: 4, -84: 4, -12: 1, -16: 1, -27: 1}.items():
        assert F.class_number(D) == h, D


def test_hurwitz_values_and_kronecker_hurwitz_relation():
    # 12·H(n) from OEIS A259825
    twelve_h = {3: 4, 4: 6, 7: 12, 8: 12, 11: 12, 12: 16, 15: 24, 16: 18, 19: 12, 20: 24,
                23: 36, 24: 24}  # fmt: skip
    for n, v in twelve_h.items():
        assert 12 * F.hurwitz(n) == v, n
    # Kronecker–Hurwitz: Σ_{t² ≤ 4n} H(4n − t²) = 2σ(n) − Σ_{d|n} min(d, n/d), H(0) = −1/12
    for n in range(1, 200):
        s = Fraction(0)
        for t in range(-math.isqrt(4 * n), math.isqrt(4 * n) + 1):
            m = 4 * n - t * t
            s += Fraction(-1, 12) if m == 0 else F.hurwitz(m)
        assert s == 2 * F.sigma1(n) - sum(min(d, n // d) for d in F.divisors(n)), n


# ----------------------------------------------------------------------------- trace formula

# OEIS A000594, Ramanujan's τ(n), n = 1..20
A000594 = [1, -24, 252, -1472, 4830, -6048, -16744, 84480, -113643, -115920, 534612,
           -370944, -577738, 401856, 1217160, 987136, -6905934, 2727432, 10661420,
           -7109760]  # fmt: skip


def _eta_product(factors: dict[int, int], n_terms: int) -> list[int]:
    """q-expansion coefficients (q^1 … q^n_terms) of q·∏_δ ∏_m (1 − q^(δm))^(r_δ), the
    eta quotient ∏ η(δz)^(r_δ) when Σ δ r_δ = 24 (so the leading power is q^1)."""
    assert sum(d * r for d, r in factors.items()) == 24
    series = [0] * n_terms
    series[0] = 1  # coefficient of q^(1+i) at index i
    for delta, r in factors.items():
        for m in range(1, n_terms):
            step = delta * m
            if step >= n_terms:
                break
            for _ in range(r):  # multiply by (1 − q^step)
                for i in range(n_terms - 1, step - 1, -1):
                    series[i] -= series[i - step]
    return series


def test_tau_is_the_trace_on_level_one_weight_twelve():
    assert [F.trace_hecke(1, 12, n) for n in range(1, 21)] == A000594
    delta = _eta_product({1: 24}, 60)  # Δ = q ∏ (1 − q^n)^24
    assert [F.trace_hecke(1, 12, n) for n in range(1, 61)] == delta


def test_tau_numerically_against_modular_delta():
    # python-flint's acb.modular_delta(τ) at τ = i: Δ(i) = Σ τ(n) e^(−2πn)
    flint = pytest.importorskip("flint")
    value = flint.acb(0, 1).modular_delta().real
    s = sum(F.trace_hecke(1, 12, n) * math.exp(-2 * math.pi * n) for n in range(1, 30))
    assert abs(float(value) - s) < 1e-12 * abs(s)


# Multiplicative eta quotients spanning S_k(Γ0(N)) (dim 1): Martin–Ono [MO] Table 1
# (weight 2) and Y. Martin [Mn] (weights 4, 6, 8)
ETA_NEWFORMS = {
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
    (4, 6): {2: 12},
    (2, 8): {1: 8, 2: 8},
}


@pytest.mark.parametrize("N,k", sorted(ETA_NEWFORMS))
def test_trace_formula_against_eta_quotients(N, k):
    assert F.dim_cusp(N, k) == 1
    coeffs = _eta_product(ETA_NEWFORMS[(N, k)], 80)
    for n in range(1, 81):
        if math.gcd(n, N) == 1:
            assert F.trace_hecke(N, k, n) == coeffs[n - 1], (N, k, n)


def test_trace_of_t1_is_the_dimension():
    for N in range(1, 250):
        for k in (2, 4, 6, 8, 10, 12):
            assert F.trace_hecke(N, k, 1) == F.dim_cusp(N, k), (N, k)


def test_trace_formula_refuses_n_not_coprime():
    with pytest.raises(ValueError):
        F.trace_hecke(12, 2, 2)


def test_deligne_bound_on_tau():
    # Deligne: |τ(p)| ≤ 2 p^(11/2); the check is exact (squares)
    for n, t in enumerate(A000594, start=1):
        assert F.deligne_trace_ok(t, 1, n, 12)
    assert not F.deligne_trace_ok(2 * 2**6, 1, 2, 12)  # 128 > 2·2^5.5 ≈ 90.5
