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
from builder.linalg import (
    charpoly_int,
    crt_pair,
    lift_primes,
    nmod_column_echelon,
    nmod_kernel_cols,
    poly_at_matrix,
    rational_reconstruction,
    restrict,
)
from builder.symbols.heilbronn import hecke_matrices
from builder.symbols.manin import poly_action
from builder.symbols.space import SymbolSpace


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
        """The dual U (F × d, column echelon) computed modulo primes, lifted, checked.

        Mod ℓ: cut M* down by W_Q − ε_Q, then by g_p(T_p) (g_p = charpoly of T_p
        on V) for p = the orbit's prime, then further primes ∤ N, until the
        dimension is d.  Lift by CRT + rational reconstruction; accept only if
        exactly W_Q U = ε_Q U and T_p U = U A_p with charpoly(A_p) = g_p for every
        p used.  Then U lies in the exact common kernel, whose dimension is at
        most the mod-ℓ dimension d, and contains the dual of V: so it is it.
        """
        primes = [self.orbit.prime] + [q for q in self.new.good_primes() if q != self.orbit.prime]
        polys: dict[int, flint.fmpz_poly] = {}
        acc: list[list[int]] | None = None
        piv: list[int] | None = None
        mod = 1
        used: list[int] = []
        for ell in lift_primes():
            try:
                E, piv_l, used_l = self._dual_mod(ell, primes, polys)
            except ZeroDivisionError:
                continue
            if acc is None or piv_l != piv or used_l != used:
                acc = [[int(E[i, j]) for j in range(self.d)] for i in range(E.nrows())]
                piv, used, mod = piv_l, used_l, ell
            else:
                acc = [
                    [crt_pair(acc[i][j], mod, int(E[i, j]), ell) for j in range(self.d)]
                    for i in range(len(acc))
                ]
                mod *= ell
            U = _reconstruct(acc, mod)
            if U is not None and self._verify_dual(U, piv, used, polys):
                return U
            if mod.bit_length() > 62 * 40:
                break
        raise ArithmeticError(
            f"level {self.N}: could not lift the dual of an orbit of dim {self.d}"
        )

    def _dual_mod(self, ell: int, primes: list[int], polys: dict) -> tuple:
        S = self.space
        U = self._sign_block_mod(ell)
        used = []
        cache = self.new.__dict__.setdefault("_block_actions", {})
        for step, q in enumerate(primes):
            if U.ncols() == self.d:
                break
            if q not in polys:
                polys[q] = charpoly_int(self._op_on_orbit(q))
            key = (tuple(sorted(self.orbit.signs.items())), q, ell)
            if step == 0 and key in cache:
                B = cache[key]
            else:
                B = _block_action(_cached_nmod(S, "T", q, ell), U)
                if step == 0:
                    cache[key] = B
            gB = _nmod_poly_at(polys[q], B, ell)
            U = U * nmod_kernel_cols(gB)
            used.append(q)
        if U.ncols() != self.d:
            raise ArithmeticError(
                f"level {self.N}: dual of an orbit of dim {self.d} has dim {U.ncols()} mod {ell}"
            )
        if self.orbit.prime not in used:
            used.insert(0, self.orbit.prime)
            if self.orbit.prime not in polys:
                polys[self.orbit.prime] = self.orbit.poly
        E, piv = nmod_column_echelon(U)
        return E, piv, used

    def _sign_block_mod(self, ell: int) -> flint.nmod_mat:
        """∩_Q ker(W_Q − ε_Q) mod ℓ as columns; prefixes shared by all orbits."""
        cache = self.new.__dict__.setdefault("_sign_blocks_mod", {})
        S = self.space
        F = S.dim
        U = None
        prefix: tuple = (ell,)
        for p, e in factor(self.N):
            prefix = prefix + ((p, self.orbit.signs[p]),)
            if prefix not in cache:
                A = _cached_nmod(S, "W", p**e, ell)
                A = A - _nmod_identity(F, ell) * (self.orbit.signs[p] % ell)
                cache[prefix] = nmod_kernel_cols(A) if U is None else U * nmod_kernel_cols(A * U)
            U = cache[prefix]
        return U if U is not None else _nmod_identity(F, ell)

    def _verify_dual(self, U: flint.fmpq_mat, piv: list[int], used: list[int], polys) -> bool:
        S = self.space
        for p, e in factor(self.N):
            if S.atkin_lehner_full_matrix(p**e) * U != U * self.orbit.signs[p]:
                return False
        for q in used:
            TU = S.hecke_full_cached(q) * U
            A = flint.fmpq_mat(self.d, self.d)
            for i, r in enumerate(piv):
                for j in range(self.d):
                    A[i, j] = TU[r, j]
            if U * A != TU or charpoly_int_safe(A) != polys[q]:
                return False
        return True

    def _build(self) -> None:
        S = self.space
        U = self._dual()
        q = self.orbit.prime
        T = S.hecke_full_cached(q)
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
        i = self.x0 // S.psi
        ok, targets = S.heilbronn_targets(n, self.x0)
        if S.w == 0:
            rows = table[targets]
            s = rows.sum(axis=0) if len(rows) else np.zeros(table.shape[1], dtype=table.dtype)
            return s % mod if mod else s
        a, b, c, d = hecke_matrices(n)
        idx = dict(zip(ok.tolist(), targets.tolist(), strict=False))
        acc = np.zeros(table.shape[1], dtype=object)
        for h in ok.tolist():
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


def charpoly_int_safe(A: flint.fmpq_mat):
    try:
        return charpoly_int(A)
    except ArithmeticError:
        return None


def rows_to_nmod(rows: list[dict], ncols: int, ell: int) -> flint.nmod_mat:
    """Sparse rational rows reduced modulo ℓ (raises ZeroDivisionError on a bad ℓ)."""
    out = flint.nmod_mat(len(rows), ncols, ell)
    for r, row in enumerate(rows):
        for c, v in row.items():
            if isinstance(v, int):
                out[r, c] = v % ell
            else:
                den = v.denominator % ell
                if den == 0:
                    raise ZeroDivisionError(f"denominator divisible by {ell}")
                out[r, c] = v.numerator % ell * pow(den, -1, ell) % ell
    return out


def _cached_nmod(S, kind: str, n: int, ell: int) -> flint.nmod_mat:
    """T_n ("T") or W_n ("W") on the whole space modulo ℓ, cached on the space."""
    cache = S.__dict__.setdefault("_nmod_cache", {})
    key = (kind, n, ell)
    if key not in cache:
        rows = S.hecke_rows(n) if kind == "T" else S.atkin_lehner_full(n)
        cache[key] = rows_to_nmod(rows, S.dim, ell)
    return cache[key]


def _nmod_identity(n: int, ell: int) -> flint.nmod_mat:
    out = flint.nmod_mat(n, n, ell)
    for i in range(n):
        out[i, i] = 1
    return out


def _block_action(T: flint.nmod_mat, U: flint.nmod_mat) -> flint.nmod_mat:
    """B with T·U = U·B (U of full column rank, T·U ⊂ span U), over F_ℓ."""
    E, piv = nmod_column_echelon(U)
    TE = T * E
    m = E.ncols()
    B = flint.nmod_mat(m, m, U.modulus())
    for i, r in enumerate(piv):
        for j in range(m):
            B[i, j] = TE[r, j]
    if E * B != TE:
        raise ZeroDivisionError("block not stable modulo ℓ (bad prime)")
    # express in the basis U: U = E·C with C = U[piv, :]
    C = flint.nmod_mat(m, m, U.modulus())
    for i, r in enumerate(piv):
        for j in range(m):
            C[i, j] = U[r, j]
    return C.inv() * B * C


def _nmod_poly_at(g: flint.fmpz_poly, B: flint.nmod_mat, ell: int) -> flint.nmod_mat:
    m = B.nrows()
    R = flint.nmod_mat(m, m, ell)
    I = _nmod_identity(m, ell)
    for c in reversed([int(x) for x in g.coeffs()]):
        R = R * B
        if c % ell:
            R = R + I * (c % ell)
    return R


def _reconstruct(acc: list[list[int]], mod: int) -> flint.fmpq_mat | None:
    rows, cols = len(acc), len(acc[0]) if acc else 0
    out = flint.fmpq_mat(rows, cols)
    for i in range(rows):
        for j in range(cols):
            a = acc[i][j]
            if a == 0:
                continue
            nd = rational_reconstruction(a, mod)
            if nd is None:
                return None
            out[i, j] = flint.fmpq(nd[0], nd[1])
    return out


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
