"""Cusps of Γ0(N), their equivalence, and the boundary map of weight k.

Cusp classes.  Γ0(N)\\P¹(Q) = Γ0(N)\\SL2(Z)/Stab(∞).  A coset is a point
(c : d) of P¹(Z/NZ) and the stabiliser [[1, m], [0, 1]] moves it to
(c : d + mc).  In the normal form (g, r) of builder.symbols.p1 this shifts r
by multiples of g modulo M = N/g, so the class of the cusp g∞ (g with bottom
row (c, d)) is the pair (g, r mod gcd(g, M)).  There are
ν∞ = Σ_{g|N} φ(gcd(g, N/g)) classes ([DS] §3.8, [Cr] Prop. 2.2.3).

Boundary map ([Me], [St] §8.4): the boundary symbols of weight k are P[α]
modulo (P|γ^{-1})[γα] = P[α]; for even k they are one copy of Q per cusp
class, P[u/v] ↦ P(u, v)·e_[u/v].  For the Manin symbol [X^i Y^(w−i), g],
g = [[a, b], [c, d]] (w = k − 2), this gives

    δ[X^i Y^(w−i), g] = [i = w]·e_[a/c] − [i = 0]·e_[b/d],

and the class of b/d = (gσ)∞ is the class of the point (d : −c).  The star
involution sends e_α to e_(−α), the class of (−c : d); for sign s the
boundary symbols are identified by e_α = s·e_(−α).
"""

from __future__ import annotations

from math import gcd

import numpy as np

from builder.symbols.p1 import P1


def point_cusp_classes(P: P1) -> tuple[np.ndarray, list[tuple[int, int]]]:
    """Class index of the cusp g∞ for every point of P¹, and the class keys.

    Keys are (g, r mod gcd(g, N/g)) in increasing order.
    """
    g, r = P.class_data()
    M = P.N // g
    h = np.gcd(g, M)
    key = g * (P.N + 1) + np.mod(r, h)
    uniq, inv = np.unique(key, return_inverse=True)
    keys = [(int(u) // (P.N + 1), int(u) % (P.N + 1)) for u in uniq]
    return inv.astype(np.int64), keys


def cusp_representative(N: int, key: tuple[int, int]) -> tuple[int, int]:
    """A cusp u/v (as (u, v), v ≥ 0, gcd 1) in the class with the given key."""
    g, r = key
    if g == N:
        return (1, 0)
    M = N // g
    x = r
    while gcd(x, g) != 1:
        x += gcd(g, M)
    # matrix [[a, b], [g, x]] with a·x − b·g = 1
    a = pow(x, -1, g) if g > 1 else 0
    b = (a * x - 1) // g
    assert a * x - b * g == 1
    return (a, g)


def cusp_class(P: P1, u: int, v: int) -> tuple[int, int]:
    """The class key of the cusp u/v (gcd(u, v) = 1; v = 0 means ∞)."""
    if gcd(u, v) != 1:
        raise ValueError(f"cusp {u}/{v} is not in lowest terms")
    # complete (u, v) to a matrix [[u, b], [v, d]] ∈ SL2(Z): u·d − b·v = 1
    if v == 0:
        d = u  # u = ±1
    else:
        d = pow(u % abs(v), -1, abs(v)) if abs(v) > 1 else 0
    j = P.index_one(v, d)
    g, r = P.class_data()
    M = P.N // g[j]
    return (int(g[j]), int(r[j] % gcd(int(g[j]), int(M))))


def cusps_equivalent(N: int, alpha: tuple[int, int], beta: tuple[int, int]) -> bool:
    """Whether the cusps alpha = u/v and beta = u'/v' are Γ0(N)-equivalent."""
    from builder.symbols.p1 import p1

    P = p1(N)
    return cusp_class(P, *alpha) == cusp_class(P, *beta)


def num_cusps(N: int) -> int:
    """ν∞(Γ0(N)) = Σ_{d|N} φ(gcd(d, N/d))."""
    from builder.arith import divisors, euler_phi

    return sum(euler_phi(gcd(d, N // d)) for d in divisors(N))


def boundary_classes(P: P1, sign: int) -> tuple[np.ndarray, np.ndarray, int]:
    """Cusp classes of every point with the sign identification applied.

    Returns (cls, sgn, count): the boundary symbol of the cusp g∞ of point j
    equals sgn[j]·e_{cls[j]} (sgn[j] = 0 when the symbol vanishes), with
    ``count`` independent boundary symbols.
    """
    cls, keys = point_cusp_classes(P)
    n = len(keys)
    if sign == 0:
        return cls, np.ones(len(cls), dtype=np.int64), n
    neg = cls[P.index(-P.c, P.d)]
    # class t ~ class neg(t) with factor sign; a class fixed by negation dies for sign -1
    partner = np.empty(n, dtype=np.int64)
    partner[cls] = neg
    rep = np.empty(n, dtype=np.int64)
    fac = np.ones(n, dtype=np.int64)
    newidx = {}
    for t in range(n):
        q = int(partner[t])
        base = min(t, q)
        if t == q:
            fac[t] = 1 if sign == 1 else 0
        elif t != base:
            fac[t] = sign
        if base not in newidx and fac[base] != 0:
            newidx[base] = len(newidx)
        rep[t] = newidx.get(base, -1)
    return rep[cls], np.where(rep[cls] < 0, 0, fac[cls]), len(newidx)
