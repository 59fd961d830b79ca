"""Dirichlet characters modulo N, their Galois orbits, and their values modulo primes.

A character χ mod N has values in μ_m, m = order(χ): χ(n) = ζ_m^(e(n)) for n prime to N.
Its Galois conjugates are the χ^a, a ∈ (Z/mZ)^×; with the multiplicative numbering of
python-flint's ``dirichlet_char`` (Conrey's: χ_s·χ_t = χ_st) the conjugates of χ_s are the
χ_(s^a mod N).  ([Ap] T. Apostol, Introduction to Analytic Number Theory, ch. 6; [CS] §3.)

Our index per level (stable, ours): the orbits sorted by (order, conductor, smallest member
number), numbered from 0 — the trivial character is index 0, as in the tables so far.

Modulo a prime ℓ ≡ 1 (mod m) we fix ω_ℓ = g^((ℓ−1)/m) for the smallest primitive root g
mod ℓ: this fixes the reduction Z[ζ_m] → F_ℓ, ζ_m ↦ ω_ℓ, and χ^a(n) ↦ ω_ℓ^(a·e(n)).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import lru_cache
from math import gcd

import flint
import numpy as np

from builder.arith import check_level, euler_phi, factor, is_prime


@dataclass(frozen=True)
class CharacterOrbit:
    """One Galois orbit of Dirichlet characters mod N (``number`` is its representative)."""

    modulus: int
    index: int  # ours: 0 = trivial; see the module doc
    number: int  # flint/Conrey number of the representative (the smallest in the orbit)
    members: tuple[int, ...]  # the numbers of all characters in the orbit, increasing
    order: int
    conductor: int
    parity: int  # χ(−1) = +1 (even) or −1 (odd)
    exps: tuple[int, ...] = field(repr=False)  # e(n) for n = 0..N−1 (−1 if gcd(n, N) > 1)

    @property
    def degree(self) -> int:
        """[Q(χ) : Q] = φ(order) = the number of characters in the orbit."""
        return euler_phi(self.order)

    @property
    def is_trivial(self) -> bool:
        return self.order == 1

    def conjugates(self) -> list[int]:
        """The a ∈ (Z/mZ)^× (increasing): the orbit is {χ^a}."""
        m = self.order
        return [a for a in range(1, m + 1) if gcd(a, m) == 1] if m > 1 else [1]

    def exponent(self, n: int) -> int:
        """e(n) with χ(n) = ζ_m^e(n); −1 when gcd(n, N) > 1."""
        return self.exps[n % self.modulus]

    def values_mod(self, ell: int, a: int = 1) -> np.ndarray:
        """χ^a(n) modulo ℓ for n = 0..N−1 (0 where gcd(n, N) > 1); ℓ ≡ 1 (mod order)."""
        w = root_of_unity(ell, self.order)
        powers = np.array([pow(w, t, ell) for t in range(self.order)], dtype=np.int64)
        e = np.array(self.exps, dtype=np.int64)
        out = powers[np.mod(a * np.maximum(e, 0), self.order)]
        out[e < 0] = 0
        return out

    def value_mod(self, n: int, ell: int, a: int = 1) -> int:
        e = self.exponent(n)
        if e < 0:
            return 0
        return pow(root_of_unity(ell, self.order), (a * e) % self.order, ell)

    def label_part(self) -> str:
        return f"c{self.index}" if self.index else ""


def root_of_unity(ell: int, m: int) -> int:
    """ω_ℓ = g^((ℓ−1)/m) for the smallest primitive root g mod ℓ (ℓ prime, m | ℓ − 1)."""
    return _root(ell, m)


@lru_cache(maxsize=4096)
def _root(ell: int, m: int) -> int:
    if (ell - 1) % m:
        raise ValueError(f"ℓ = {ell} is not ≡ 1 modulo the character order {m}")
    qs = [p for p, _ in factor(ell - 1)]
    g = 2
    while any(pow(g, (ell - 1) // q, ell) == 1 for q in qs):
        g += 1
    return pow(g, (ell - 1) // m, ell)


def primes_one_mod(m: int, top: int = 1 << 21):
    """Primes ℓ < top with ℓ ≡ 1 (mod m), decreasing (endless unless exhausted)."""
    p = top - 1 - ((top - 2) % m)  # the largest p < top with p ≡ 1 (mod m)
    while p > m:
        if is_prime(p):
            yield p
        p -= m
    raise RuntimeError(f"no more primes ≡ 1 mod {m} below {top}")  # pragma: no cover


@lru_cache(maxsize=256)
def character_orbits(N: int) -> tuple[CharacterOrbit, ...]:
    """All Galois orbits of Dirichlet characters mod N, in our index order."""
    N = check_level(N)
    if N <= 2:
        exps = tuple(0 if gcd(n, N) == 1 else -1 for n in range(N))
        return (CharacterOrbit(N, 0, 1, (1,), 1, 1, 1, exps),)
    G = flint.dirichlet_group(N)
    E = int(G.exponent())
    units = [s for s in range(1, N) if gcd(s, N) == 1]
    seen: set[int] = set()
    raw = []
    for s in units:
        if s in seen:
            continue
        c = flint.dirichlet_char(N, s)
        m = int(c.order())
        orbit = sorted({pow(s, a, N) for a in range(1, m + 1) if gcd(a, m) == 1})
        seen.update(orbit)
        scale = E // m
        exps = tuple(int(c.chi_exponent(n)) // scale if gcd(n, N) == 1 else -1
                     for n in range(N))
        parity = 1 if exps[N - 1] in (0,) else -1
        raw.append((m, int(c.conductor()), orbit[0], tuple(orbit), parity, exps))
    raw.sort(key=lambda r: (r[0], r[1], r[2]))
    return tuple(CharacterOrbit(N, i, r[2], r[3], r[0], r[1], r[4], r[5])
                 for i, r in enumerate(raw))


def character_orbit(N: int, index: int) -> CharacterOrbit:
    """The orbit with our ``index`` at level N (ValueError naming the index if absent)."""
    if index == 0 and not isinstance(index, bool) and isinstance(index, int):
        return trivial_orbit(N)
    orbits = character_orbits(N)
    if isinstance(index, bool) or not isinstance(index, int) or not 0 <= index < len(orbits):
        raise ValueError(f"char_index must be 0..{len(orbits) - 1} at level {N}, got {index!r}")
    return orbits[index]


@lru_cache(maxsize=256)
def trivial_orbit(N: int) -> CharacterOrbit:
    """The trivial character mod N (index 0), without enumerating the whole group: the same
    object as ``character_orbits(N)[0]`` (order 1 sorts first)."""
    N = check_level(N)
    exps = tuple(0 if gcd(n, N) == 1 else -1 for n in range(N))
    return CharacterOrbit(N, 0, 1, (1,), 1, 1, 1, exps)
