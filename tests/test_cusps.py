"""Cusps of Γ0(N): classes, representatives, equivalence (builder.symbols.cusps)."""

from __future__ import annotations

import random
from math import gcd

import pytest

from builder.symbols.cusps import (
    cusp_class,
    cusp_representative,
    cusps_equivalent,
    num_cusps,
    point_cusp_classes,
)
from builder.symbols.p1 import P1, p1
from tests import oracles as o


def _matrix_to(p: int, q: int) -> tuple[int, int, int, int]:
    """g ∈ SL2(Z) with g∞ = p/q, i.e. first column (p, q)."""
    if q == 0:
        return (p, 0, 0, p)  # p = ±1
    # p·y − x·q = 1
    y = pow(p % abs(q), -1, abs(q)) if abs(q) > 1 else 0
    x = (p * y - 1) // q
    assert p * y - x * q == 1
    return (p, x, q, y)


def _brute_equivalent(N: int, a1: tuple[int, int], a2: tuple[int, int]) -> bool:
    """α1 ~ α2 iff some γ = g2 (±[[1, m], [0, 1]]) g1^{-1} lies in Γ0(N) (m mod N suffices).

    Direct from the definition: γ g1 ∞ = g2 ∞ ⟺ g2^{-1} γ g1 ∈ ±Stab(∞).
    """
    p1_, x1, q1, y1 = _matrix_to(*a1)
    p2, x2, q2, y2 = _matrix_to(*a2)
    for m in range(N):
        # bottom-left entry of g2 · [[1, m], [0, 1]] · g1^{-1}, g1^{-1} = [[y1, −x1], [−q1, p1]]
        if (q2 * y1 - (q2 * m + y2) * q1) % N == 0:
            return True
    return False


def _random_cusps(rng: random.Random, count: int, bound: int) -> list[tuple[int, int]]:
    out = [(1, 0), (0, 1)]
    while len(out) < count:
        v = rng.randint(1, bound) * rng.choice((1, 1, -1))
        u = rng.randint(-bound, bound)
        if gcd(u, v) == 1:
            out.append((u, v))
    return out


def test_number_of_classes_is_nu_inf():
    # ν∞(Γ0(N)) = Σ_{d|N} φ(gcd(d, N/d)) ([DS] §3.8; design.md §3).
    for N in range(1, 401):
        _, keys = point_cusp_classes(P1(N))
        assert len(keys) == o.nu_inf(N) == num_cusps(N), N


@pytest.mark.parametrize("N", list(range(1, 31)) + [36, 48, 64, 72, 100])
def test_equivalence_matches_cremona_and_brute_force(N):
    # [Cr] Prop. 2.2.3 and the definition (brute force over ±T^m), on random cusps.
    rng = random.Random(N)
    cusps = _random_cusps(rng, 25, 3 * N)
    for a1 in cusps:
        for a2 in cusps:
            want = o.cusps_equivalent_cremona(N, a1, a2)
            assert _brute_equivalent(N, a1, a2) == want, (N, a1, a2)
            assert cusps_equivalent(N, a1, a2) == want, (N, a1, a2)


@pytest.mark.parametrize("N", [1, 2, 11, 12, 25, 36, 64, 90, 120, 243])
def test_representatives_are_in_their_class_and_distinct(N):
    # One representative per class, inequivalent by [Cr] Prop. 2.2.3.
    _, keys = point_cusp_classes(p1(N))
    reps = [cusp_representative(N, key) for key in keys]
    for key, rep in zip(keys, reps, strict=True):
        assert gcd(*rep) == 1
        assert cusp_class(p1(N), *rep) == key
    for i, r in enumerate(reps):
        for s in reps[i + 1 :]:
            assert not o.cusps_equivalent_cremona(N, r, s), (N, r, s)


def test_point_classes_follow_the_cusp_of_the_coset():
    # The point (c : d) is the coset of g with bottom row (c, d); its cusp is g∞ = a/c.
    for N in (6, 16, 27, 45, 60):
        P = p1(N)
        cls, keys = point_cusp_classes(P)
        for j in range(len(P)):
            c, d = int(P.c[j]), int(P.d[j])
            a, _b, _c, _d = _matrix_from_bottom(c, d)
            assert keys[cls[j]] == cusp_class(P, a, c), (N, c, d)


def _matrix_from_bottom(c: int, d: int) -> tuple[int, int, int, int]:
    """[[a, b], [c, d]] ∈ SL2(Z) for a primitive bottom row (c, d)."""
    for a in range(-abs(c) - abs(d) - 1, abs(c) + abs(d) + 2):
        if c == 0:
            return (d, 0, 0, d)
        if (a * d - 1) % c == 0:
            return (a, (a * d - 1) // c, c, d)
    raise AssertionError((c, d))


def test_cusp_class_rejects_non_reduced():
    with pytest.raises(ValueError):
        cusp_class(p1(10), 2, 4)
