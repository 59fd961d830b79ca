"""P¹(Z/NZ): size, representatives, and the vectorised index look-up (builder.symbols.p1)."""

from __future__ import annotations

from math import gcd

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from builder.symbols.p1 import P1, p1
from tests import oracles as o


def test_size_is_psi():
    # |P¹(Z/NZ)| = ψ(N) = [SL2(Z) : Γ0(N)] ([Cr] §2.2, [DS] §3.9; design.md §3).
    for N in range(1, 301):
        assert len(P1(N)) == o.psi(N), N


def test_representatives_index_to_themselves_and_are_primitive():
    # Each stored (c, d) is a bottom row of SL2(Z) (gcd(c, d) = 1 over Z) and indexes to itself.
    for N in range(1, 301):
        P = P1(N)
        assert np.array_equal(P.index(P.c, P.d), np.arange(len(P))), N
        assert all(gcd(int(c), int(d)) == 1 for c, d in zip(P.c, P.d, strict=True)), N


def test_index_invariant_under_units_and_shifts():
    # (c : d) = (uc : ud) for units u, and only residues mod N matter (definition of P¹(Z/NZ)).
    for N in (1, 2, 12, 30, 64, 97, 210, 360):
        P = P1(N)
        base = P.index(P.c, P.d)
        for u in range(1, min(N, 40) + 1):
            if gcd(u, N) != 1:
                continue
            assert np.array_equal(P.index(u * P.c, u * P.d), base), (N, u)
            assert np.array_equal(P.index(-u * P.c + 3 * N, -u * P.d - 7 * N), base), (N, u)


def _brute_classes(N: int) -> dict[tuple[int, int], tuple[int, int]]:
    """Every primitive pair mod N ↦ the least pair of its orbit under the units (brute force)."""
    units = [u for u in range(N) if gcd(u, N) == 1] or [0]
    out = {}
    for c in range(N):
        for d in range(N):
            if gcd(gcd(c, d), N) != 1:
                continue
            out[(c, d)] = min(((u * c) % N, (u * d) % N) for u in units)
    return out


@pytest.mark.parametrize("N", list(range(1, 41)) + [48, 60, 64, 81, 100])
def test_index_agrees_with_brute_force_equivalence(N):
    # Two pairs get the same index iff they are unit multiples of each other (definition);
    # pairs with gcd(c, d, N) ≠ 1 get −1 (the documented convention).
    if N == 1:
        assert len(P1(1)) == 1 and P1(1).index_one(5, 7) == 0
        return
    classes = _brute_classes(N)
    P = P1(N)
    cs = np.array([c for c in range(N) for d in range(N)])
    ds = np.array([d for c in range(N) for d in range(N)])
    idx = P.index(cs, ds)
    seen: dict[tuple[int, int], int] = {}
    for c, d, i in zip(cs.tolist(), ds.tolist(), idx.tolist(), strict=True):
        if (c, d) not in classes:
            assert i == -1, (N, c, d)
            continue
        key = classes[(c, d)]
        assert seen.setdefault(key, i) == i, (N, c, d)
    assert sorted(seen.values()) == list(range(len(P))), N
    assert len(set(classes.values())) == len(P)


@settings(max_examples=300, deadline=None)
@given(
    N=st.integers(min_value=1, max_value=5000),
    c=st.integers(min_value=-(10**9), max_value=10**9),
    d=st.integers(min_value=-(10**9), max_value=10**9),
    u=st.integers(min_value=1, max_value=10**6),
)
def test_index_property(N, c, d, u):
    # Cross-ratio criterion: primitive (c : d) = (c' : d') in P¹(Z/NZ) iff c d' ≡ c' d (mod N)
    # (common practice; Cremona's P¹ code uses it), checked on random pairs and units.
    P = p1(N)
    i = P.index_one(c, d)
    if gcd(gcd(c, d), N) != 1:
        assert i == -1
        return
    assert 0 <= i < len(P)
    cr, dr = int(P.c[i]), int(P.d[i])
    assert (c * dr - cr * d) % N == 0
    if gcd(u, N) == 1:
        assert P.index_one(u * c, u * d) == i
    # vectorised agrees with the scalar call
    v = P.index(np.array([c, u * c, cr]), np.array([d, u * d, dr]))
    assert v[0] == i and v[2] == i


@settings(max_examples=100, deadline=None)
@given(N=st.integers(min_value=2, max_value=3000), data=st.data())
def test_index_distinguishes_points(N, data):
    # Distinct indices ⟺ not proportional: c d' ≢ c' d (mod N) for different points.
    P = p1(N)
    i = data.draw(st.integers(0, len(P) - 1))
    j = data.draw(st.integers(0, len(P) - 1))
    same = (int(P.c[i]) * int(P.d[j]) - int(P.c[j]) * int(P.d[i])) % N == 0
    assert same == (i == j)


def test_bad_level():
    # Bad input raises ValueError naming the argument (issue 2).
    for bad in (0, -3):
        with pytest.raises(ValueError, match=r"\bN\b"):
            P1(bad)
    for bad in (2.5, "11", None):
        with pytest.raises(ValueError, match=r"\bN\b"):
            P1(bad)


@pytest.mark.parametrize("N", [1, 2, 12, 97, 360, 1024, 1025, 3000])
def test_index_scalar_long_arrays(N):
    """Long arrays (the N² table for N ≤ 1024, the normal form above): (c, d) ≡ λ·(c_j, d_j)
    (mod N) with λ a unit, and −1 exactly where gcd(c, d, N) ≠ 1 (the definition)."""
    rng = np.random.default_rng(N)
    c = rng.integers(-(10**6), 10**6, size=4 * N + 50)
    d = rng.integers(-(10**6), 10**6, size=4 * N + 50)
    P = P1(N)
    j, lam = P.index_scalar(c, d)
    assert np.array_equal(j, P.index(c, d))
    for cc, dd, jj, ll in zip(c.tolist(), d.tolist(), j.tolist(), lam.tolist(), strict=True):
        if gcd(gcd(cc, dd), N) != 1:
            assert jj == -1
            continue
        assert gcd(ll, N) == 1 or N == 1
        assert (cc - ll * int(P.c[jj])) % N == 0 and (dd - ll * int(P.d[jj])) % N == 0
