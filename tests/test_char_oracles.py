"""Validation of the character oracles in tests/char_oracles.py.

The engine's tests will trust these oracles, so they are checked here against the
trivial-character oracles of tests/oracles.py (themselves validated in tests/test_oracles.py),
against each other (two formulas that share no code path: Cohen–Oesterlé and the trace
formula at n = 1; [CO] and the count of Eisenstein series of [DS]), and against facts from
outside the project (Deligne's bound, the Hecke relations, Petersson adjoints, quadratic
reciprocity, the η-quotient theorems of [On]).  Only this file uses builder.characters, to
enumerate characters; the oracles themselves do not import builder.

Sources (beyond those of tests/char_oracles.py):
[De]  P. Deligne, *La conjecture de Weil I*, Publ. IHÉS 43 (1974): |a_p| ≤ 2 p^((k−1)/2), hence
      |a_n(f)| ≤ σ0(n) n^((k−1)/2) for a normalised eigenform f of weight k ≥ 2.
[DS]  F. Diamond, J. Shurman, GTM 228: Prop. 5.3.1 (T_{p^r} = T_p T_{p^(r−1)} − p^(k−1)⟨p⟩
      T_{p^(r−2)}, T_{mn} = T_m T_n for coprime m, n), Thm 5.5.3 (T_p* = ⟨p⟩^(−1) T_p for
      p ∤ N), Prop. 5.8.5 (a_n of a normalised eigenform), Thms 4.5.2, 4.6.2 (bases of
      E_k(Γ1(N)) by the E_k^{ψ,φ,t}).
      Also Fig. 3.3, 3.4 / §3.9 (X1(N) for N ≥ 5: ε∞ = ½ Σ_{d|N} φ(d)φ(N/d), all cusps
      regular, ε2 = ε3 = 0, g = 1 + N²/24 ∏_{p|N}(1 − 1/p²) − ε∞/2), Thms 3.5.1, 3.6.1
      (dimensions for even and odd k ≥ 2 when −I ∉ Γ), and M_k(Γ1(N)) = ⊕_χ M_k(N, χ), the
      eigenspaces of the diamond operators (§4.3).  Numbers of statements are from memory.
[IR]  K. Ireland, M. Rosen, *A Classical Introduction to Modern Number Theory*, GTM 84, ch. 5
      (quadratic reciprocity and its supplements).
"""

from __future__ import annotations

from collections import Counter
from fractions import Fraction
from math import gcd, isqrt

import pytest

from builder.characters import character_orbits, primes_one_mod, root_of_unity
from tests import char_oracles as co
from tests import oracles as o

LEVELS = range(1, 41)
WEIGHTS = range(2, 7)
NMAX = 20


def orbit_chars(N: int):
    """(orbit, chi) with chi = (modulus, order, exps), the plain data the oracles take."""
    return [(orb, (orb.modulus, orb.order, orb.exps)) for orb in character_orbits(N)]


def spaces(levels=LEVELS, weights=WEIGHTS):
    """(N, orbit, chi, k) with χ(−1) = (−1)^k."""
    for N in levels:
        for orb, chi in orbit_chars(N):
            for k in weights:
                if orb.parity == (-1) ** k:
                    yield N, orb, chi, k


def sigma0(n: int) -> int:
    return len(o.divisors(n))


def big_prime(m: int) -> tuple[int, int]:
    """A prime ℓ ≡ 1 (mod m) near 2^21 and the engine's ω_ℓ (a primitive m-th root mod ℓ)."""
    ell = next(primes_one_mod(m))
    return ell, root_of_unity(ell, m)


def rank_mod(rows: list[list[int]], ell: int) -> int:
    a = [[x % ell for x in r] for r in rows]
    rank, col, ncols = 0, 0, len(a[0]) if a else 0
    while rank < len(a) and col < ncols:
        piv = next((i for i in range(rank, len(a)) if a[i][col]), None)
        if piv is None:
            col += 1
            continue
        a[rank], a[piv] = a[piv], a[rank]
        inv = pow(a[rank][col], -1, ell)
        a[rank] = [x * inv % ell for x in a[rank]]
        for i in range(len(a)):
            if i != rank and a[i][col]:
                f = a[i][col]
                a[i] = [(x - f * y) % ell for x, y in zip(a[i], a[rank], strict=True)]
        rank += 1
        col += 1
    return rank


# -- exact arithmetic in Q(ζ_m) --------------------------------------------------------------


@pytest.mark.parametrize("m", [1, 2, 3, 4, 5, 6, 8, 9, 10, 12, 15, 16, 20])
def test_cyclotomic_field_arithmetic(m):
    deg = o.phi(m)
    assert len(co.cyclotomic_polynomial(m)) - 1 == deg  # deg Φ_m = φ(m)
    z = co.Cyc.zeta(m)
    assert z**m == 1 and all(z**j != 1 for j in range(1, m))  # ζ_m has order m
    # deterministic test elements with rational coefficients
    xs = [co.Cyc.from_powers(m, [Fraction((3 * i * i + j) % 7 - 3, 1 + (i + j) % 3)
                                 for i in range(m + 2)]) for j in range(4)]
    ell, w = big_prime(m)
    for x in xs:
        # Tr = Σ of the Galois conjugates (an exact identity in Q(ζ_m))
        assert sum((x.galois(a) for a in co.units_mod(m)), co.Cyc.rational(m, 0)) == x.trace()
        assert x.conj().conj() == x and (x * x.conj()).conj() == x * x.conj()
        for y in xs:
            # reduction Z[ζ_m] → F_ℓ, ζ ↦ ω, is a ring homomorphism
            assert (x * y).mod_ell(ell, w) == x.mod_ell(ell, w) * y.mod_ell(ell, w) % ell
            assert (x + y).mod_ell(ell, w) == (x.mod_ell(ell, w) + y.mod_ell(ell, w)) % ell
            assert (x - y) + y == x and x * y == y * x
            assert (x * y).trace() == sum(
                (x.galois(a) * y.galois(a) for a in co.units_mod(m)), co.Cyc.rational(m, 0))
    # Tr ζ_m = c_m(1) = μ(m) (Ramanujan sum)
    assert z.trace() == co._mobius(m)
    with pytest.raises(ValueError):
        z.mod_ell(ell, 1 if m > 1 else 2)  # not a primitive m-th root (or ℓ ∤ Φ_1(2))


def test_character_values_agree_with_the_engine_reduction():
    # The data convention: χ(n) = ζ_m^e[n] maps to the engine's χ mod ℓ under ζ_m ↦ ω_ℓ.
    for N in (5, 7, 13, 16, 21, 35, 39):
        for orb, chi in orbit_chars(N):
            ell, w = big_prime(orb.order)
            for n in range(N):
                assert co.char_value(chi, n).mod_ell(ell, w) == orb.value_mod(n, ell)


# -- characters as data ------------------------------------------------------------------------


@pytest.mark.parametrize("N", list(LEVELS) + [48, 60, 63, 64])
def test_character_invariants_against_the_engine(N):
    # conductor and parity computed by the oracle independently of the engine's (flint) data
    for orb, chi in orbit_chars(N):
        assert co.conductor(chi) == orb.conductor
        assert co.parity(chi) == orb.parity
        f = orb.conductor
        for M in o.divisors(N):
            if M % f:
                continue
            chiM = co.character_at_level(chi, M)
            assert co.conductor(chiM) == f and co.parity(chiM) == orb.parity
            # χ_M agrees with χ on the integers prime to N
            assert all(chiM[2][n % M] == chi[2][n] for n in range(N) if chi[2][n] >= 0)
        prim = co.character_at_level(chi, f)
        assert co.conductor(prim) == prim[0]  # primitive


def test_kronecker_symbols_against_quadratic_reciprocity():
    # [IR] ch. 5: (−4/p) = 1 ⇔ p ≡ 1 (4); (−8/p) = 1 ⇔ p ≡ 1, 3 (8); (−3/p) = 1 ⇔ p ≡ 1 (3);
    # (−7/p) = (p/7) = 1 ⇔ p ≡ 1, 2, 4 (7); (5/p) = (p/5) = 1 ⇔ p ≡ ±1 (5).
    rules = {-4: lambda p: p % 4 == 1, -8: lambda p: p % 8 in (1, 3),
             -3: lambda p: p % 3 == 1, -7: lambda p: p % 7 in (1, 2, 4),
             5: lambda p: p % 5 in (1, 4)}  # fmt: skip
    for D, rule in rules.items():
        for p in o.primes_below(200):
            if D % p:
                assert co.kronecker(D, p) == (1 if rule(p) else -1), (D, p)
        chi = co.kronecker_character(D, abs(D))
        assert co.conductor(chi) == abs(D)  # fundamental discriminant: primitive mod |D|
        assert co.parity(chi) == (1 if D > 0 else -1)


def test_bad_character_data_is_rejected():
    with pytest.raises(ValueError):
        co.check_character((5, 4, (-1, 0, 1, 1, 2)))  # not multiplicative: χ(4) ≠ χ(2)²
    with pytest.raises(ValueError):
        co.check_character((4, 2, (-1, 0, 0, 1)))  # χ(2) given though gcd(2, 4) > 1
    with pytest.raises(ValueError):
        co.trace_hecke_char(2, co.trivial_character(4), 2)  # gcd(n, N) > 1


# -- (a) trivial character: the new oracles reduce to tests/oracles.py -----------------------


@pytest.mark.parametrize("N", range(1, 101))
def test_trivial_character_reduces_to_the_gamma0_oracles(N):
    # tests/oracles.py: [DS] Thm 3.5.1 (dims), [Mt] (new dims), [CS] Thm 12.4.11 with χ = 1.
    chi = co.trivial_character(N)
    assert chi == orbit_chars(N)[0][1]  # the engine's trivial orbit is the same data
    for k in (2, 4, 6):
        assert co.dim_cusp_char(chi, k) == o.dim_cusp(N, k)
        assert co.dim_modular_char(chi, k) == o.dim_modular(N, k)
        assert co.dim_eisenstein_char(chi, k) == o.dim_eisenstein(N, k)
        assert co.dim_new_char(chi, k) == o.dim_new(N, k)
        for n in range(1, 11):
            if gcd(n, N) == 1:
                assert co.trace_hecke_char(n, chi, k) == o.trace_hecke(n, N, k), (n, N, k)
    for k in (3, 5):
        assert co.dim_cusp_char(chi, k) == co.dim_modular_char(chi, k) == 0  # −1 ∈ Γ0(N)
        assert co.trace_hecke_char(1, chi, k) == 0


# -- (b) Tr T_1 = dim: trace formula against Cohen–Oesterlé ----------------------------------


def test_trace_of_identity_is_the_cohen_oesterle_dimension():
    # [CS] Thm 12.4.11 at n = 1 against [CO]; two independently written formulas.
    count = 0
    for N, _orb, chi, k in spaces():
        assert co.trace_hecke_char(1, chi, k) == co.dim_cusp_char(chi, k), (N, chi, k)
        count += 1
    assert count > 500


# -- (c) integrality, Deligne, adjoints, Hecke relations --------------------------------------


def _traces(chi, k, N, top=NMAX):
    return {n: co.trace_hecke_char(n, chi, k) for n in range(1, top + 1) if gcd(n, N) == 1}


@pytest.mark.parametrize("N", LEVELS)
def test_traces_integral_bounded_and_self_adjoint(N):
    for _N, _orb, chi, k in spaces([N]):
        d = co.dim_cusp_char(chi, k)
        for n, t in _traces(chi, k, N).items():
            # eigenvalues of T_n are algebraic integers, so is the trace: Z[ζ_m] coordinates
            assert t.is_integral(), (N, chi, k, n, t)
            # [De]: every embedding of Tr T_n is a sum of d values |a_n(f)| ≤ σ0(n) n^((k−1)/2)
            bound = d * sigma0(n) * n ** ((k - 1) / 2)
            assert all(abs(z) <= bound + 1e-9 for z in t.embeddings()), (N, chi, k, n)
            # [DS] Thm 5.5.3: T_n* = χ̄(n) T_n and T_n is normal, so conj(Tr T_n) = χ̄(n) Tr T_n,
            # i.e. Tr T_n = χ(n)·conj(Tr T_n).  This fixes the convention χ versus χ̄.
            assert t == co.char_value(chi, n) * t.conj(), (N, chi, k, n)
            if d == 0:
                assert t == 0


def test_one_dimensional_spaces_obey_the_hecke_relations():
    # [DS] Prop. 5.3.1, 5.8.5: on S_k(N, χ) = C·f, Tr T_n = a_n(f) with a_mn = a_m a_n for
    # coprime m, n and a_{p²} = a_p² − χ(p) p^(k−1), a_{p³} = a_p a_{p²} − χ(p) p^(k−1) a_p.
    seen = nonreal = 0
    for N, orb, chi, k in spaces():
        if co.dim_cusp_char(chi, k) != 1:
            continue
        seen += 1
        nonreal += orb.order > 2
        tr = _traces(chi, k, N)
        for a in tr:
            for b in tr:
                if gcd(a, b) == 1 and a * b in tr:
                    assert tr[a * b] == tr[a] * tr[b], (N, chi, k, a, b)
        for p in (2, 3):
            if p in tr:
                cp = co.char_value(chi, p) * p ** (k - 1)
                assert tr[p * p] == tr[p] * tr[p] - cp, (N, chi, k, p)
                if p**3 in tr:
                    assert tr[p**3] == tr[p] * tr[p * p] - cp * tr[p], (N, chi, k, p)
    assert seen >= 40 and nonreal >= 5


def test_gram_matrix_of_hecke_operators_has_rank_at_most_dim():
    # Simultaneous eigenbasis (T_n normal and commuting for gcd(n, N) = 1, [DS] Thm 5.5.4):
    # G_ab = Tr(T_a T_b) = Σ_f a_a(f) a_b(f) has rank ≤ d; T_a T_b = Σ_{c | (a,b)} χ(c) c^(k−1)
    # T_{ab/c²} ([DS] Prop. 5.3.1).  Checked by ranks modulo a large prime ℓ ≡ 1 (mod m).
    checked = 0
    for N, orb, chi, k in spaces(range(1, 31)):
        d = co.dim_cusp_char(chi, k)
        if not 2 <= d <= 4:
            continue
        idx = [n for n in range(1, 40) if gcd(n, N) == 1][: d + 2]
        ell, w = big_prime(orb.order)
        cache: dict[int, co.Cyc] = {}

        def tr(n, chi=chi, k=k, cache=cache):
            if n not in cache:
                cache[n] = co.trace_hecke_char(n, chi, k)
            return cache[n]

        rows = []
        for a in idx:
            row = []
            for b in idx:
                g = sum((co.char_value(chi, c) * c ** (k - 1) * tr(a * b // (c * c))
                         for c in o.divisors(gcd(a, b))), co.Cyc.rational(orb.order, 0))
                row.append(g.mod_ell(ell, w))
            rows.append(row)
        assert rank_mod(rows, ell) <= d, (N, chi, k, d)
        checked += 1
    assert checked > 50


# -- (d) η-quotients with a quadratic character ---------------------------------------------

B = 60


@pytest.mark.parametrize("form", co.eta_char_forms(B), ids=lambda f: f.name)
def test_eta_quotients_with_character(form):
    N, k, chi, a = form.level, form.weight, form.chi, (None,) + form.coeffs
    # [On] Thm 1.64: weight, the two congruences mod 24, and the character ((−1)^k s/·)
    assert sum(r for _, r in form.factors) == 2 * k
    assert all(N % dl == 0 for dl, _ in form.factors)
    assert sum(dl * r for dl, r in form.factors) % 24 == 0
    assert sum(N // dl * r for dl, r in form.factors) % 24 == 0
    s = 1
    for dl, r in form.factors:
        s *= dl**r
    for n in range(1, 4 * N):
        if gcd(n, N) == 1:
            assert co.char_value(chi, n) == co.kronecker((-1) ** k * s, n), (form.name, n)
    assert co.parity(chi) == (-1) ** k
    # [On] Thm 1.65: the order at every cusp c/d (d | N) is positive, so it is a cusp form
    for d in o.divisors(N):
        v = Fraction(N, 24) * sum(Fraction(gcd(d, dl) ** 2 * r, gcd(d, N // d) * d * dl)
                                  for dl, r in form.factors)
        assert v > 0, (form.name, d)
    # normalised Hecke eigenform ([DS] Prop. 5.8.5 with character)
    assert a[1] == 1
    for m in range(2, B + 1):
        for n in range(2, B // m + 1):
            if gcd(m, n) == 1:
                assert a[m * n] == a[m] * a[n], (form.name, m, n)
    for p in o.primes_below(isqrt(B) + 1):  # p² ≤ B
        if N % p:
            assert a[p * p] == a[p] ** 2 - co.char_value(chi, p) * p ** (k - 1), (form.name, p)
    # dimensions and the trace formula
    dim = co.dim_cusp_char(chi, k)
    assert dim >= 1 and co.dim_new_char(chi, k) >= 1
    assert dim == 1  # all the listed ones span their space
    for n in range(1, 31):
        if gcd(n, N) == 1:
            assert co.trace_hecke_char(n, chi, k) == a[n], (form.name, n)


# -- (e) dimensions: consistency, Eisenstein series, newform decomposition ------------------


@pytest.mark.parametrize("N", range(1, 61))
def test_dimension_identities(N):
    for orb, chi in orbit_chars(N):
        f = orb.conductor
        for k in range(2, 9):
            S, M, E = (co.dim_cusp_char(chi, k), co.dim_modular_char(chi, k),
                       co.dim_eisenstein_char(chi, k))
            if orb.parity != (-1) ** k:
                assert S == M == E == co.dim_new_char(chi, k) == 0
                continue
            assert min(S, M, E) >= 0 and M == S + E
            # [Li], [DS] Thm 5.8.3: S_k(N, χ) = ⊕_{f | L | N} ⊕_{t | N/L} S_k^new(L, χ_L)(tz)
            total = 0
            for L in o.divisors(N):
                if L % f == 0:
                    new = co.dim_new_char(co.character_at_level(chi, L), k)
                    assert new >= 0
                    total += sigma0(N // L) * new
            assert total == S, (N, chi, k)


@pytest.mark.parametrize("N", range(5, 41))
def test_sum_over_characters_is_the_gamma1_dimension(N):
    # [DS] §3.9, Thm 3.6.1, §4.3: dim S_k(Γ1(N)) = Σ_χ dim S_k(N, χ) over all φ(N) characters
    # (Galois conjugates have equal dimensions, so an orbit counts φ(order) times); also E_k.
    eps = sum(o.phi(d) * o.phi(N // d) for d in o.divisors(N))
    assert eps % 2 == 0
    eps //= 2
    g = 1 + (Fraction(N * N, 24) * _prod(1 - Fraction(1, p * p) for p in o.factorize(N))
             - Fraction(eps, 2))
    assert g.denominator == 1
    for k in range(2, 8):
        if k == 2:
            cusp, eis = g, eps - 1
        elif k % 2 == 0:
            cusp, eis = (k - 1) * (g - 1) + (k // 2 - 1) * eps, eps
        else:  # [DS] Thm 3.6.1, all cusps regular
            cusp, eis = (k - 1) * (g - 1) + Fraction(k - 2, 2) * eps, eps
        S = E = 0
        for orb, chi in orbit_chars(N):
            S += o.phi(orb.order) * co.dim_cusp_char(chi, k)
            E += o.phi(orb.order) * co.dim_eisenstein_char(chi, k)
        assert (S, E) == (cusp, eis), (N, k)


def _prod(xs) -> Fraction:
    out = Fraction(1)
    for x in xs:
        out *= x
    return out


def _all_characters(u: int) -> list[tuple[Fraction | None, ...]]:
    """Every character mod u as its values e(n)/m ∈ Q/Z (None off the units)."""
    out = []
    for orb in character_orbits(u):
        m = orb.order
        for a in orb.conjugates():
            out.append(tuple(None if x < 0 else Fraction(a * int(x) % m, m) for x in orb.exps))
    return out


@pytest.mark.parametrize("N", LEVELS)
def test_eisenstein_dimension_counts_the_eisenstein_series(N):
    # [DS] Thm 4.5.2 (k ≥ 3), Thm 4.6.2 (k = 2): E_k(Γ1(N)) has the basis E_k^{ψ,φ,t} over
    # triples (ψ mod u, φ mod v primitive, t u v | N, (ψφ)(−1) = (−1)^k) — minus the one
    # with ψ = φ = 1, t = 1 for k = 2 — and E_k^{ψ,φ,t} ∈ E_k(N, ψφ).  So dim E_k(N, χ)
    # counts the triples with ψφ = χ; compare with [CO]'s ∏ λ.
    units = [n for n in range(N) if gcd(n, N) == 1]
    count: Counter = Counter()
    for u in o.divisors(N):
        prims_u = [c for c in _all_characters(u) if _is_primitive(c, u)]
        for v in o.divisors(N // u):
            prims_v = [c for c in _all_characters(v) if _is_primitive(c, v)]
            nt = sigma0(N // (u * v))
            for ps in prims_u:
                for ph in prims_v:
                    key = tuple((ps[n % u] + ph[n % v]) % 1 for n in units)
                    count[key] += nt
    for orb, chi in orbit_chars(N):
        key = tuple(Fraction(int(chi[2][n]), orb.order) for n in units)
        for k in range(2, 8):
            if orb.parity != (-1) ** k:
                continue
            expected = count[key] - (1 if k == 2 and orb.is_trivial else 0)
            assert co.dim_eisenstein_char(chi, k) == expected, (N, orb.index, k)


def _is_primitive(vals: tuple[Fraction | None, ...], u: int) -> bool:
    """Conductor u: no proper divisor f of u has χ = 1 on the units ≡ 1 (mod f)."""
    for f in o.divisors(u):
        if f < u and all(vals[n] == 0 for n in range(u) if vals[n] is not None and n % f == 1 % f):
            return False
    return True
