"""L(f, 1)/Ω⁺ for rational newforms of weight 2 from the winding element.

([Cr] §2.8, Manin–Drinfeld.)  Let φ be the eigen-functional of a rational
orbit on the +1 symbols.  The integral cycles H_1(X_0(N), Z) are the integer
combinations of Manin symbols with zero boundary (sign 0 boundary, no
identification of cusps, [Ma]); their image φ(H_1) is a lattice g·Z ⊂ Q.
We record

    L(f, 1)/Ω⁺ := |φ({0, ∞})| / g,

i.e. Ω⁺ is the positive generator of the projection of the period lattice of
f onto the real line.  For an optimal elliptic curve E of conductor N with
Manin constant 1 this is 2·L(E, 1)/Ω_E with Ω_E the real period of the
Birch–Swinnerton-Dyer formula (both for Δ > 0 and Δ < 0).
"""

from __future__ import annotations

from fractions import Fraction

import flint

from builder.symbols.cusps import point_cusp_classes


def l_ratio(E) -> str:
    """|φ({0, ∞})|/g as a reduced fraction string (E: a rational weight-2 EigenForm)."""
    S = E.space
    if E.d != 1 or S.k != 2:
        raise ValueError("l_ratio is defined for rational orbits of weight 2")
    P = S.P1
    cls, keys = point_cusp_classes(P)
    sigma = P.index(P.d, -P.c)
    n = len(P)
    ncls = len(keys)
    A = flint.fmpz_mat(n, ncls + 1)
    for j in range(n):
        a, b = int(cls[j]), int(cls[int(sigma[j])])
        if a != b:
            A[j, a] += 1
            A[j, b] -= 1
        A[j, ncls] = int(E._phi[j][0])
    H = A.hnf()
    g = 0
    for r in range(H.nrows()):
        if all(H[r, c] == 0 for c in range(ncls)) and H[r, ncls] != 0:
            g = abs(int(H[r, ncls]))
            break
    if g == 0:
        raise ArithmeticError("the eigen-functional vanishes on the integral cycles")
    j0 = P.index_one(0, 1)
    return str(Fraction(abs(int(E._phi[j0][0])), g))
