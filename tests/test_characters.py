"""Dirichlet characters and their Galois orbits (builder.characters).

Sources: [Ap] T. Apostol, Introduction to Analytic Number Theory, ch. 6 (there are φ(N)
characters mod N, they are multiplicative, Σ_{n mod N} χ(n) = 0 unless χ is trivial, the
conductor is the least d | N with χ trivial on the units ≡ 1 mod d); the number of
primitive characters mod N, Σ_{d|N} μ(N/d) φ(d) — multiplicative with p ↦ p − 2 and
p^e ↦ p^(e−2)(p − 1)² for e ≥ 2 (common practice, from memory).
"""

from __future__ import annotations

from math import gcd

import pytest

from builder.characters import character_orbit, character_orbits, primes_one_mod
from tests.forms_oracles import factorize


def phi(n: int) -> int:
    return sum(1 for a in range(1, n + 1) if gcd(a, n) == 1)


def primitive_count(N: int) -> int:
    out = 1
    for p, e in factorize(N).items():
        out *= (p - 2) if e == 1 else p ** (e - 2) * (p - 1) ** 2
    return out


LEVELS = list(range(1, 61)) + [63, 64, 80, 81, 100, 105, 121, 125, 210]


@pytest.mark.parametrize("N", LEVELS)
def test_orbits_partition_the_characters(N):
    orbits = character_orbits(N)
    members = [s for o in orbits for s in o.members]
    assert sorted(members) == [s for s in range(1, max(N, 2)) if gcd(s, N) == 1] or N <= 2
    assert len(members) == phi(N)  # [Ap] Thm 6.8
    assert orbits[0].is_trivial and orbits[0].index == 0
    assert [o.index for o in orbits] == list(range(len(orbits)))
    keys = [(o.order, o.conductor, o.number) for o in orbits]
    assert keys == sorted(keys)  # our documented order
    for o in orbits:
        assert len(o.members) == o.degree  # an orbit has φ(order) characters
        assert o.number == min(o.members)
        assert N % o.conductor == 0


@pytest.mark.parametrize("N", LEVELS)
def test_values_are_characters_with_the_stated_invariants(N):
    primitive = 0
    for o in character_orbits(N):
        ell = next(primes_one_mod(o.order))
        for a in o.conjugates()[:3]:
            v = [int(x) for x in o.values_mod(ell, a)]
            for x in range(N):
                for y in range(N):
                    assert v[x * y % N] == v[x] * v[y] % ell  # multiplicative mod ℓ
            assert all((v[x] == 0) == (gcd(x, N) > 1) for x in range(N))
            # order: χ^order = 1 and no smaller power (on the values)
            assert all(pow(v[x], o.order, ell) == 1 for x in range(N) if gcd(x, N) == 1)
            if o.order > 1:
                assert sum(v) % ell == 0  # orthogonality, [Ap] Thm 6.10
                for d in range(1, o.order):
                    if o.order % d == 0:
                        assert any(pow(v[x], d, ell) != 1 for x in range(N) if gcd(x, N) == 1)
            # parity χ(−1)
            assert v[(N - 1) % N] == (1 if o.parity == 1 else ell - 1) or N == 1
            # conductor: the least d | N with χ(x) = 1 for all units x ≡ 1 (mod d)
            cond = next(d for d in range(1, N + 1) if N % d == 0 and all(
                v[x] == 1 for x in range(N) if gcd(x, N) == 1 and (x - 1) % d == 0))
            assert cond == o.conductor
        if o.conductor == N:
            primitive += len(o.members)
    if N > 1:
        assert primitive == primitive_count(N)


def test_orbit_lookup_and_bad_index():
    assert character_orbit(63, 0).is_trivial
    with pytest.raises(ValueError, match="char_index"):
        character_orbit(63, len(character_orbits(63)))
    with pytest.raises(ValueError, match="char_index"):
        character_orbit(5, -1)
    with pytest.raises(ValueError, match="char_index"):
        character_orbit(5, True)


@pytest.mark.parametrize("N", [1, 2, 3, 4, 12, 60, 97, 128, 210])
def test_trivial_shortcut_is_the_enumerated_index_0(N):
    # the unit's fast path must give exactly the orbit the full enumeration puts first
    assert character_orbit(N, 0) == character_orbits(N)[0]


def test_primes_one_mod_m():
    for m in (1, 2, 3, 4, 6, 10, 12, 42):
        ps = []
        for p in primes_one_mod(m):
            ps.append(p)
            if len(ps) == 3:
                break
        assert all((p - 1) % m == 0 and p < 1 << 21 for p in ps) and ps == sorted(ps, reverse=True)
