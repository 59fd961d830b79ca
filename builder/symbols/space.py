"""A space of modular symbols of weight k for Γ0(N) with its operators.

Public API (pure; no I/O):

    space = cuspidal_space(N, k, sign=+1)
    space.dim_cuspidal, space.dim_eisenstein, space.dim
    space.hecke_matrix(n)          # exact fmpq_mat on the cuspidal basis
    space.atkin_lehner(Q)          # W_Q for Q ∥ N, normalised so W_Q² = 1
    space.fricke()                 # W_N
    space.hecke_on_symbol(n, x)    # fast path: T_n of one Manin symbol
    space.modular_symbol(P, a, b)  # P(X, Y){a, b} in the free basis
    space.degeneracy_rows(T, t)    # level N → level M = T.N (β_t: z ↦ t z)
    space.raising_rows(T, t)       # level M = T.N → level N (α_t, f ↦ f(tz))

Matrices act on row vectors (v ↦ v·A), rows being the images of the basis.
References: [St] ch. 8 (Manin symbols, boundary, Merel's formula, Atkin–Lehner,
degeneracy maps), [Cr] ch. 2 (weight 2), [Me], [Ma] (continued fractions).
"""

from __future__ import annotations

from fractions import Fraction
from functools import cached_property, lru_cache
from math import gcd

import flint
import numpy as np

from builder.arith import check_index, check_level, check_sign, check_weight, factor
from builder.linalg import left_kernel, pivots
from builder.linalg_modp import QMat, _as_int, exact_rref, int_matmul
from builder.symbols.cusps import boundary_classes
from builder.symbols.heilbronn import (
    hecke_matrices,
    heilbronn_matrices_any_order,
    heilbronn_points,
)
from builder.symbols.manin import ManinPresentation, poly_action
from builder.symbols.p1 import p1

Vec = dict  # sparse vector {position: int | Fraction}


def _add_into(acc: Vec, vec: Vec, scale=1) -> None:
    for t, v in vec.items():
        s = acc.get(t, 0) + scale * v
        if s:
            acc[t] = s
        else:
            acc.pop(t, None)


def _to_fmpq(x) -> flint.fmpq:
    if isinstance(x, Fraction):
        return flint.fmpq(x.numerator, x.denominator)
    return flint.fmpq(x)


def rows_to_fmpq_mat(rows: list[Vec], ncols: int) -> flint.fmpq_mat:
    """Dense exact matrix from sparse rows (integer rows go through fmpz_mat)."""
    n = len(rows)
    den = 1
    for row in rows:
        for v in row.values():
            if isinstance(v, Fraction):
                den = den * v.denominator // gcd(den, v.denominator)
    flat = [0] * (n * ncols)
    for r, row in enumerate(rows):
        base = r * ncols
        for c, v in row.items():
            flat[base + c] = int(v * den) if den != 1 else int(v)
    Z = flint.fmpz_mat(n, ncols, flat) if n and ncols else flint.fmpz_mat(n, ncols)
    M = flint.fmpq_mat(Z)
    return M / den if den != 1 else M


def convergents(u: int, v: int) -> list[tuple[int, int]]:
    """Convergents p_j/q_j (j = −2, −1, 0, …, n) of u/v, v > 0, gcd(u, v) = 1."""
    out = [(0, 1), (1, 0)]
    while v:
        q, r = divmod(u, v)
        p1, q1 = out[-1]
        p0, q0 = out[-2]
        out.append((q * p1 + p0, q * q1 + q0))
        u, v = v, r
    return out


def _per_instance(method):
    """Cache a method's results on the instance (typed keys), so that a space's
    caches die with it (a module-level lru_cache on methods would keep every
    space alive)."""
    name = method.__name__

    def wrapper(self, *args):
        cache = self.__dict__.setdefault("_method_cache", {})
        key = (name,) + tuple((type(a), a) for a in args)
        if key not in cache:
            cache[key] = method(self, *args)
        return cache[key]

    wrapper.__name__ = name
    wrapper.__doc__ = method.__doc__
    return wrapper


GEN_DENSE_MAX = 12_000_000  # entries (96 MB) of the dense generator matrix, per space

class SymbolSpace:
    """Modular symbols M_k(Γ0(N)) with sign, its cuspidal subspace and operators."""

    def __init__(self, N: int, k: int, sign: int = 1) -> None:
        self.N = check_level(N)
        self.k = check_weight(k)
        self.sign = check_sign(sign)
        self.w = self.k - 2
        self.pres = ManinPresentation(self.N, self.k, self.sign)
        self.P1 = self.pres.P1
        self.psi = self.pres.psi
        self.dim = self.pres.dim

    # -- cuspidal subspace (computed on first use) ----------------------------------
    def _boundary_rows(self) -> tuple[list[Vec], int]:
        cls, sgn, ncls = boundary_classes(self.P1, self.sign)
        sigma = self.P1.index(self.P1.d, -self.P1.c)
        rows = []
        for x in self.pres.free:
            i, j = divmod(x, self.psi)
            row: Vec = {}
            if i == self.w and sgn[j]:
                _add_into(row, {int(cls[j]): int(sgn[j])})
            if i == 0:
                js = int(sigma[j])
                if sgn[js]:
                    _add_into(row, {int(cls[js]): -int(sgn[js])})
            rows.append(row)
        return rows, ncls

    @cached_property
    def boundary_rank(self) -> int:
        """Rank of the boundary map, exactly (linalg_modp.exact_rref, checked)."""
        if self.dim == 0:
            return 0
        rows, ncls = self._boundary_rows()
        Z = np.zeros((max(ncls, 1), self.dim), dtype=np.int64)
        for r, row in enumerate(rows):
            for c, v in row.items():
                Z[c, r] = int(v)
        return exact_rref(Z).rank

    @cached_property
    def dim_cuspidal(self) -> int:
        """dim of the cuspidal subspace = dim − rank of the boundary map."""
        return self.dim - self.boundary_rank

    @cached_property
    def dim_eisenstein(self) -> int:
        return self.boundary_rank

    @cached_property
    def _cusp(self) -> tuple[flint.fmpq_mat, list[int]]:
        if self.dim == 0:
            return flint.fmpq_mat(0, 0), []
        rows, ncls = self._boundary_rows()
        B = rows_to_fmpq_mat(rows, max(ncls, 1))
        # cuspidal = {v : v·B = 0}: rational basis in reduced echelon form
        K = left_kernel(B)
        return K, pivots(K)

    @property
    def cusp_basis(self) -> flint.fmpq_mat:
        """Rows (rref) spanning the cuspidal subspace in the free basis (exact, cached)."""
        return self._cusp[0]

    @property
    def cusp_pivots(self) -> list[int]:
        return self._cusp[1]

    # -- symbols -----------------------------------------------------------------
    def symbol(self, i: int, c: int, d: int) -> Vec:
        """Free-basis coordinates of the Manin symbol [X^i Y^(w−i), (c:d)]."""
        x = self.pres.symbol_index(i, c, d)
        return {} if x < 0 else self.pres.coords(x)

    def _poly_symbol(self, poly: list, g: tuple[int, int, int, int]) -> Vec:
        """P{g0, g∞} = [P|g, g] for g ∈ SL2(Z), P given by its coefficients."""
        a, b, c, d = g
        A = poly_action(a, b, c, d, self.w)
        out: Vec = {}
        for i, pi in enumerate(poly):
            if not pi:
                continue
            for m, coef in enumerate(A[i]):
                if coef:
                    _add_into(out, self.symbol(m, c, d), pi * coef)
        return out

    def modular_symbol(self, poly: list, alpha: tuple[int, int], beta: tuple[int, int]) -> Vec:
        """P(X, Y){α, β} in the free basis; cusps as (u, v) = u/v, (1, 0) = ∞.

        Method: {0, u/v} is the sum over consecutive convergents of
        g_j{0, ∞} with g_j ∈ SL2(Z) ([Ma], [Cr] §2.1, [St] §8.5).
        """
        out: Vec = {}
        _add_into(out, self._from_zero(poly, beta))
        _add_into(out, self._from_zero(poly, alpha), -1)
        return out

    def _from_zero(self, poly: list, cusp: tuple[int, int]) -> Vec:
        u, v = cusp
        if v < 0:
            u, v = -u, -v
        if v == 0:
            return self._poly_symbol(poly, (1, 0, 0, 1))
        g = gcd(u, v)
        u, v = u // g, v // g
        cv = convergents(u, v)
        out: Vec = {}
        for j in range(1, len(cv)):
            (p0, q0), (p1, q1) = cv[j - 1], cv[j]
            if p1 * q0 - p0 * q1 == 1:
                mat = (p1, p0, q1, q0)
            else:
                mat = (-p1, p0, -q1, q0)
            _add_into(out, self._poly_symbol(poly, mat))
        return out

    def _poly_terms(self, poly: list, g: tuple[int, int, int, int], out: list) -> None:
        """Append (Manin symbol index, coefficient) pairs of P{g0, g∞} = [P|g, g] to out."""
        a, b, c, d = g
        j = self.P1.index_one(c, d)
        if j < 0:
            return
        A = poly_action(a, b, c, d, self.w)
        for i, pi in enumerate(poly):
            if not pi:
                continue
            for m, coef in enumerate(A[i]):
                if coef:
                    out.append((m * self.psi + j, pi * coef))

    def modular_symbol_terms(self, poly: list, alpha: tuple[int, int],
                             beta: tuple[int, int]) -> list[tuple[int, int]]:
        """P(X, Y){α, β} as a list of (Manin symbol index, integer coefficient) pairs."""
        out: list = []
        self._from_zero_terms(poly, beta, 1, out)
        self._from_zero_terms(poly, alpha, -1, out)
        return out

    def _from_zero_terms(self, poly: list, cusp: tuple[int, int], sgn: int, out: list) -> None:
        u, v = cusp
        if v < 0:
            u, v = -u, -v
        p = poly if sgn == 1 else [-x for x in poly]
        if v == 0:
            self._poly_terms(p, (1, 0, 0, 1), out)
            return
        g = gcd(u, v)
        cv = convergents(u // g, v // g)
        for j in range(1, len(cv)):
            (p0, q0), (p1, q1) = cv[j - 1], cv[j]
            mat = (p1, p0, q1, q0) if p1 * q0 - p0 * q1 == 1 else (-p1, p0, -q1, q0)
            self._poly_terms(p, mat, out)

    # -- Hecke operators ---------------------------------------------------------
    def hecke_on_symbol(self, n: int, x: int) -> Vec:
        """T_n applied to Manin symbol number x, by Merel's formula; free coordinates."""
        n = check_index(n)
        i, j = divmod(x, self.psi)
        a, b, c, d = hecke_matrices(n)
        u, v = int(self.P1.c[j]), int(self.P1.d[j])
        idx = self.P1.index(u * a + v * c, u * b + v * d)
        out: Vec = {}
        if self.w == 0:
            coords = self.pres.coords
            for t in idx[idx >= 0].tolist():
                _add_into(out, coords(t))
            return out
        for h in range(len(a)):
            t = int(idx[h])
            if t < 0:
                continue
            A = poly_action(int(a[h]), int(b[h]), int(c[h]), int(d[h]), self.w)[i]
            for m, coef in enumerate(A):
                if coef:
                    _add_into(out, self.pres.coords(m * self.psi + t), coef)
        return out

    def hecke_full(self, n: int) -> flint.fmpq_mat:
        """Matrix of T_n on the whole symbol space (free basis, rows = images)."""
        n = check_index(n)
        if self.w == 0:
            return rows_to_fmpq_mat(self.hecke_rows(n), self.dim)
        # weight > 2: Z[f, symbol] = Σ_h coefficient of that symbol in [x_f]·h, then Z·C
        a, b, c, d = (arr.tolist() for arr in hecke_matrices(n))
        acts = [poly_action(a[h], b[h], c[h], d[h], self.w) for h in range(len(a))]
        F, psi = self.dim, self.psi
        Z = flint.fmpz_mat(F, self.pres.nsym)
        for f, x in enumerate(self.pres.free):
            i, j = divmod(x, psi)
            u, v = int(self.P1.c[j]), int(self.P1.d[j])
            idx = self.P1.index(
                [u * a[h] + v * c[h] for h in range(len(a))],
                [u * b[h] + v * d[h] for h in range(len(a))],
            ).tolist()
            for h, t in enumerate(idx):
                if t < 0:
                    continue
                for m, coef in enumerate(acts[h][i]):
                    if coef:
                        Z[f, m * psi + t] += coef
        C, D = self._coordinate_matrix()
        return flint.fmpq_mat(Z * C) / D

    @cached_property
    def _coords_int(self) -> tuple[flint.fmpz_mat, int]:
        """All symbol coordinates as an integer matrix C (nsym × F) and its denominator D."""
        D = 1
        for x in range(self.pres.nsym):
            for v in self.pres.coords(x).values():
                if isinstance(v, Fraction):
                    D = D * v.denominator // gcd(D, v.denominator)
        C = flint.fmpz_mat(self.pres.nsym, self.dim)
        for x in range(self.pres.nsym):
            for t, v in self.pres.coords(x).items():
                C[x, t] = int(v * D)
        return C, D

    def _coordinate_matrix(self) -> tuple[flint.fmpz_mat, int]:
        return self._coords_int

    def hecke_matrix(self, n: int) -> flint.fmpq_mat:
        """Exact matrix of T_n on the cuspidal subspace (rows = images of the basis).

        A fresh copy each call: callers may modify it.
        """
        n = check_index(n)
        return flint.fmpq_mat(self._hecke_matrix(n))

    @_per_instance  # typed keys: 2.0 must not hit the entry of 2
    def _hecke_matrix(self, n: int) -> flint.fmpq_mat:
        return self.restrict(self.hecke_rows(n))

    def restrict(self, T) -> flint.fmpq_mat:
        """Matrix on the cuspidal basis of an operator given on the free basis.

        ``T`` is a list of sparse rows (fast path) or an fmpq_mat; the operator
        must preserve the cuspidal subspace (Hecke operators and W_Q do).  The
        cuspidal basis is [I | X] up to column order (rref), so the restriction
        is T[piv, piv] + X·T[nonpiv, piv]: cost s²·e with e = dim Eisenstein.
        """
        s = self.dim_cuspidal
        if s == 0:
            return flint.fmpq_mat(0, 0)
        if not isinstance(T, list):
            T = [
                {
                    j: Fraction(int(T[i, j].p), int(T[i, j].q))
                    for j in range(T.ncols())
                    if T[i, j] != 0
                }
                for i in range(T.nrows())
            ]
        piv = self.cusp_pivots
        col = {p: c for c, p in enumerate(piv)}
        nonpiv = self._nonpivots
        A1 = rows_to_fmpq_mat([{col[j]: v for j, v in T[p].items() if j in col} for p in piv], s)
        if not nonpiv:
            return A1
        A2 = rows_to_fmpq_mat([{col[j]: v for j, v in T[p].items() if j in col} for p in nonpiv], s)
        return A1 + self._cusp_X * A2

    @cached_property
    def _nonpivots(self) -> list[int]:
        ps = set(self.cusp_pivots)
        return [c for c in range(self.dim) if c not in ps]

    @cached_property
    def _cusp_X(self) -> flint.fmpq_mat:
        """The cuspidal basis restricted to the non-pivot columns (s × e)."""
        X = flint.fmpq_mat(self.dim_cuspidal, len(self._nonpivots))
        for r in range(self.dim_cuspidal):
            for c, p in enumerate(self._nonpivots):
                X[r, c] = self.cusp_basis[r, p]
        return X

    # -- dense exact operators (numpy), used by the new-space pipeline ----------------------
    @cached_property
    def gen_csr(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, int]:
        """The generators' free coordinates in CSR form over one denominator:
        (indptr, free position, numerator, den), one row per generator of the presentation
        (every Manin symbol is ± one generator, or zero)."""
        pres = self.pres
        den = 1
        for e in pres.gen_expr:
            for v in e.values():
                if isinstance(v, Fraction):
                    den = den * v.denominator // gcd(den, v.denominator)
        gcnt = np.array([len(e) for e in pres.gen_expr], dtype=np.int64)
        gptr = np.concatenate([[0], np.cumsum(gcnt)])
        ggen = np.array([t for e in pres.gen_expr for t in e], dtype=np.int64)
        gnum = _as_int(np.array([int(v * den) for e in pres.gen_expr for v in e.values()],
                                dtype=object))
        return gptr, ggen, gnum, den

    @cached_property
    def gen_dense(self) -> tuple[np.ndarray, float] | None:
        """(G, max |G|): the generators' coordinate numerators as a dense float matrix
        (generators × dim), or None when that would exceed ``GEN_DENSE_MAX`` entries or
        the numerators are not small."""
        if not hasattr(self.pres, "gen_expr") or self.dim == 0:
            return None
        gptr, ggen, gnum, _ = self.gen_csr
        ngen = len(gptr) - 1
        if ngen * self.dim > GEN_DENSE_MAX or gnum.dtype == object:
            return None
        G = np.zeros((ngen, self.dim))
        G[np.repeat(np.arange(ngen), np.diff(gptr)), ggen] = gnum
        return G, float(np.max(np.abs(gnum), initial=0))

    @cached_property
    def coord_csr(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, int]:
        """Every Manin symbol's free coordinates in CSR form over one denominator.

        (indptr, gen, num, den): coords(x) = {gen[t]: num[t]/den, indptr[x] ≤ t < indptr[x+1]}.
        """
        pres = self.pres
        if not hasattr(pres, "gen_expr"):  # odd weight: the zero space
            return (np.zeros(pres.nsym + 1, dtype=np.int64), np.zeros(0, dtype=np.int64),
                    np.zeros(0, dtype=np.int64), 1)
        # generators first (few), then every symbol = sign · its generator, with numpy
        gptr, ggen, gnum, den = self.gen_csr
        gcnt = np.diff(gptr)
        root, sign = pres.root_of, pres.root_sign
        cnt = np.where(root >= 0, gcnt[np.maximum(root, 0)], 0)
        indptr = np.concatenate([[0], np.cumsum(cnt)])
        src = np.repeat(gptr[np.maximum(root, 0)], cnt) + (
            np.arange(int(indptr[-1])) - np.repeat(indptr[:-1], cnt))
        sym_sign = np.repeat(sign, cnt)
        return indptr, ggen[src], gnum[src] * sym_sign, den

    def coords_row(self, x: int) -> QMat:
        """Free coordinates of Manin symbol x as an exact 1 × dim matrix."""
        indptr, gen, num, den = self.coord_csr
        row = np.zeros((1, self.dim), dtype=num.dtype)
        np.add.at(row[0], gen[indptr[x] : indptr[x + 1]], num[indptr[x] : indptr[x + 1]])
        return QMat(row, den)

    def _accumulate(self, rows: np.ndarray, syms: np.ndarray, coef: np.ndarray,
                    nrows: int) -> QMat:
        """Dense (nrows × dim): row rows[t] += coef[t]·coords(syms[t]) for every t."""
        indptr, gen, num, den = self.coord_csr
        cnt = indptr[syms + 1] - indptr[syms]
        rep = np.repeat(np.arange(len(syms)), cnt)
        start = np.repeat(indptr[syms] - np.cumsum(cnt) + cnt, cnt)
        pos = start + np.arange(len(rep))
        flat = rows[rep] * self.dim + gen[pos]
        big = int(np.max(np.abs(num), initial=0)) * int(np.max(np.abs(coef), initial=0))
        if big * max(1, len(pos)) < (1 << 53):
            vals = (num[pos] * coef[rep]).astype(np.float64)
            out = np.bincount(flat, weights=vals, minlength=nrows * self.dim)
            return QMat(np.rint(out).astype(np.int64).reshape(nrows, self.dim), den).reduced()
        acc = np.zeros(nrows * self.dim, dtype=object)
        np.add.at(acc, flat, num[pos].astype(object) * coef[rep].astype(object))
        return QMat(_as_int(acc.reshape(nrows, self.dim)), den).reduced()

    def _accumulate_few(self, rows: np.ndarray, syms: np.ndarray, coef: np.ndarray,
                        nrows: int) -> QMat:
        """``_accumulate`` for few rows with many terms each (Heilbronn sums): the terms
        are first summed per generator (every symbol is ± a generator), then one float
        product with the generators' dense coordinates, exact while the row sums of
        |counts| times max |coordinate| stay below 2^52; else ``_accumulate``."""
        dense = self.gen_dense
        if dense is None or coef.dtype == object:
            return self._accumulate(rows, syms, coef, nrows)
        G, gmax = dense
        pres = self.pres
        g = pres.root_of[syms]
        keep = g >= 0
        w = (pres.root_sign[syms] * coef)[keep].astype(np.float64)
        ngen = G.shape[0]
        C = np.bincount(rows[keep] * ngen + g[keep], weights=w,
                        minlength=nrows * ngen).reshape(nrows, ngen)
        if float(np.max(np.abs(C).sum(axis=1), initial=0)) * gmax >= float(1 << 52):
            return self._accumulate(rows, syms, coef, nrows)
        return QMat(np.rint(C @ G).astype(np.int64), self.coord_csr[3]).reduced()

    def dense(self, rows: list[Vec]) -> QMat:
        """Sparse rows (free coordinates) as an exact dense matrix."""
        den = 1
        for row in rows:
            for v in row.values():
                if isinstance(v, Fraction):
                    den = den * v.denominator // gcd(den, v.denominator)
        Z = np.zeros((len(rows), self.dim), dtype=object if den > 1 << 20 else np.int64)
        for r, row in enumerate(rows):
            for c, v in row.items():
                Z[r, c] = int(v * den)
        return QMat(Z, den).reduced()

    @_per_instance
    def hecke_dense(self, n: int) -> QMat:
        """T_n on the whole space (dim × dim, rows = images of the free generators).

        Merel's formula [Me] vectorised over the generators: one pass per Heilbronn
        matrix h (and monomial m), targets looked up in P¹ with numpy.
        """
        n = check_index(n)
        free = np.array(self.pres.free, dtype=np.int64)
        I, J = np.divmod(free, self.psi)
        u, v = self.P1.c[J], self.P1.d[J]
        a, b, c, d = hecke_matrices(n)
        rows, syms, coefs = [], [], []
        gens = np.arange(len(free))
        for h in range(len(a)):
            ah, bh, ch, dh = int(a[h]), int(b[h]), int(c[h]), int(d[h])
            t = self.P1.index(u * ah + v * ch, u * bh + v * dh)
            ok = t >= 0
            if self.w == 0:
                rows.append(gens[ok])
                syms.append(t[ok])
                coefs.append(np.ones(int(ok.sum()), dtype=np.int64))
                continue
            A = np.array(poly_action(ah, bh, ch, dh, self.w), dtype=object)
            for m in range(self.w + 1):
                cm = A[I, m]
                sel = ok & (cm != 0)
                if np.any(sel):
                    rows.append(gens[sel])
                    syms.append(m * self.psi + t[sel])
                    coefs.append(_as_int(np.array(cm[sel].tolist(), dtype=object)))
        if not rows:
            return QMat(np.zeros((self.dim, self.dim), dtype=np.int64), 1)
        coef = np.concatenate(coefs)
        return self._accumulate(np.concatenate(rows), np.concatenate(syms),
                                _as_int(coef) if coef.dtype == object else coef, self.dim)

    def transfer_dense(self, source: SymbolSpace) -> QMat:
        """α_1 from level M = source.N (M | N): rows = images of source's free generators.

        [P, (c:d)]_M ↦ Σ [P, (c':d')]_N over the points of P¹(Z/NZ) above (c:d)
        (the transfer to Γ0(N) ⊂ Γ0(M); common practice, [St] §8.6).
        """
        target, syms = self._transfer_terms(source)
        return self._accumulate(target, syms, np.ones(len(syms), dtype=np.int64), source.dim)

    def _transfer_terms(self, source: SymbolSpace) -> tuple[np.ndarray, np.ndarray]:
        """(source generator, symbol of level N) for every symbol above a free generator."""
        if self.N % source.N or source.k != self.k or source.sign != self.sign:
            raise ValueError("transfer needs M | N, the same weight and sign")
        red = source.P1.index(self.P1.c, self.P1.d)
        pos = np.full(source.pres.nsym, -1, dtype=np.int64)
        pos[np.array(source.pres.free, dtype=np.int64)] = np.arange(source.dim)
        syms = np.arange(self.pres.nsym, dtype=np.int64)
        i, j = np.divmod(syms, self.psi)
        target = pos[i * source.psi + red[j]]
        ok = target >= 0
        return target[ok], syms[ok]

    def fricke_transfer_dense(self, source: SymbolSpace) -> QMat:
        """transfer_dense(source)·W_N: rows = W_N(α_1(g)) for source's free generators g.

        Weight 2: W_N is applied to each Manin symbol of the transfer by continued
        fractions (``_weight2_images``), never as a dense dim × dim product; W_N is well
        defined on classes, so this is the same matrix.  Other weights: the product.
        """
        if self.w != 0:
            T = self.transfer_dense(source)
            W = self.atkin_lehner_dense(self.N)
            return QMat(int_matmul(T.num, W.num), T.den * W.den)
        target, syms = self._transfer_terms(source)
        return self._weight2_images(self.atkin_lehner_matrix_for(self.N), syms, target,
                                    source.dim)

    # -- Atkin–Lehner ---------------------------------------------------------------
    def atkin_lehner_matrix_for(self, Q: int) -> tuple[int, int, int, int]:
        """W_Q = [[Q x, y], [N z, Q w]] of determinant Q, for Q ∥ N."""
        N = self.N
        Q = check_index(Q, "Q")
        if N % Q or gcd(Q, N // Q) != 1:
            raise ValueError(f"Q must be an exact divisor of N = {N} (Q ∥ N), got {Q}")
        R = N // Q
        # Q x·w − R·y z·... solve Q·X − R·Z = 1 with X = x w, then take w = 1, y = 1
        x = pow(Q, -1, R) if R > 1 else 1
        z = (Q * x - 1) // R if R > 1 else Q * x - 1
        # [[Q x, 1], [N z, Q]] has det Q² x − N z = Q (Q x − R z) = Q
        return (Q * x, 1, N * z, Q)

    @_per_instance
    def atkin_lehner_full(self, Q: int) -> list[Vec]:
        """Rows of W_Q on the whole symbol space (sparse, free basis), W_Q² = 1."""
        W = self.atkin_lehner_dense(Q)
        rows = []
        for r in range(W.shape[0]):
            nz = np.nonzero(W.num[r])[0].tolist()
            rows.append({c: _frac(int(W.num[r, c]), W.den) for c in nz})
        return rows

    def hecke_images(self, x: int, ns: list[int]) -> QMat:
        """Rows T_n(x) (free coordinates, exact) of one Manin symbol x for every n in ns.

        Merel's formula [Me]: one Heilbronn sum per n, accumulated with numpy in chunks
        of a few hundred thousand symbol coordinates (bounded memory).
        """
        i, j = divmod(x, self.psi)
        u, v = int(self.P1.c[j]), int(self.P1.d[j])
        indptr = self.coord_csr[0]
        out: list[QMat] = []
        rows: list = []
        syms: list = []
        coefs: list = []
        start, load = 0, 0

        def flush(stop: int) -> None:
            nonlocal rows, syms, coefs, start, load
            if rows:
                coef = np.concatenate(coefs)
                out.append(self._accumulate_few(
                    np.concatenate(rows) - start, np.concatenate(syms),
                    _as_int(coef) if coef.dtype == object else coef, stop - start))
            else:
                out.append(QMat(np.zeros((stop - start, self.dim), dtype=np.int64), 1))
            rows, syms, coefs, start, load = [], [], [], stop, 0

        for r, n in enumerate(ns):
            if self.w == 0:
                t = self.P1.index(*heilbronn_points(check_index(n), u, v, self.N))
                ok = np.nonzero(t >= 0)[0]
                rows.append(np.full(len(ok), r, dtype=np.int64))
                syms.append(t[ok])
                coefs.append(np.ones(len(ok), dtype=np.int64))
                load += int(np.sum(indptr[t[ok] + 1] - indptr[t[ok]]))
            else:
                a, b, c, d = heilbronn_matrices_any_order(check_index(n))
                t = self.P1.index(u * a + v * c, u * b + v * d)
                ok = np.nonzero(t >= 0)[0]
                A = poly_action_row(a[ok], b[ok], c[ok], d[ok], i, self.w)
                tt = t[ok]
                for m in range(self.w + 1):
                    nz = np.nonzero(A[:, m] != 0)[0]
                    if len(nz):
                        sym = m * self.psi + tt[nz]
                        rows.append(np.full(len(nz), r, dtype=np.int64))
                        syms.append(sym)
                        coefs.append(A[nz, m])
                        load += int(np.sum(indptr[sym + 1] - indptr[sym]))
            if load > 1_500_000:
                flush(r + 1)
        if start < len(ns) or not out:
            flush(len(ns))
        den = 1
        for q in out:
            den = den * q.den // gcd(den, q.den)
        parts = [q.num if q.den == den else _times(q.num, den // q.den) for q in out]
        return QMat(np.concatenate([_as_int(p.astype(object)) if p.dtype == object else p
                                    for p in parts], axis=0), den)

    @_per_instance
    def atkin_lehner_dense(self, Q: int) -> QMat:
        """W_Q on the whole space, normalised so that W_Q² = 1 (rows = images).

        W(P{α, β}) = (P|adj W){Wα, Wβ}; then W² = Q^(k−2), and we divide by
        Q^((k−2)/2) ([AL]; [St] ch. 8).  Each generator's image is a short list of Manin
        symbols (continued fractions, [Ma]); their coordinates are summed with numpy.
        """
        A, B, C, D = self.atkin_lehner_matrix_for(Q)
        if self.w == 0:
            return self._atkin_lehner_weight2(A, B, C, D)
        adj = (D, -B, -C, A)
        rows, syms, coefs = [], [], []
        for f, x in enumerate(self.pres.free):
            i, j = divmod(x, self.psi)
            c, d = int(self.P1.c[j]), int(self.P1.d[j])
            a, b = _complete(c, d)
            # x = g(P{0,∞}) = (P|g^{-1}){g0, g∞},  g = [[a,b],[c,d]]
            poly = [0] * (self.w + 1)
            poly[i] = 1
            p2 = _act(_act(poly, (d, -b, -c, a), self.w), adj, self.w)
            # W g maps 0 ↦ (A b + B d)/(C b + D d), ∞ ↦ (A a + B c)/(C a + D c)
            alpha = _reduce((A * b + B * d, C * b + D * d))
            beta = _reduce((A * a + B * c, C * a + D * c))
            for t, cf in self.modular_symbol_terms(p2, alpha, beta):
                rows.append(f)
                syms.append(t)
                coefs.append(cf)
        M = self._accumulate(np.array(rows, dtype=np.int64), np.array(syms, dtype=np.int64),
                             _as_int(np.array(coefs, dtype=object)), self.dim)
        scale = Q ** (self.w // 2)
        return QMat(M.num, M.den * scale).reduced() if scale != 1 else M

    def _atkin_lehner_weight2(self, A: int, B: int, C: int, D: int) -> QMat:
        """Weight 2: the same sum with every continued fraction expanded at once (numpy)."""
        free = np.array(self.pres.free, dtype=np.int64)
        return self._weight2_images((A, B, C, D), free, np.arange(len(free)), self.dim)

    def _weight2_images(self, W: tuple[int, int, int, int], syms: np.ndarray,
                        rows: np.ndarray, nrows: int) -> QMat:
        """Weight 2, dense (nrows × dim): row rows[t] += W·(Manin symbol syms[t]), where
        the symbol g{0, ∞} = {b/d, a/c} goes to {W(b/d), W(a/c)}, expanded by continued
        fractions ([Ma]; [Cr] §2.1) all at once."""
        A, B, C, D = W
        c, d = self.P1.c[syms], self.P1.d[syms]
        a, b = _complete_vec(c, d)
        parts = [
            _cf_terms(self.P1, A * a + B * c, C * a + D * c, rows, 1),
            _cf_terms(self.P1, A * b + B * d, C * b + D * d, rows, -1),
        ]
        out_rows = np.concatenate([p[0] for p in parts])
        out_syms = np.concatenate([p[1] for p in parts])
        coefs = np.concatenate([p[2] for p in parts])
        return self._accumulate(out_rows, out_syms, coefs, nrows)

    @_per_instance
    def atkin_lehner_full_matrix(self, Q: int) -> flint.fmpq_mat:
        """W_Q on the whole symbol space as an exact matrix (cached)."""
        return rows_to_fmpq_mat(self.atkin_lehner_full(Q), self.dim)

    @_per_instance
    def hecke_rows(self, n: int) -> list[Vec]:
        """Sparse rows of T_n on the whole space (free basis), cached."""
        if self.w == 0:
            return [self.hecke_on_symbol(n, x) for x in self.pres.free]
        M = self.hecke_full_cached(n)
        rows = []
        for i in range(M.nrows()):
            row = {}
            for j in range(M.ncols()):
                v = M[i, j]
                if v != 0:
                    row[j] = Fraction(int(v.p), int(v.q)) if v.q != 1 else int(v.p)
            rows.append(row)
        return rows

    @_per_instance
    def hecke_full_cached(self, n: int) -> flint.fmpq_mat:
        """hecke_full(n), cached."""
        return self.hecke_full(n)

    @_per_instance
    def heilbronn_targets(self, n: int, x: int) -> tuple:
        """For T_n of Manin symbol x: (valid h indices, target P¹ indices), cached."""
        i, j = divmod(x, self.psi)
        a, b, c, d = hecke_matrices(n)
        u, v = int(self.P1.c[j]), int(self.P1.d[j])
        idx = self.P1.index(u * a + v * c, u * b + v * d)
        ok = np.nonzero(idx >= 0)[0]
        return ok, idx[ok]

    def atkin_lehner(self, Q: int) -> flint.fmpq_mat:
        """W_Q on the cuspidal subspace, normalised to an involution."""
        return self.restrict(self.atkin_lehner_full(Q))

    def fricke(self) -> flint.fmpq_mat:
        return self.atkin_lehner(self.N)

    def exact_divisors(self) -> list[int]:
        return sorted(p**e for p, e in factor(self.N))

    # -- degeneracy maps ---------------------------------------------------------------
    def degeneracy_rows(self, target: SymbolSpace, t: int) -> list[Vec]:
        """Rows of the degeneracy map to level M = target.N induced by z ↦ t z.

        Requires t·M | N.  x = P{α, β} ↦ (P|[[1,0],[0,t]]){tα, tβ} at level M
        ([St] §8.6); for t = 1 it is the identity on Manin symbols.
        """
        M = target.N
        if self.N % (t * M):
            raise ValueError(f"degeneracy map needs t·M | N, got t={t}, M={M}, N={self.N}")
        rows = []
        for x in self.pres.free:
            i, j = divmod(x, self.psi)
            c, d = int(self.P1.c[j]), int(self.P1.d[j])
            if t == 1:
                rows.append(dict(target.symbol(i, c, d)))
                continue
            a, b = _complete(c, d)
            poly = [0] * (self.w + 1)
            poly[i] = 1
            p2 = _act(_act(poly, (d, -b, -c, a), self.w), (1, 0, 0, t), self.w)
            alpha = _reduce((t * b, d))
            beta = _reduce((t * a, c))
            rows.append(target.modular_symbol(p2, alpha, beta))
        return rows


    def raising_matrix(self, source: SymbolSpace, t: int = 1) -> flint.fmpq_mat:
        r"""α_t: whole symbol space of level M = source.N → level N (rows = images).

        α_1 is the transfer x ↦ Σ_{γ ∈ Γ0(N)\Γ0(M)} γx: on Manin symbols
        [P, (c:d)]_M ↦ Σ [P, (c':d')]_N over the points of P¹(Z/NZ) above (c:d)
        (common practice; [St] §8.6).  For t > 1, f ↦ f(tz) is W_{tM}∘α_1∘W_M
        up to a scalar, since W_M^{-1}W_{tM} = diag(t, 1) (up to scalars), then α_1
        up to level N.  Needs t·M | N; same weight and sign.
        """
        M = source.N
        if source.k != self.k or source.sign != self.sign:
            raise ValueError("raising map needs the same weight and sign")
        if t < 1 or self.N % (t * M):
            raise ValueError(f"raising map needs t·M | N, got t={t}, M={M}, N={self.N}")
        if t == 1:
            return self._transfer_from(source)
        mid = cuspidal_space(t * M, self.k, self.sign)
        R = source.atkin_lehner_full_matrix(M) * mid._transfer_from(source)
        R = R * mid.atkin_lehner_full_matrix(t * M)
        return R * self._transfer_from(mid) if mid.N != self.N else R

    def _transfer_from(self, source: SymbolSpace) -> flint.fmpq_mat:
        if source.N == self.N:
            return identity_fmpq(self.dim)
        red = source.P1.index(self.P1.c, self.P1.d).tolist()
        fibres: dict[int, list[int]] = {}
        for jN, jM in enumerate(red):
            fibres.setdefault(jM, []).append(jN)
        rows = []
        for x in source.pres.free:
            i, jM = divmod(x, source.psi)
            acc: Vec = {}
            for jN in fibres.get(jM, []):
                _add_into(acc, self.pres.coords(i * self.psi + jN))
            rows.append(acc)
        return rows_to_fmpq_mat(rows, self.dim)


def poly_action_row(a: np.ndarray, b: np.ndarray, c: np.ndarray, d: np.ndarray, i: int,
                    w: int, ell: int | None = None) -> np.ndarray:
    """Row i of builder.symbols.manin.poly_action for arrays of matrices:
    A[h, m] = coefficient of X^m Y^(w−m) in (a_h X + b_h Y)^i (c_h X + d_h Y)^(w−i) —
    exactly (int64 when (2·max|entry|)^w < 2^62, Python integers otherwise), or modulo
    ℓ < 2^21 when ``ell`` is given (int64, reduced at every step)."""
    if w == 1 and np.asarray(a).dtype != object:  # aX + bY or cX + dY: the entries
        pair = (np.asarray(d), np.asarray(c)) if i == 0 else (np.asarray(b), np.asarray(a))
        A = np.stack(pair, axis=1).astype(np.int64)
        return A if ell is None else np.mod(A, ell)
    if ell is None:
        top = int(max((np.max(np.abs(x), initial=0) for x in (a, b, c, d)), default=0))
        dtype = np.int64 if (2 * top + 1) ** w < (1 << 62) else object
        a, b, c, d = (np.asarray(x).astype(dtype) for x in (a, b, c, d))
    else:
        dtype = np.int64
        a, b, c, d = (np.mod(x, ell) for x in (a, b, c, d))

    def reduce(x: np.ndarray) -> np.ndarray:
        return x if ell is None else np.mod(x, ell)

    def power(x: np.ndarray, y: np.ndarray, e: int) -> np.ndarray:
        out = np.ones((len(x), 1), dtype=dtype)
        for _ in range(e):
            nxt = np.zeros((len(x), out.shape[1] + 1), dtype=dtype)
            nxt[:, 1:] += out * x[:, None]
            nxt[:, :-1] += out * y[:, None]
            out = reduce(nxt)
        return out

    P, Q = power(a, b, i), power(c, d, w - i)
    A = np.zeros((len(a), w + 1), dtype=dtype)
    for s_ in range(i + 1):
        A[:, s_:s_ + w - i + 1] = reduce(A[:, s_:s_ + w - i + 1] + P[:, s_:s_ + 1] * Q)
    return A


def _times(Z: np.ndarray, s: int) -> np.ndarray:
    if Z.dtype != object and int(np.max(np.abs(Z), initial=0)) * s < (1 << 62):
        return Z * s
    return Z.astype(object) * s


def _frac(num: int, den: int):
    f = Fraction(num, den)
    return f.numerator if f.denominator == 1 else f


def identity_fmpq(n: int) -> flint.fmpq_mat:
    out = flint.fmpq_mat(n, n)
    for i in range(n):
        out[i, i] = 1
    return out


def _complete_vec(c: np.ndarray, d: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(a, b) with a·d − b·c = 1 for coprime integer arrays (c, d), vectorised."""
    from builder.symbols.heilbronn import _modinv

    m = np.abs(c)
    zero = m == 0
    a = np.where(zero, d, _modinv(np.where(zero, 1, d), np.where(zero, 1, m)))
    b = np.where(zero, 0, (a * d - 1) // np.where(zero, 1, c))
    return a, b


def _cf_terms(P1, u: np.ndarray, v: np.ndarray, gens: np.ndarray,
              sgn: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Weight-2 Manin symbols of sgn·{0, u/v} for arrays of cusps u/v (any signs, any
    common factor), as (generator, symbol index, coefficient) arrays: the terms of
    SymbolSpace._from_zero_terms over consecutive convergents ([Ma], [Cr] §2.1)."""
    neg = v < 0
    u, v = np.where(neg, -u, u), np.where(neg, -v, v)
    g = np.gcd(u, v)
    g[g == 0] = 1
    u, v = u // g, v // g
    out_r, out_s = [], []
    # the first pair of convergents, (0/1, 1/0): the matrix [[1, 0], [0, 1]], symbol (0:1)
    out_r.append(gens)
    out_s.append(P1.index(np.zeros_like(u), np.ones_like(u)))
    act = v != 0
    p0, q0 = np.zeros_like(u), np.ones_like(u)
    p1, q1 = np.ones_like(u), np.zeros_like(u)
    while np.any(act):
        idx = np.nonzero(act)[0]
        uu, vv = u[idx], v[idx]
        q = uu // vv
        u[idx], v[idx] = vv, uu - q * vv
        np_, nq = q * p1[idx] + p0[idx], q * q1[idx] + q0[idx]
        p0[idx], q0[idx] = p1[idx], q1[idx]
        p1[idx], q1[idx] = np_, nq
        det = p1[idx] * q0[idx] - p0[idx] * q1[idx]
        cc = np.where(det == 1, q1[idx], -q1[idx])
        out_r.append(gens[idx])
        out_s.append(P1.index(cc, q0[idx]))
        act = v != 0
    rows = np.concatenate(out_r)
    syms = np.concatenate(out_s)
    return rows, syms, np.full(len(rows), sgn, dtype=np.int64)


def _complete(c: int, d: int) -> tuple[int, int]:
    """(a, b) with a·d − b·c = 1 (c, d coprime integers)."""
    if c == 0:
        return (d, 0) if abs(d) == 1 else _raise(c, d)
    g, s, t = _egcd(d, c)  # s d + t c = 1
    if g != 1:
        _raise(c, d)
    return s, -t


def _raise(c, d):
    raise ValueError(f"({c}, {d}) is not a primitive pair")


def _egcd(a: int, b: int) -> tuple[int, int, int]:
    x0, y0, x1, y1 = 1, 0, 0, 1
    while b:
        q, a, b = a // b, b, a % b
        x0, x1 = x1, x0 - q * x1
        y0, y1 = y1, y0 - q * y1
    if a < 0:
        a, x0, y0 = -a, -x0, -y0
    return a, x0, y0


def _reduce(cusp: tuple[int, int]) -> tuple[int, int]:
    u, v = cusp
    g = gcd(u, v)
    return (u // g, v // g)


def _act(poly: list, h: tuple[int, int, int, int], w: int) -> list:
    """Coefficients of P|h for P given by coefficients of X^i Y^(w−i)."""
    A = poly_action(*h, w)
    out = [0] * (w + 1)
    for i, pi in enumerate(poly):
        if pi:
            for m, coef in enumerate(A[i]):
                if coef:
                    out[m] += pi * coef
    return out


def clear_caches() -> None:
    """Forget every cached space (the batch builder calls this between units)."""
    from builder.symbols import charspace  # it imports this module

    cuspidal_space.cache_clear()
    p1.cache_clear()
    charspace._symbol_hecke_terms.cache_clear()
    charspace._symbol_hecke_block.cache_clear()


@lru_cache(maxsize=32, typed=True)  # typed: 11.0 or True must not hit a cached int
def cuspidal_space(N: int, k: int, sign: int = 1) -> SymbolSpace:
    """The (cached) symbol space of level N, weight k, sign; see SymbolSpace."""
    return SymbolSpace(check_level(N), check_weight(k), check_sign(sign))
