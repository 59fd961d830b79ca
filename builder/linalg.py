"""Exact linear algebra helpers over Q on top of python-flint.

Conventions: subspaces are given by the rows of a matrix in reduced row
echelon form (rref); an operator T acts on row vectors, v ↦ v·T.  Kernels are
computed over Z with FLINT's fraction-free routines and returned over Q.
"""

from __future__ import annotations

import flint


def denominator(A: flint.fmpq_mat) -> int:
    """Least common denominator of the entries of A."""
    _, den = A.numer_denom()
    return int(den)


def scale_to_int(A: flint.fmpq_mat) -> tuple[flint.fmpz_mat, int]:
    """(Z, D) with A = Z / D and Z integral."""
    Z, den = A.numer_denom()
    return Z, int(den)


def identity(n: int) -> flint.fmpq_mat:
    I = flint.fmpq_mat(n, n)
    for i in range(n):
        I[i, i] = 1
    return I


def rref_rows(A: flint.fmpq_mat) -> flint.fmpq_mat:
    """Nonzero rows of the rref of A (a canonical basis of its row space)."""
    if A.nrows() == 0:
        return flint.fmpq_mat(0, A.ncols())
    Z, _ = scale_to_int(A)
    R, den, rank = Z.rref()
    out = flint.fmpq_mat(rank, A.ncols())
    for i in range(rank):
        for j in range(A.ncols()):
            if R[i, j] != 0:
                out[i, j] = flint.fmpq(R[i, j], den)
    return out


def pivots(E: flint.fmpq_mat) -> list[int]:
    """Pivot columns of a matrix in rref."""
    out = []
    c = 0
    for r in range(E.nrows()):
        while E[r, c] == 0:
            c += 1
        out.append(c)
    return out


def left_kernel(A: flint.fmpq_mat) -> flint.fmpq_mat:
    """Rows (rref) spanning {v : v·A = 0}."""
    n = A.nrows()
    if A.ncols() == 0 or n == 0:
        return identity(n)
    Z, _ = scale_to_int(A)
    X, nullity = Z.transpose().nullspace()
    if nullity == 0:
        return flint.fmpq_mat(0, n)
    K = flint.fmpq_mat(nullity, n)
    for i in range(nullity):
        for j in range(n):
            K[i, j] = X[j, i]
    return rref_rows(K)


def hstack(mats: list[flint.fmpq_mat], nrows: int) -> flint.fmpq_mat:
    ncols = sum(m.ncols() for m in mats)
    out = flint.fmpq_mat(nrows, ncols)
    off = 0
    for m in mats:
        for i in range(nrows):
            for j in range(m.ncols()):
                v = m[i, j]
                if v != 0:
                    out[i, off + j] = v
        off += m.ncols()
    return out


def restrict(B: flint.fmpq_mat, T: flint.fmpq_mat) -> flint.fmpq_mat:
    """Matrix of T on the row space of B (B in rref, B·T ⊂ span B)."""
    piv = pivots(B)
    image = B * T
    d = B.nrows()
    out = flint.fmpq_mat(d, d)
    for r in range(d):
        for c, p in enumerate(piv):
            out[r, c] = image[r, p]
    return out


def coordinates(B: flint.fmpq_mat, V: flint.fmpq_mat) -> flint.fmpq_mat:
    """Coordinates of the rows of V in the rref basis B (V ⊂ span B)."""
    piv = pivots(B)
    out = flint.fmpq_mat(V.nrows(), B.nrows())
    for r in range(V.nrows()):
        for c, p in enumerate(piv):
            out[r, c] = V[r, p]
    return out


def charpoly_int(T: flint.fmpq_mat) -> flint.fmpz_poly:
    """Characteristic polynomial of T, which must have integer coefficients."""
    if T.nrows() == 0:
        return flint.fmpz_poly([1])
    Z, D = scale_to_int(T)
    c = Z.charpoly().coeffs()
    n = T.nrows()
    out = []
    for i, ci in enumerate(c):
        q = flint.fmpq(ci) / flint.fmpq(D) ** (n - i)
        if q.q != 1:
            raise ArithmeticError("characteristic polynomial is not integral")
        out.append(q.p)
    return flint.fmpz_poly(out)


def poly_at_matrix(f, T: flint.fmpq_mat) -> flint.fmpq_mat:
    """f(T) by Horner's rule (f an fmpz_poly / fmpq_poly)."""
    n = T.nrows()
    coeffs = list(f.coeffs())
    R = flint.fmpq_mat(n, n)
    I = identity(n)
    for c in reversed(coeffs):
        R = R * T
        if c != 0:
            R = R + I * flint.fmpq(c)
    return R


# -- modular linear algebra with a checked lift ------------------------------------

LIFT_PRIMES_START = (1 << 62) - 57  # primes below 2^62, used downwards


def lift_primes():
    """Primes below 2^62 in decreasing order (an endless generator)."""
    from builder.arith import is_prime_large

    p = LIFT_PRIMES_START
    while True:
        if is_prime_large(p):
            yield p
        p -= 2


def fmpq_mat_mod(A: flint.fmpq_mat, ell: int) -> flint.nmod_mat:
    """Reduction of a rational matrix modulo ℓ (ℓ must not divide denominators)."""
    Z, den = A.numer_denom()
    inv = pow(int(den) % ell, -1, ell)
    out = flint.nmod_mat(Z.nrows(), Z.ncols(), ell)
    for i in range(Z.nrows()):
        for j in range(Z.ncols()):
            v = Z[i, j]
            if v != 0:
                out[i, j] = int(v) % ell * inv % ell
    return out


def nmod_kernel_cols(A: flint.nmod_mat) -> flint.nmod_mat:
    """Columns spanning the right kernel of A over F_ℓ."""
    X, nul = A.nullspace()
    n = A.ncols()
    e = X.entries()
    flat = [e[i * n + j] for i in range(n) for j in range(nul)]
    return flint.nmod_mat(n, nul, flat, A.modulus())


def nmod_column_echelon(U: flint.nmod_mat) -> tuple[flint.nmod_mat, list[int]]:
    """(E, piv): E spans the same columns as U and E[piv, :] = identity."""
    R, rank = U.transpose().rref()
    n = R.ncols()
    e = R.entries()
    piv = []
    c = 0
    for r in range(rank):
        while e[r * n + c] == 0:
            c += 1
        piv.append(c)
    Et = flint.nmod_mat(rank, n, e[: rank * n], U.modulus())
    return Et.transpose(), piv


def rational_reconstruction(a: int, m: int) -> tuple[int, int] | None:
    """(n, d) with n ≡ a·d (mod m), |n|, d ≤ sqrt(m/2), or None (Wang's algorithm)."""
    from math import isqrt

    a %= m
    bound = isqrt(m // 2)
    r0, r1 = m, a
    s0, s1 = 0, 1
    while r1 > bound:
        q = r0 // r1
        r0, r1 = r1, r0 - q * r1
        s0, s1 = s1, s0 - q * s1
    if s1 == 0 or abs(s1) > bound:
        return None
    if s1 < 0:
        r1, s1 = -r1, -s1
    from math import gcd

    if gcd(r1, s1) != 1:
        return None
    return r1, s1


def crt_pair(a: int, m: int, b: int, n: int) -> int:
    """x mod m·n with x ≡ a (m), x ≡ b (n)."""
    t = (b - a) * pow(m, -1, n) % n
    return a + m * t
