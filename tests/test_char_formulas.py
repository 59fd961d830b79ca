"""builder/checks/char_formulas.py: dimensions and traces on S_k(Γ0(N), χ).

Each check names its source:
[CO]  H. Cohen, J. Oesterlé, LNM 627 (1977) — dimension of S_k(N, χ).
[CS]  H. Cohen, F. Strömberg, Modular Forms: A Classical Approach, GSM 179 — ch. 7
      (dimensions), Thm 12.4.11 (trace formula), ch. 10 (Hecke operators with character:
      T_{p²} = T_p² − χ(p) p^(k−1) for p ∤ N, T_mn = T_m T_n for gcd(m, n) = 1).
[DS]  F. Diamond, J. Shurman, A First Course in Modular Forms, GTM 228 — Fig. 3.3/3.4 and
      Thm 3.5.1/3.6.1 (genus, cusps and dim S_k(Γ1(N)) for N ≥ 5), §4.3 (M_k(Γ1(N)) is
      the direct sum of the M_k(N, χ)), §5.3 (Hecke recursion with diamond operators).
[De]  P. Deligne, La conjecture de Weil I (1974): |a_p| ≤ 2 p^((k−1)/2), hence
      |a_n| ≤ σ0(n) n^((k−1)/2) for the normalised eigenforms.
[Mt]  G. Martin, J. Number Theory 112 (2005) — σ0 / β convolution of new dimensions.
[YM]  Y. Martin, Trans. AMS 348 (1996) — η(z)³η(7z)³ ∈ S_3(Γ0(7), (−7/·)) (from memory).
[Wa]  L. Washington, Introduction to Cyclotomic Fields, GTM 83, ch. 2 — Z[ζ_m] is the
      ring of integers of Q(ζ_m) with basis 1, ζ, …, ζ^(φ(m)−1); Tr ζ_m = μ(m).
[Ja]  Jacobi's identity ∏(1 − q^n)³ = Σ_{j≥0} (−1)^j (2j+1) q^(j(j+1)/2).
"""

from __future__ import annotations

import ast
import cmath
import math
from fractions import Fraction
from math import gcd
from pathlib import Path

import pytest

from builder.characters import character_orbits, primes_one_mod
from builder.checks import char_formulas as C
from builder.checks import formulas as F
from builder.checks.char_formulas import Cyclotomic

WEIGHTS = range(2, 7)
SMALL_LEVELS = range(1, 41)


def orbits_up_to(top: int):
    for N in range(1, top + 1):
        for o in character_orbits(N):
            yield N, o


def embeddings(z: Cyclotomic) -> list[complex]:
    """σ_a(z) as complex numbers, a ∈ (Z/m)^× (ζ_m ↦ e^(2πi a/m))."""
    m = z.m
    out = []
    for a in range(1, m + 1):
        if gcd(a, m) == 1:
            w = cmath.exp(2j * math.pi * a / m)
            out.append(sum(complex(c) * w**i for i, c in enumerate(z.coeffs)))
    return out


# ----------------------------------------------------------------------------- independence


def test_imports_only_formulas_and_characters():
    # the module must not use the engine (builder.symbols, builder.forms, builder.linalg*)
    tree = ast.parse(Path(C.__file__).read_text())
    mods = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            mods |= {a.name for a in node.names}
        elif isinstance(node, ast.ImportFrom):
            mods.add(node.module or "")
    assert {m for m in mods if m.startswith("builder")} <= {
        "builder.checks.formulas", "builder.characters"}, mods


# ----------------------------------------------------------------------------- Q(ζ_m)


def test_cyclotomic_polynomials():
    # the classical small cyclotomic polynomials; deg Φ_m = φ(m) ([Wa] ch. 2)
    assert C.cyclotomic_polynomial(1) == (-1, 1)
    assert C.cyclotomic_polynomial(2) == (1, 1)
    assert C.cyclotomic_polynomial(4) == (1, 0, 1)
    assert C.cyclotomic_polynomial(6) == (1, -1, 1)
    assert C.cyclotomic_polynomial(8) == (1, 0, 0, 0, 1)
    assert C.cyclotomic_polynomial(12) == (1, 0, -1, 0, 1)
    assert C.cyclotomic_polynomial(7) == (1,) * 7
    for m in range(1, 61):
        assert len(C.cyclotomic_polynomial(m)) == F.euler_phi(m) + 1


def _elements(m: int, count: int = 6) -> list[Cyclotomic]:
    """Deterministic sample elements of Q(ζ_m) (a linear congruential sequence)."""
    out, s = [], 12345 + m
    for _ in range(count):
        vec = []
        for _ in range(m):
            s = (1103515245 * s + 12345) % 2**31
            vec.append(Fraction(s % 11 - 5, 1 + s % 3))
        out.append(Cyclotomic(m, vec))
    return out


@pytest.mark.parametrize("m", [1, 2, 3, 4, 5, 6, 8, 9, 10, 12, 15, 16, 18, 20, 36])
def test_cyclotomic_field_arithmetic(m):
    z = Cyclotomic.zeta(m)
    # ζ_m is a primitive m-th root of unity ([Wa] ch. 2)
    p = Cyclotomic.rational(m, 1)
    for _ in range(1, m):
        p = p * z
        assert p != 1
    assert p * z == 1
    # Tr ζ_m = μ(m), Tr 1 = φ(m) ([Wa] ch. 2)
    assert z.trace() == F.moebius(m)
    assert Cyclotomic.rational(m, 1).trace() == F.euler_phi(m)
    xs = _elements(m)
    ell = next(primes_one_mod(m, 10**6))
    for x in xs:
        for y in xs[:3]:
            # a commutative ring; σ_a and reduction modulo ℓ are ring homomorphisms;
            # the trace is Q-linear and equals the sum of the conjugates
            assert x * y == y * x and (x + y) - y == x
            assert (x * y).conjugate(-1) == x.conjugate(-1) * y.conjugate(-1)
            assert (x * y).reduce_mod(ell) == x.reduce_mod(ell) * y.reduce_mod(ell) % ell
            assert (x + y).reduce_mod(ell) == (x.reduce_mod(ell) + y.reduce_mod(ell)) % ell
            assert (x + 3 * y).trace() == x.trace() + 3 * y.trace()
        conj_sum = sum((x.conjugate(a) for a in range(1, m + 1) if gcd(a, m) == 1),
                       Cyclotomic(m))
        assert conj_sum == x.trace()
        assert abs(sum(embeddings(x)) - float(x.trace())) < 1e-9
        # the floating embeddings of a product are the products of the embeddings
        for u, v, w in zip(embeddings(x * xs[0]), embeddings(x), embeddings(xs[0]),
                           strict=True):
            assert abs(u - v * w) < 1e-9 * (1 + abs(u))


def test_cyclotomic_mixed_levels():
    # ζ_6² = ζ_3, ζ_4² = −1 (Q(ζ_m) ⊂ Q(ζ_lcm))
    assert Cyclotomic.zeta(6, 2) == Cyclotomic.zeta(3)
    assert Cyclotomic.zeta(4) * Cyclotomic.zeta(4) == -1
    assert Cyclotomic.zeta(3) + Cyclotomic.zeta(4) == Cyclotomic.zeta(12, 4) + Cyclotomic.zeta(
        12, 3)
    assert Cyclotomic(5, [Fraction(1, 2)] * 5) == 0  # 1 + ζ + … + ζ⁴ = 0
    assert not Cyclotomic(3, [Fraction(1, 2), 1]).is_integral()
    assert Cyclotomic(3, [2, 1, 1]).is_integral() and Cyclotomic(3, [2, 1, 1]) == 1


def test_character_values_match_values_mod():
    # the reduction ζ_m ↦ ω_ℓ is the one fixed by builder.characters (values_mod)
    for N in (7, 13, 15, 16, 21, 35, 37):
        for o in character_orbits(N):
            ell = next(primes_one_mod(o.order, 10**5))
            for a in o.conjugates():
                vm = o.values_mod(ell, a)
                for x in range(N):
                    assert C.character_value(o, x, a).reduce_mod(ell) == int(vm[x]) % ell


# ----------------------------------------------------------------------------- (a) χ trivial


@pytest.mark.parametrize("k", [2, 4, 6])
def test_trivial_character_equals_formulas(k):
    # builder/checks/formulas.py ([DS] Thm 3.5.1, [Mt] Thm 1, [CS] Thm 12.4.11 with χ = 1)
    for N in range(1, 101):
        one = character_orbits(N)[0]
        assert one.is_trivial
        assert C.dim_cusp(N, k, one) == C.dim_cusp(N, k) == F.dim_cusp(N, k), (N, k)
        assert C.dim_modular(N, k, one) == F.dim_modular(N, k), (N, k)
        assert C.dim_eisenstein(N, k, one) == F.dim_eisenstein(N, k), (N, k)
        assert C.dim_new(N, k, one) == F.dim_new(N, k), (N, k)
        for n in range(1, 14):
            if gcd(n, N) == 1:
                assert C.trace_hecke(N, k, one, n) == F.trace_hecke(N, k, n), (N, k, n)
                assert C.absolute_trace(N, k, one, n) == F.trace_hecke(N, k, n)


# ----------------------------------------------------------------------------- (b) Tr T_1


def test_trace_of_identity_is_the_dimension():
    # Tr T_1 by the trace formula ([CS] Thm 12.4.11) = dim S_k(N, χ) by [CO]
    for N, o in orbits_up_to(40):
        for k in WEIGHTS:
            d = C.dim_cusp(N, k, o)
            for a in o.conjugates()[:2]:
                assert C.trace_hecke(N, k, o, 1, a) == d, (N, o.index, k, a)
            assert C.absolute_trace(N, k, o, 1) == o.degree * d


# ----------------------------------------------------------------------------- (c) Deligne


def test_traces_are_integral_and_obey_deligne():
    # Tr T_n is an algebraic integer of Q(ζ_m) ([Wa]: integral ⇔ integer coefficients) and
    # |σ(Tr T_n)| ≤ dim·σ0(n)·n^((k−1)/2) in every embedding ([De]); the absolute trace is
    # an integer; the conjugate χ^a gives σ_a of the trace
    for N, o in orbits_up_to(40):
        for k in WEIGHTS:
            d = C.dim_cusp(N, k, o)
            for n in range(2, 21):
                if gcd(n, N) != 1:
                    continue
                t = C.trace_hecke(N, k, o, n)
                assert t.m == o.order and t.is_integral(), (N, o.index, k, n, t)
                bound = d * F.sigma0(n) * n ** ((k - 1) / 2)
                for z in embeddings(t):
                    assert abs(z) <= bound * (1 + 1e-9) + 1e-9, (N, o.index, k, n, t)
                assert C.deligne_mean_square_ok(t, d, n, k)
                at = C.absolute_trace(N, k, o, n)
                assert isinstance(at, int) and abs(at - sum(embeddings(t)).real) < 1e-6
                if o.order > 2 and n <= 5:
                    a = o.conjugates()[-1]
                    assert C.trace_hecke(N, k, o, n, a) == t.conjugate(a)


# ----------------------------------------------------------------------------- Hecke relations


def test_hecke_relations_in_one_dimensional_spaces():
    # when dim S_k(N, χ) = 1, Tr T_n = a_n of the normalised eigenform, so
    # a_mn = a_m a_n (gcd(m, n) = 1) and a_{p²} = a_p² − χ(p) p^(k−1) ([CS] ch. 10,
    # [DS] §5.3 with ⟨p⟩ = χ(p)); with a non-real χ this fixes χ against χ̄
    seen_nonreal = 0
    for N, o in orbits_up_to(40):
        for k in WEIGHTS:
            if C.dim_cusp(N, k, o) != 1:
                continue
            seen_nonreal += o.order > 2
            a = {n: C.trace_hecke(N, k, o, n) for n in range(1, 26) if gcd(n, N) == 1}
            for p in (2, 3, 5):
                if N % p:
                    chi_p = C.character_value(o, p)
                    assert a[p * p] == a[p] * a[p] - chi_p * p ** (k - 1), (N, o.index, k, p)
            for m_ in range(2, 6):
                for n in range(m_ + 1, 26 // m_ + 1):
                    if gcd(m_, n) == 1 and m_ * n in a and m_ in a and n in a:
                        assert a[m_ * n] == a[m_] * a[n], (N, o.index, k, m_, n)
    assert seen_nonreal >= 10


# ----------------------------------------------------------------------------- (d) eta product


def eta_product_7() -> list[int]:
    """a_n (n = 0..30) of η(z)³η(7z)³ = q ∏(1 − q^n)³(1 − q^(7n))³, by [Ja]."""
    B = 31
    cube = [0] * B
    j = 0
    while j * (j + 1) // 2 < B:
        cube[j * (j + 1) // 2] += (-1) ** j * (2 * j + 1)
        j += 1
    cube7 = [cube[i // 7] if i % 7 == 0 else 0 for i in range(B)]
    prod = [sum(cube[i] * cube7[n - i] for i in range(n + 1)) for n in range(B)]
    return [0] + prod[: B - 1]


def test_eta_product_weight_3_level_7():
    # [YM]: η(z)³η(7z)³ ∈ S_3(Γ0(7), (−7/·)); with a one-dimensional space its a_n are the
    # traces of T_n ([CS] Thm 12.4.11)
    (chi,) = [o for o in character_orbits(7) if o.order == 2]
    for x in range(1, 7):  # (−7/x) = (x/7), Euler's criterion
        legendre = 1 if pow(x, 3, 7) == 1 else -1
        assert C.character_value(chi, x) == legendre
    assert chi.parity == -1
    assert C.dim_cusp(7, 3, chi) == 1
    a = eta_product_7()
    assert a[:5] == [0, 1, -3, 0, 5]
    for n in range(1, 31):
        if n % 7:
            assert C.trace_hecke(7, 3, chi, n) == a[n], n


# ----------------------------------------------------------------------------- (e) dimensions


def test_dimensions_consistent():
    # [CO]: nonnegative integers, 0 off parity; M = S ⊕ E; [Mt]: the σ0-convolution of the
    # new dimensions over cond(χ) | M | N gives back dim S_k(N, χ)
    for N, o in orbits_up_to(60):
        for k in WEIGHTS:
            s, m, e = C.dim_cusp(N, k, o), C.dim_modular(N, k, o), C.dim_eisenstein(N, k, o)
            assert all(isinstance(v, int) and v >= 0 for v in (s, m, e)), (N, o.index, k)
            assert m == s + e
            if o.parity != (-1) ** k:
                assert m == 0
                continue
            total = 0
            for M in F.divisors(N):
                if M % o.conductor == 0:
                    chi_M, _ = C.induced_character(o, M)
                    dn = C.dim_new(M, k, chi_M)
                    assert isinstance(dn, int) and dn >= 0
                    total += F.sigma0(N // M) * dn
            assert total == s, (N, o.index, k)


def test_induced_character():
    # χ_M agrees with χ on the integers prime to N (same primitive character)
    for N in (12, 15, 20, 21, 28, 36, 40):
        for o in character_orbits(N):
            for M in F.divisors(N) + [2 * N]:
                if M % o.conductor:
                    continue
                orb, a = C.induced_character(o, M)
                assert orb.modulus == M and orb.order == o.order
                assert orb.conductor == o.conductor and orb.parity == o.parity
                for x in range(1, N * M // gcd(N, M)):
                    if gcd(x, N * M) == 1:
                        assert C.character_value(orb, x, a) == C.character_value(o, x)


def test_sum_over_characters_is_gamma1():
    # [DS] §4.3: S_k(Γ1(N)) = ⊕_χ S_k(N, χ); for N ≥ 5 ([DS] Fig. 3.3, Thm 3.5.1/3.6.1, no
    # elliptic points, all cusps regular): d = [PSL2(Z) : ±Γ1(N)] = N²/2 ∏(1 − p^−2),
    # ε∞ = ½ Σ_{d|N} φ(d)φ(N/d), g = 1 + d/12 − ε∞/2, dim S_2 = g,
    # dim S_k = (k−1)(g−1) + (k/2 − 1) ε∞ (k ≥ 3), dim M_k − dim S_k = ε∞ (− 1 if k = 2)
    for N in range(5, 41):
        d = Fraction(N * N, 2)
        for p, _ in F.factorize(N):
            d *= 1 - Fraction(1, p * p)
        eps = Fraction(sum(F.euler_phi(t) * F.euler_phi(N // t) for t in F.divisors(N)), 2)
        g = 1 + d / 12 - eps / 2
        for k in WEIGHTS:
            s = g if k == 2 else (k - 1) * (g - 1) + (Fraction(k, 2) - 1) * eps
            e = eps - 1 if k == 2 else eps
            orbs = character_orbits(N)
            assert sum(o.degree * C.dim_cusp(N, k, o) for o in orbs) == s, (N, k)
            assert sum(o.degree * C.dim_eisenstein(N, k, o) for o in orbs) == e, (N, k)


# ----------------------------------------------------------------------------- new traces


def test_new_traces_invert_the_old_space():
    # [Mt]: Tr T_n on S_k(N, χ) = Σ_{cond | M | N} σ0(N/M) Tr T_n on S_k^new(M, χ_M)
    # (gcd(n, N) = 1); with n = 1 the new traces are the new dimensions
    for N in (9, 12, 16, 20, 21, 25, 27, 28, 36):
        for o in character_orbits(N):
            for k in WEIGHTS:
                assert C.trace_hecke_new(N, k, o, 1) == C.dim_new(N, k, o)
                for n in (1, 2, 5, 11, 13):
                    if gcd(n, N) != 1:
                        continue
                    total = Cyclotomic(o.order)
                    for M in F.divisors(N):
                        if M % o.conductor == 0:
                            orb, a = C.induced_character(o, M)
                            total = total + F.sigma0(N // M) * C.trace_hecke_new(M, k, orb, n, a)
                    assert total == C.trace_hecke(N, k, o, n), (N, o.index, k, n)
                    assert C.absolute_trace_new(N, k, o, n) == C.trace_hecke_new(
                        N, k, o, n).trace()


def test_errors():
    with pytest.raises(ValueError):
        C.trace_hecke(10, 2, None, 5)  # gcd(n, N) > 1
    with pytest.raises(ValueError):
        C.dim_cusp(10, 1)  # weight 1 is not covered
    with pytest.raises(ValueError):
        C.dim_cusp(10, 2, character_orbits(5)[1])  # a character of another modulus
    with pytest.raises(ValueError):
        C.trace_hecke(13, 2, character_orbits(13)[-1], 2, a=2)  # gcd(a, order) > 1
