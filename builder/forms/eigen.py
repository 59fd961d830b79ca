"""Eigen-data of a newform orbit from one eigen-functional ([St] §9.3, [Cr] §2.9).

For an orbit V (Hecke-irreducible piece of the new subspace, coefficient
field K = Q[x]/(f), f the irreducible charpoly of T_q on V) we build a
K-valued functional φ on the whole symbol space with φ∘T_n = a_n·φ:

1. the dual U ⊂ M* (columns u with u ⟂ the Hecke complement of V) is the
   common right kernel of W_Q − ε_Q and of g_p(T_p), g_p the charpoly of T_p
   on V, over primes p ∤ N until its dimension is d = dim V (strong
   multiplicity one guarantees termination);
2. T_q acts on U by a d × d matrix A with charpoly f; an eigenvector over K is
   c = Σ_i b_i(α) A^i v with (f(x) − f(y))/(x − y) = Σ_i b_i(y) x^i;
3. φ(x) = (coords(x)·U)·c for every Manin symbol x, stored as an integer
   table Φ (nsym × d, power-basis coordinates, common denominator dropped).

Then a_n = φ(T_n x0)/φ(x0) for a fixed symbol x0 with φ(x0) ≠ 0, where
T_n x0 is one Heilbronn sum (Merel's formula), shared by all orbits.
Traces Tr_{K/Q} a_n come from arithmetic in F_ℓ[x]/(f) for primes ℓ whose
product exceeds twice Deligne's bound d·σ0(n)·n^((k−1)/2), lifted by CRT.
"""

from __future__ import annotations

from functools import cached_property

import flint
import numpy as np

from builder.arith import factor, is_prime, primes_up_to
from builder.forms.fields import NumberField
from builder.forms.newspace import NewSpace, Orbit
from builder.linalg import charpoly_int, identity, poly_at_matrix, restrict
from builder.symbols.heilbronn import merel
from builder.symbols.manin import poly_action
from builder.symbols.space import SymbolSpace, rows_to_fmpq_mat


def _right_kernel_cols(A: flint.fmpq_mat) -> flint.fmpq_mat:
    """Columns spanning {u : A·u = 0}."""
    from builder.linalg import left_kernel

    return left_kernel(A.transpose()).transpose()


class EigenForm:
    """The eigen-functional of one orbit and everything derived from it."""

    def __init__(self, new: NewSpace, orbit: Orbit) -> None:
        self.new = new
        self.space: SymbolSpace = new.space
        self.orbit = orbit
        self.N, self.k, self.d = new.N, new.k, orbit.dim
        self.K = NumberField(orbit.poly)
        self._build()

    # -- construction ---------------------------------------------------------
    def _op_on_orbit(self, n: int) -> flint.fmpq_mat:
        return restrict(self.orbit.basis, self.new.hecke(n))

    def _dual(self) -> flint.fmpq_mat:
        S = self.space
        F = S.dim
        U = identity(F)  # columns spanning the current candidate dual
        ops = []
        for p, e in factor(self.N):
            Q = p**e
            W = rows_to_fmpq_mat(S.atkin_lehner_full(Q), F)
            ops.append(W - identity(F) * self.orbit.signs[p])
        for p in [self.orbit.prime] + [q for q in self.new.good_primes() if q != self.orbit.prime]:
            ops.append(("T", p))
        for op in ops:
            if U.ncols() == self.d:
                break
            if isinstance(op, tuple):
                g = charpoly_int(self._op_on_orbit(op[1]))
                T = S.hecke_full(op[1])
                # g(T) restricted to the span of U: g(T)·U by Horner on the block
                AU = _poly_times_block(g, T, U)
            else:
                AU = op * U
            K = _right_kernel_cols(AU)
            U = U * K
        if U.ncols() != self.d:
            raise ArithmeticError(
                f"level {self.N}: dual of an orbit of dim {self.d} has dim {U.ncols()}"
            )
        return U

    def _build(self) -> None:
        S = self.space
        U = self._dual()
        q = self.orbit.prime
        T = S.hecke_full(q)
        TU = T * U
        # A with T·U = U·A (U has full column rank); solve via a left inverse
        A = _solve_cols(U, TU)
        if charpoly_int(A) != self.orbit.poly:
            raise ArithmeticError("dual block has the wrong characteristic polynomial")
        Cm = _eigvec_matrix(self.orbit.poly, A)  # d × d: c_r = Σ_s Cm[r, s] α^s
        UC = U * Cm  # F × d
        C, _ = S._coordinate_matrix()
        Z, _den = UC.numer_denom()
        Phi = C * Z  # nsym × d integers (common denominator dropped)
        self._phi = np.array(
            [[int(Phi[i, j]) for j in range(self.d)] for i in range(Phi.nrows())], dtype=object
        )
        nz = np.nonzero(np.any(self._phi != 0, axis=1))[0]
        if len(nz) == 0:
            raise ArithmeticError("eigen-functional vanishes on every Manin symbol")
        self.x0 = int(nz[0])
        self._phi_x0_inv = self.K.inv(self.K.elt(list(self._phi[self.x0])))

    # -- values -------------------------------------------------------------------
    def phi(self, x: int) -> flint.fmpq_poly:
        """φ(Manin symbol x) as an element of K (up to the dropped denominator)."""
        return self.K.elt(list(self._phi[x]))

    def _heilbronn_sum(self, n: int, table: np.ndarray, mod: int | None = None) -> np.ndarray:
        """Σ over Merel's X_n of the table rows at x0·h (weight-k coefficients)."""
        S = self.space
        i, j = divmod(self.x0, S.psi)
        a, b, c, d = merel(n)
        u, v = int(S.P1.c[j]), int(S.P1.d[j])
        idx = S.P1.index(u * a + v * c, u * b + v * d)
        ok = idx >= 0
        if S.w == 0:
            rows = table[idx[ok]]
            s = rows.sum(axis=0) if len(rows) else np.zeros(table.shape[1], dtype=table.dtype)
            return s % mod if mod else s
        acc = np.zeros(table.shape[1], dtype=object)
        for h in np.nonzero(ok)[0].tolist():
            A = poly_action(int(a[h]), int(b[h]), int(c[h]), int(d[h]), S.w)[i]
            t = int(idx[h])
            for m, coef in enumerate(A):
                if coef:
                    acc = acc + table[m * S.psi + t] * coef
        if mod:
            acc = np.array([int(x) % mod for x in acc], dtype=object)
        return acc

    def ap(self, p: int) -> flint.fmpq_poly:
        """Exact a_p ∈ K (power basis of the T_q-eigenvalue α = x mod f)."""
        if not is_prime(p):
            raise ValueError(f"p must be prime, got {p}")
        val = self.K.elt([int(x) for x in self._heilbronn_sum(p, self._phi)])
        return self.K.mul(val, self._phi_x0_inv)

    @cached_property
    def _mod_tables(self) -> dict:
        return {}

    def ap_mod(self, p: int, ell: int) -> flint.nmod_poly:
        """a_p reduced into F_ℓ[x]/(f) (ℓ must not divide the denominators)."""
        tab = self._mod_table(ell)
        val = self._heilbronn_sum(p, tab, ell)
        v = flint.nmod_poly([int(x) for x in val], ell)
        return (v * self._x0_inv_mod(ell)) % self._f_mod(ell)

    def _mod_table(self, ell: int) -> np.ndarray:
        cache = self._mod_tables
        if ell not in cache:
            if self.space.w == 0:
                cache[ell] = np.array(
                    [[int(x) % ell for x in row] for row in self._phi], dtype=np.int64
                )
            else:
                cache[ell] = np.array(
                    [[int(x) % ell for x in row] for row in self._phi], dtype=object
                )
        return cache[ell]

    def _f_mod(self, ell: int) -> flint.nmod_poly:
        return flint.nmod_poly([int(c) for c in self.orbit.poly.coeffs()], ell)

    def _x0_inv_mod(self, ell: int) -> flint.nmod_poly:
        key = ("inv", ell)
        cache = self._mod_tables
        if key not in cache:
            c = [int(x) % ell for x in self._phi[self.x0]]
            v = flint.nmod_poly(c, ell)
            g, s, _ = v.xgcd(self._f_mod(ell))
            if g.degree() != 0:
                raise ZeroDivisionError(f"φ(x0) is not invertible modulo {ell}")
            cache[key] = s * flint.nmod_poly([pow(int(g.coeffs()[0]), -1, ell)], ell)
        return cache[key]


def _poly_times_block(g: flint.fmpz_poly, T: flint.fmpq_mat, U: flint.fmpq_mat) -> flint.fmpq_mat:
    """g(T)·U by Horner's rule on the column block U."""
    coeffs = list(g.coeffs())
    R = U * flint.fmpq(0)
    for c in reversed(coeffs):
        R = T * R
        if c != 0:
            R = R + U * flint.fmpq(c)
    return R


def _solve_cols(U: flint.fmpq_mat, TU: flint.fmpq_mat) -> flint.fmpq_mat:
    """A with U·A = TU, for U of full column rank."""
    d = U.ncols()
    # pick d independent rows of U
    R, rank = U.transpose().rref()
    piv = []
    r = 0
    for c in range(R.ncols()):
        if r < rank and R[r, c] != 0:
            piv.append(c)
            r += 1
    Us = flint.fmpq_mat(d, d)
    Ts = flint.fmpq_mat(d, d)
    for i, p in enumerate(piv):
        for j in range(d):
            Us[i, j] = U[p, j]
            Ts[i, j] = TU[p, j]
    A = Us.solve(Ts)
    if U * A != TU:
        raise ArithmeticError("the dual block is not stable under the Hecke operator")
    return A


def _eigvec_matrix(f: flint.fmpz_poly, A: flint.fmpq_mat) -> flint.fmpq_mat:
    """Cm (d × d) with A·c = α c for c_r = Σ_s Cm[r, s] α^s, f(α) = 0."""
    d = A.nrows()
    fc = [int(x) for x in f.coeffs()]
    for start in range(d):
        v = flint.fmpq_mat(d, 1)
        v[start, 0] = 1
        kry = [v]
        for _ in range(d - 1):
            kry.append(A * kry[-1])
        Cm = flint.fmpq_mat(d, d)
        # b_i(y) = Σ_{j>i} f_j y^(j−1−i)
        for i in range(d):
            for j in range(i + 1, d + 1):
                s = j - 1 - i
                if fc[j]:
                    for r in range(d):
                        Cm[r, s] += fc[j] * kry[i][r, 0]
        if any(Cm[r, s] != 0 for r in range(d) for s in range(d)):
            return Cm
    raise ArithmeticError("could not build an eigenvector")


def trace_primes(bound: int) -> list[int]:
    """Primes ℓ < 2^31 whose product exceeds 2·bound (largest first)."""
    out, prod = [], 1
    ell = (1 << 31) - 1
    while prod <= 2 * bound:
        if is_prime(ell):
            out.append(ell)
            prod *= ell
        ell -= 2
    return out


__all__ = ["EigenForm", "trace_primes", "primes_up_to", "poly_at_matrix"]
