"""The symbol space M_k(Γ0(N), χ) with a sign, modulo a prime ℓ ≡ 1 (mod order χ).

Manin symbols with character ([St] §8.3–8.5): the symbols [P, (c, d)] of Γ1(N) modulo
γ·x = χ(d_γ)·x for γ ∈ Γ0(N), i.e. [P, (λc, λd)] = χ(λ)·[P, (c, d)] for λ ∈ (Z/NZ)^×; so a
symbol is a monomial times a point of P¹(Z/NZ), and a pair (c, d) is χ(λ) times the
symbol of its representative (``P1.index_scalar``).  The relations are those of
builder.symbols.manin — x + xσ = 0, x + xτ + xτ² = 0, x = s·x* with
x* = [P(−X, Y), (−c, d)] — each term carrying the χ(λ) of its point.

Everything is over F_ℓ, χ reduced by builder.characters (ζ_m ↦ ω_ℓ); ``conj`` = a uses
χ^a, so the Galois conjugate spaces come from the same ℓ.  The 2-term and star relations
identify symbols up to a scalar of F_ℓ^×: the classes are the orbits of the group of
order ≤ 4 that σ and η generate, found for all symbols at once (a cycle whose scalar is
not 1 kills its class); the 3-term relations are eliminated sparsely mod ℓ.  What does
not depend on χ or ℓ (the Manin symbols of degeneracy images) is cached across the
conjugates and primes of a unit.
Dimensions can only grow modulo ℓ (ranks drop), so a subspace whose dimension equals the
exact one given by a dimension formula is the reduction of the exact subspace: the
builder.forms.charforms pipeline certifies its spaces that way.
"""

from __future__ import annotations

from functools import cached_property, lru_cache
from math import gcd

import numpy as np

from builder.characters import CharacterOrbit
from builder.linalg_modp import matmul_mod
from builder.symbols.heilbronn import (
    hecke_matrices,
    heilbronn_matrices_any_order,
    heilbronn_points,
)
from builder.symbols.manin import poly_action
from builder.symbols.p1 import P1, p1
from builder.symbols.space import poly_action_row

DENSE_COORDS_MAX = 8_000_000  # nsym·dim floats (64 MB) for the dense coordinate matrix


def poly_action_mod(a: np.ndarray, b: np.ndarray, c: np.ndarray, d: np.ndarray, w: int,
                    ell: int) -> np.ndarray:
    """builder.symbols.manin.poly_action for arrays of matrices, modulo ℓ < 2^21:
    A[h, i, m] = coefficient of X^m Y^(w−m) in (a_h X + b_h Y)^i (c_h X + d_h Y)^(w−i)."""
    a, b, c, d = (np.mod(x, ell) for x in (a, b, c, d))

    def powers(x: np.ndarray, y: np.ndarray) -> list[np.ndarray]:
        out = [np.ones((len(x), 1), dtype=np.int64)]
        for _ in range(w):
            prev = out[-1]
            nxt = np.zeros((len(x), prev.shape[1] + 1), dtype=np.int64)
            nxt[:, 1:] += prev * x[:, None]  # times x·X
            nxt[:, :-1] += prev * y[:, None]  # times y·Y
            out.append(np.mod(nxt, ell))
        return out

    P, Q = powers(a, b), powers(c, d)
    A = np.zeros((len(a), w + 1, w + 1), dtype=np.int64)
    for i in range(w + 1):
        for s in range(i + 1):
            for t in range(w - i + 1):
                A[:, i, s + t] = np.mod(A[:, i, s + t] + P[i][:, s] * Q[w - i][:, t], ell)
    return A


def char_space(N: int, k: int, chi: CharacterOrbit, sign: int, ell: int,
               conj: int = 1) -> CharSpace:
    """M_k(Γ0(N), χ^conj) with sign, modulo ℓ (χ a Galois-orbit representative)."""
    if chi.modulus != N:
        raise ValueError(f"character modulo {chi.modulus} for level {N}")
    if (ell - 1) % chi.order:
        raise ValueError(f"ℓ = {ell} is not ≡ 1 modulo the order {chi.order}")
    return CharSpace(N, k, chi.values_mod(ell, conj), sign, ell)


def induced_values(values: np.ndarray, N: int, M: int) -> np.ndarray:
    """χ_M(x) for x mod M: the character mod M with the same primitive character as χ mod N
    (needs cond χ | M | N): χ_M(x) = χ(y) for any y ≡ x (mod M) prime to N."""
    out = np.zeros(M, dtype=np.int64)
    for x in range(M):
        if gcd(x, M) != 1:
            continue
        y = x if M > 1 else 1
        while gcd(y, N) != 1:
            y += M
        out[x] = values[y % N]
    return out


class CharSpace:
    """M_k(Γ0(N), χ) with sign s, modulo ℓ: presentation and operators.

    ``free``: symbol indices (i·ψ + j) of the free generators; ``coords`` in CSR form
    (indptr, gen, val) with values in [0, ℓ).  Operators are dense float arrays of
    residues acting on row vectors (rows = images of the free generators).
    """

    def __init__(self, N: int, k: int, values: np.ndarray, sign: int, ell: int) -> None:
        """``values``: χ(n) modulo ℓ for n = 0..N−1 (0 where gcd(n, N) > 1)."""
        self.N, self.k, self.w, self.sign, self.ell = N, k, k - 2, sign, ell
        self.values = np.asarray(values, dtype=np.int64)
        self.P1: P1 = p1(N)
        self.psi = len(self.P1)
        self.nsym = (self.w + 1) * self.psi
        odd = N > 2 and int(self.values[N - 1]) != 1
        if (k % 2 == 1) != odd:
            self.free: list[int] = []  # χ(−1) ≠ (−1)^k: −I kills everything
            self._csr = (np.zeros(self.nsym + 1, dtype=np.int64), np.zeros(0, dtype=np.int64),
                         np.zeros(0, dtype=np.int64))
            return
        self._build()

    @property
    def dim(self) -> int:
        return len(self.free)

    # -- the presentation -------------------------------------------------------------------
    def _lookup(self, c: np.ndarray, d: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Point index and χ(λ) mod ℓ for pairs (c, d) (index −1 where not in P¹)."""
        j, lam = self.P1.index_scalar(c, d)
        return j, np.where(j >= 0, self.values[lam], 0)

    def _build(self) -> None:
        ell = self.ell
        root_of, mult, gen_symbol = self._two_term_classes()
        ngen = len(gen_symbol)
        rels = self._three_term(root_of, mult)
        pivots = _eliminate_mod(rels, ell)
        free_gens = [g for g in range(ngen) if g not in pivots]
        pos = {g: t for t, g in enumerate(free_gens)}
        glen = np.zeros(ngen + 1, dtype=np.int64)  # generator g's expression, CSR
        gidx: list[int] = []
        gval: list[int] = []
        for g in range(ngen):
            if g in pos:
                gidx.append(pos[g])
                gval.append(1)
                glen[g + 1] = 1
            else:
                expr = pivots[g]
                gidx.extend(pos[h] for h in expr)
                gval.extend(expr.values())
                glen[g + 1] = len(expr)
        self.free = [gen_symbol[g] for g in free_gens]
        gptr = np.cumsum(np.append(glen, 0))  # one spare entry: no generators at all
        roots = np.asarray(root_of, dtype=np.int64)
        alive = roots >= 0
        r = np.where(alive, roots, 0)
        cnt = np.where(alive, gptr[r + 1] - gptr[r], 0)
        indptr = np.concatenate([[0], np.cumsum(cnt)])
        rep = np.repeat(np.arange(self.nsym), cnt)
        at = np.repeat(gptr[r] - indptr[:-1], cnt) + np.arange(int(indptr[-1]))
        gidx_a = np.asarray(gidx, dtype=np.int64)
        gval_a = np.asarray(gval, dtype=np.int64)
        vals = gval_a[at] * np.asarray(mult, dtype=np.int64)[rep] % ell
        self._csr = (indptr.astype(np.int64), gidx_a[at], vals)

    def _two_term_classes(self) -> tuple[list[int], list[int], list[int]]:
        """The two-term relations: x + xσ = 0 and (sign s) x = s·x*, as x = m·y with
        xσ = (−1)^i χ(λ)[X^(w−i) Y^i, rep] and x* = (−1)^i χ(λ)[X^i Y^(w−i), rep(−c, d)]
        ([St] §8.3 with character).  σ and η generate a group of order ≤ 4 on the symbol
        indices, so the class of x is {x, σx, ηx, σηx}: its generator is the smallest index,
        x = mult·generator along the paths from x, and the class is zero iff the scalars
        are inconsistent somewhere on it (σ² or η² ≠ 1, ση ≠ ησ, or a stabiliser with a
        scalar ≠ 1) — what a weighted union–find would find, for all x at once.
        Returns (generator number or −1 per symbol, mult per symbol, generator symbols)."""
        w, psi, ell, n = self.w, self.psi, self.ell, self.nsym
        c, d = self.P1.c, self.P1.d
        x = np.arange(n, dtype=np.int64)
        i, j = np.divmod(x, psi)
        si = np.where(i % 2 == 1, -1, 1)
        sig_j, sig_x = self._lookup(d, -c)
        S = (w - i) * psi + sig_j[j]
        ms = np.mod(-si * sig_x[j], ell)  # x = ms·S(x)
        if self.sign:
            eta_j, eta_x = self._lookup(-c, d)
            E = i * psi + eta_j[j]
            me = np.mod(self.sign * si * eta_x[j], ell)  # x = me·E(x)
        else:
            E, me = x, np.ones(n, dtype=np.int64)
        SE = S[E]
        mse = me * ms[E] % ell  # x = me·ms(E x)·S(E x)
        fail = (ms * ms[S] % ell != 1) | (me * me[E] % ell != 1)
        fail |= mse != ms * me[S] % ell  # the two paths to σηx agree
        for img, m in ((S, ms), (E, me), (SE, mse)):
            fail |= (img == x) & (m != 1)
        cand = np.stack([x, S, E, SE])
        coef = np.stack([np.ones(n, dtype=np.int64), ms, me, mse])
        k = np.argmin(cand, axis=0)
        rep = cand[k, x]
        m = coef[k, x]
        bad = np.zeros(n, dtype=bool)
        np.logical_or.at(bad, rep, fail)
        zero = bad[rep]
        gens = np.unique(rep[~zero])
        number = np.full(n, -1, dtype=np.int64)
        number[gens] = np.arange(len(gens))
        root_of = np.where(zero, -1, number[rep])
        return root_of.tolist(), np.where(zero, 0, m).tolist(), gens.tolist()

    def _three_term(self, root_of: list[int], mult: list[int]) -> list[dict[int, int]]:
        """x + xτ + xτ² = 0 for one base point per τ-orbit and every monomial."""
        w, psi, ell = self.w, self.psi, self.ell
        c, d = self.P1.c, self.P1.d
        tj, tx = self._lookup(d, -c - d)  # (c, d)τ, τ = [[0, −1], [1, −1]]
        t2j, t2x = self._lookup(-c - d, c)  # (c, d)τ²
        tj, tx, t2j, t2x = tj.tolist(), tx.tolist(), t2j.tolist(), t2x.tolist()
        A1 = poly_action(0, -1, 1, -1, w)
        A2 = poly_action(-1, 1, -1, 0, w)
        seen = bytearray(psi)
        rels = []
        for j in range(psi):
            if seen[j]:
                continue
            seen[j] = seen[tj[j]] = seen[t2j[j]] = 1
            for i in range(w + 1):
                terms = [(i * psi + j, 1)]
                terms += [(m * psi + tj[j], A1[i][m] * tx[j]) for m in range(w + 1) if A1[i][m]]
                terms += [(m * psi + t2j[j], A2[i][m] * t2x[j]) for m in range(w + 1)
                          if A2[i][m]]
                rel: dict[int, int] = {}
                for x, coef in terms:
                    g = root_of[x]
                    if g < 0:
                        continue
                    v = (rel.get(g, 0) + coef * mult[x]) % ell
                    if v:
                        rel[g] = v
                    else:
                        rel.pop(g, None)
                if rel:
                    rels.append(rel)
        return rels

    # -- coordinates and operators (mod ℓ) -------------------------------------------------------
    @property
    def coord_csr(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        return self._csr

    def _accumulate(self, rows: np.ndarray, syms: np.ndarray, coef: np.ndarray,
                    nrows: int) -> np.ndarray:
        """Dense (nrows × dim) residues: row rows[t] += coef[t]·coords(syms[t]) mod ℓ."""
        indptr, gen, val = self._csr
        ell = self.ell
        out = np.zeros(nrows * max(self.dim, 1))
        cnt = indptr[syms + 1] - indptr[syms]
        rep = np.repeat(np.arange(len(syms)), cnt)
        start = np.repeat(indptr[syms] - np.cumsum(cnt) + cnt, cnt)
        pos = start + np.arange(len(rep))
        if len(pos):
            v = np.mod(val[pos] * np.mod(coef[rep], ell), ell).astype(np.float64)
            flat = rows[rep] * self.dim + gen[pos]
            # chunks keep every partial sum below 2^53
            step = max(1, int((1 << 52) // ell))
            for s0 in range(0, len(v), step):
                out += np.bincount(flat[s0:s0 + step], weights=v[s0:s0 + step],
                                   minlength=len(out))
                np.mod(out, ell, out=out)
        return out[: nrows * self.dim].reshape(nrows, self.dim)

    def hecke(self, n: int) -> np.ndarray:
        """T_n (Merel's formula [Me] with the character's scalars), dim × dim mod ℓ."""
        return self._hecke_cached(n)

    @cached_property
    def _hecke_cache(self) -> dict:
        return {}

    def _hecke_cached(self, n: int) -> np.ndarray:
        if n not in self._hecke_cache:
            self._hecke_cache[n] = self.images(np.array(self.free, dtype=np.int64), n)
        return self._hecke_cache[n]

    def images(self, xs: np.ndarray, n: int) -> np.ndarray:
        """Rows T_n(x) (free coordinates mod ℓ) for the Manin symbols xs: every pair
        (symbol, Heilbronn matrix) at once, in chunks that bound the memory."""
        mats = hecke_matrices(n)
        out = np.zeros((len(xs), max(self.dim, 1)))
        step = max(1, (1 << 21) // max(len(mats[0]), 1))
        for s0 in range(0, len(xs), step):
            chunk = xs[s0:s0 + step]
            rows, syms, coefs = self._terms(chunk, mats)
            if len(rows):
                out[s0:s0 + len(chunk)] = self._accumulate(rows, syms, coefs, len(chunk))
        return out[:, : self.dim]

    def _terms(self, xs: np.ndarray, mats) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """T_n(xs[r]) = Σ coef·[symbol] as (r, symbol, coef mod ℓ) triples, for the
        Heilbronn set ``mats`` of T_n (Merel [Me], with χ(λ) for the P¹ lookups)."""
        ell, psi, w = self.ell, self.psi, self.w
        a, b, c, d = (np.asarray(t, dtype=np.int64) for t in mats)
        H = len(a)
        I, J = np.divmod(xs, psi)
        u, v = self.P1.c[J][:, None], self.P1.d[J][:, None]
        t, chi = self._lookup((u * a + v * c).ravel(), (u * b + v * d).ravel())
        gens = np.repeat(np.arange(len(xs)), H)
        ok = t >= 0
        if w == 0:
            return gens[ok], t[ok], chi[ok]
        levels = np.unique(I)
        if len(levels) == 1:  # one monomial X^i Y^(w−i): only row i of the action
            A = poly_action_row(a, b, c, d, int(levels[0]), w, ell)[:, None, :]
            I = np.zeros_like(I)
        else:
            A = poly_action_mod(a, b, c, d, w, ell)
        hh = np.tile(np.arange(H), len(xs))[ok]
        ii, t, chi, g = np.repeat(I, H)[ok], t[ok], chi[ok], gens[ok]
        parts = []
        for m in range(w + 1):
            cm = A[hh, ii, m]
            sel = cm != 0
            parts.append((g[sel], m * psi + t[sel], cm[sel] * chi[sel] % ell))
        return tuple(np.concatenate(z) for z in zip(*parts, strict=True))

    def hecke_of_symbol(self, x: int, ns: list[int]) -> np.ndarray:
        """Rows T_n(x) for one Manin symbol x and several n.

        Each T_n(x) is first a vector over the Manin symbols (one bincount of its
        Heilbronn terms), and all of them are then expressed in the free generators by one
        product with the dense coordinate matrix: the cost is the number of terms plus
        nsym·dim, not terms × the length of each symbol's expression."""
        if self.nsym * self.dim > DENSE_COORDS_MAX:
            return np.concatenate([self.images(np.array([x], dtype=np.int64), n)
                                   for n in ns])
        ell = self.ell
        exact = (2 * max(ns) + 1) ** (self.k - 2) < (1 << 62)  # int64 polynomial action
        idx, coefs, lam = _symbol_hecke_block(self.N, self.k, 0 if exact else ell, x,
                                              tuple(ns))
        weights = (self._float_values[lam] if coefs is None
                   else coefs % ell * self.values[lam] % ell)
        W = _bincount_mod(idx, weights, len(ns) * self.nsym, ell)
        return np.mod(matmul_mod(W.reshape(len(ns), self.nsym), self._dense_coords, ell), ell)

    @cached_property
    def _float_values(self) -> np.ndarray:
        return self.values.astype(np.float64)

    @cached_property
    def _dense_coords(self) -> np.ndarray:
        """The coordinates of every Manin symbol (nsym × dim, residues mod ℓ)."""
        indptr, gen, val = self._csr
        out = np.zeros((self.nsym, self.dim))
        rows = np.repeat(np.arange(self.nsym), np.diff(indptr))
        np.add.at(out, (rows, gen), val.astype(np.float64))
        return np.mod(out, self.ell)

    def coords_row(self, x: int) -> np.ndarray:
        indptr, gen, val = self._csr
        row = np.zeros(self.dim)
        for t in range(indptr[x], indptr[x + 1]):
            row[gen[t]] = (row[gen[t]] + val[t]) % self.ell
        return row

    def compose(self, A: np.ndarray, B: np.ndarray) -> np.ndarray:
        return matmul_mod(A, B, self.ell)



    # -- the boundary map ------------------------------------------------------------------------
    def boundary(self) -> np.ndarray:
        """The boundary map modulo ℓ (dim × number of surviving boundary classes).

        [St] §8.4 with character: the boundary of [X^i Y^(w−i), g], g = [[a, b], [c, d]], is
        [i = w]·e(a, c) − [i = 0]·e(b, d), where e(u, v) is the boundary symbol of the
        column (u, v); e(γ(u, v)) = χ(d_γ)·e(u, v) for γ ∈ Γ0(N), and e(u, v) = s·e(−u, v)
        for the sign s.  Columns up to Γ1(N) are keys (v mod N, u mod gcd(v, N)) (two
        columns are Γ1(N)-equivalent iff v' ≡ v mod N and u' ≡ u mod gcd(v, N), [St] §3);
        the classes of the keys and their scalars come from ``_boundary_classes``.
        """
        ell, w = self.ell, self.w
        free = np.array(self.free, dtype=np.int64)
        I, J = np.divmod(free, self.psi)
        c, d = self.P1.c[J], self.P1.d[J]
        from builder.symbols.space import _complete_vec

        a, b = _complete_vec(c, d)
        top, bottom = I == w, I == 0
        rows = np.concatenate([np.nonzero(top)[0], np.nonzero(bottom)[0]])
        U = np.concatenate([a[top], b[bottom]])
        V = np.concatenate([c[top], d[bottom]])
        sgn = np.concatenate([np.ones(int(top.sum()), dtype=np.int64),
                              np.full(int(bottom.sum()), ell - 1, dtype=np.int64)])
        root, mult = self._boundary_classes(U, V)
        live = root >= 0
        roots, col = np.unique(root[live], return_inverse=True)
        out = np.zeros((self.dim, len(roots)))
        np.add.at(out, (rows[live], col), (sgn[live] * mult[live] % ell).astype(np.float64))
        return np.mod(out, ell)

    def _boundary_classes(self, U: np.ndarray, V: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """For boundary symbols e(u, v) (u, v coprime): (class, m) with e(u, v) = m·e(class),
        class = −1 where the class is zero.  Keys up to Γ1(N) are (v mod N, u mod gcd(v, N))
        and γ ∈ Γ0(N) with lower right entry δ maps (v, u) to (δv, δ⁻¹u) with e(γK) =
        χ(δ)e(K) (the sign: e(v, u) = s·e(v, −u)), so a class is an orbit of (Z/NZ)^× × {±1}
        — enumerated for all keys at once — its representative the smallest key, and it is
        zero iff a stabiliser element has a scalar ≠ 1 ([St] §8.4)."""
        N = self.N
        units, inv = _units_and_inverses(N)
        step = max(1, (1 << 20) // len(units))  # bounded memory: keys × units per chunk
        parts = [self._classes_chunk(U[i:i + step], V[i:i + step], units, inv)
                 for i in range(0, len(U), step)]
        if not parts:
            return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
        return (np.concatenate([r for r, _ in parts]), np.concatenate([m for _, m in parts]))

    def _classes_chunk(self, U: np.ndarray, V: np.ndarray, units: np.ndarray,
                       inv: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        N, ell = self.N, self.ell
        vv = np.mod(V, N)
        g = np.where(vv == 0, N, np.gcd(vv, N))
        u0 = np.mod(U, g)
        key0 = vv * N + u0  # injective: u < g ≤ N
        n = len(U)
        best = np.full(n, np.iinfo(np.int64).max)
        mult = np.ones(n, dtype=np.int64)
        zero = np.zeros(n, dtype=bool)
        for e in ([1, -1] if self.sign else [1]):
            s = 1 if e == 1 else self.sign % ell
            key = np.mod(vv[:, None] * units[None, :], N) * N + np.mod(
                e * u0[:, None] * inv[None, :], g[:, None])
            # e(image) = χ(δ)·s^[e = −1]·e(K), so e(K) = χ(δ⁻¹)·s^[e = −1]·e(image)
            wt = self.values[units % N] * s % ell
            zero |= np.any((key == key0[:, None]) & (wt[None, :] != 1), axis=1)
            arg = np.argmin(key, axis=1)
            kmin = key[np.arange(n), arg]
            better = kmin < best
            best = np.where(better, kmin, best)
            mult = np.where(better, self.values[inv[arg] % N] * s % ell, mult)
        return np.where(zero, -1, best), mult

    # -- degeneracy maps and Atkin–Lehner operators -----------------------------------------------
    def degeneracy(self, target: CharSpace, t: int) -> np.ndarray:
        """The degeneracy map to level M = target.N induced by z ↦ t z (t·M | N), modulo ℓ:
        x = P{α, β} ↦ (P|[[1, 0], [0, t]]){tα, tβ} ([St] §8.6; the conjugate of Γ0(N) by
        diag(t, 1) keeps the lower right entries, so χ restricted to M is respected).  The
        Manin symbols of each image do not depend on χ or ℓ (``_image_terms``, cached
        across the conjugates and primes of a unit); χ(λ) is applied here."""
        if self.N % (t * target.N):
            raise ValueError(f"degeneracy map needs t·M | N, got t={t}, M={target.N}")
        ell = self.ell
        rows, syms, coefs = [], [], []
        for r, x in enumerate(self.free):
            sym, coef, lam = _image_terms(self.N, self.k, target.N, (t, 0, 0, 1), int(x))
            rows.append(np.full(len(sym), r, dtype=np.int64))
            syms.append(sym)
            coefs.append(np.mod(coef, ell).astype(np.int64) * target.values[lam] % ell)
        if not rows or not sum(len(z) for z in syms):
            return np.zeros((self.dim, target.dim))
        return target._accumulate(np.concatenate(rows), np.concatenate(syms),
                                  np.concatenate(coefs), self.dim)

    def atkin_lehner_of_symbol(self, x: int, Q: int) -> np.ndarray:
        """W_Q(x) (free coordinates mod ℓ) for one Manin symbol x, Q ∥ N with χ trivial
        on (Z/QZ)^×: the integral operator P{α, β} ↦ (P|adj W){Wα, Wβ} for the matrix
        W of ``atkin_li_matrix`` (so W_Q² = χ̄_{N/Q}(Q)·Q^(k−2) on newforms, [AL78])."""
        sym, coef, lam = _image_terms(self.N, self.k, self.N, atkin_li_matrix(self.N, Q),
                                      int(x))
        coefs = np.mod(coef, self.ell).astype(np.int64) * self.values[lam] % self.ell
        return self._accumulate(np.zeros(len(sym), dtype=np.int64), sym, coefs, 1)[0]


def atkin_li_matrix(N: int, Q: int) -> tuple[int, int, int, int]:
    """W = [[Q, 1], [N z, Q w]] of determinant Q (Q ∥ N): upper left Q·x with x ≡ 1 (mod
    N/Q) and y = 1 — Atkin–Li's normalisation ([AL78] §1), which fixes the operator on
    S_k(N, χ) when χ is trivial modulo Q (another x multiplies it by χ_{N/Q}(x)⁻¹)."""
    R = N // Q
    if N % Q or gcd(Q, R) != 1:
        raise ValueError(f"Q must be an exact divisor of N = {N} (Q ∥ N), got {Q}")
    z = -pow(R, -1, Q) if Q > 1 else 0
    w = (1 + R * z) // Q
    return (Q, 1, N * z, Q * w)


@lru_cache(maxsize=1 << 16)
def _image_terms(N: int, k: int, M: int, W: tuple[int, int, int, int],
                 x: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The image of the Manin symbol x of level N under x = P{g0, g∞} ↦
    (P|adj W){Wg0, Wg∞} (W integral, det W > 0), as level-M terms (symbol index, integer
    coefficient, λ) with value coefficient·χ(λ), each path from 0 cut along the
    convergents of its continued fraction ([Ma], [Cr] §2.1).  W = diag(t, 1) is the
    degeneracy map by t; W of ``atkin_li_matrix`` with M = N is W_Q."""
    from builder.symbols.space import _act, _complete, _reduce

    w = k - 2
    A, B, C, D = W
    P = p1(N)
    i, j = divmod(x, len(P))
    c, d = int(P.c[j]), int(P.d[j])
    a, b = _complete(c, d)
    poly = [0] * (w + 1)
    poly[i] = 1
    p2 = _act(_act(poly, (d, -b, -c, a), w), (D, -B, -C, A), w)
    out: list[tuple[int, int, int]] = []
    _from_zero(p1(M), w, p2, _reduce((A * b + B * d, C * b + D * d)),
               _reduce((A * a + B * c, C * a + D * c)), out)
    sym = np.array([o[0] for o in out], dtype=np.int64)
    lam = np.array([o[2] for o in out], dtype=np.int64)
    return sym, np.array([o[1] for o in out], dtype=object), lam


def _from_zero(P: P1, w: int, poly: list[int], alpha: tuple[int, int], beta: tuple[int, int],
               out: list) -> None:
    """P{α, β} = P{0, β} − P{0, α} as (symbol, coefficient, λ) terms appended to out."""
    from builder.symbols.space import convergents

    for (u, v), sgn in ((beta, 1), (alpha, -1)):
        if v < 0:
            u, v = -u, -v
        if v == 0:
            _poly_terms(P, w, poly, (1, 0, 0, 1), sgn, out)
            continue
        gg = gcd(u, v)
        cv = convergents(u // gg, v // gg)
        for j in range(1, len(cv)):
            (p0, q0), (p1_, q1) = cv[j - 1], cv[j]
            mat = (p1_, p0, q1, q0) if p1_ * q0 - p0 * q1 == 1 else (-p1_, p0, -q1, q0)
            _poly_terms(P, w, poly, mat, sgn, out)


def _poly_terms(P: P1, w: int, poly: list[int], g: tuple[int, int, int, int], sgn: int,
                out: list) -> None:
    a, b, c, d = g
    j, lam = P.index_scalar(np.array([c]), np.array([d]))
    if j[0] < 0:
        return
    A = poly_action(a, b, c, d, w)
    psi = len(P)
    for i, pi in enumerate(poly):
        if pi:
            for m, coef in enumerate(A[i]):
                if coef:
                    out.append((m * psi + int(j[0]), pi * coef * sgn, int(lam[0])))


def _eliminate_mod(relations: list[dict[int, int]], ell: int) -> dict[int, dict[int, int]]:
    """Sparse Gaussian elimination modulo ℓ (the mod-ℓ twin of manin._sparse_eliminate):
    {pivot generator: {free generator: coefficient}}, fully reduced; pivots chosen with the
    fewest occurrences (Markowitz-style, common practice)."""
    pivots: dict[int, dict[int, int]] = {}
    occurs: dict[int, set] = {}
    for rel in relations:
        row: dict[int, int] = {}
        for g, v in rel.items():
            if g in pivots:
                for h, u in pivots[g].items():
                    t = (row.get(h, 0) + v * u) % ell
                    if t:
                        row[h] = t
                    else:
                        row.pop(h, None)
            else:
                t = (row.get(g, 0) + v) % ell
                if t:
                    row[g] = t
                else:
                    row.pop(g, None)
        if not row:
            continue
        q = min(row, key=lambda g: (len(occurs.get(g, ())), g))
        cq = row.pop(q)
        inv = pow(cq, -1, ell)
        expr = {h: (-v * inv) % ell for h, v in row.items()}
        for p in occurs.pop(q, set()):
            prow = pivots[p]
            u = prow.pop(q)
            for h, v in expr.items():
                t = (prow.get(h, 0) + u * v) % ell
                if t:
                    prow[h] = t
                else:
                    prow.pop(h, None)
                    occurs[h].discard(p)
                    continue
                occurs.setdefault(h, set()).add(p)
        pivots[q] = expr
        for h in expr:
            occurs.setdefault(h, set()).add(q)
    return pivots


@lru_cache(maxsize=512)  # emptied between units (builder.symbols.space.clear_caches)
def _symbol_hecke_terms(N: int, k: int, ell: int, x: int,
                        n: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """T_n(x) before the character: (symbol, coefficient mod ℓ, λ) with
    T_n(x) = Σ coefficient·χ(λ)·[symbol] (Merel's Heilbronn set, as ``CharSpace._terms``).
    Nothing here depends on χ, so the Galois conjugates χ^a of a unit (which share ℓ)
    and its orbits share one Heilbronn sum per (x, n) instead of one each.  With ℓ = 0
    the coefficients are exact int64 (callers pass 0 when (2n + 1)^(k−2) < 2^62, always in
    weight 2, where they are all 1), so all primes ℓ share the terms too."""
    P = p1(N)
    psi, w = len(P), k - 2
    i, j = divmod(x, psi)
    u, v = int(P.c[j]), int(P.d[j])
    if w == 0:
        t, lam = P.index_scalar(*heilbronn_points(n, u, v, N))
        ok = t >= 0
        return (t[ok].astype(np.int32), np.ones(int(ok.sum()), dtype=np.int32),
                lam[ok].astype(np.int32))
    a, b, c, d = (np.asarray(t, dtype=np.int64) for t in heilbronn_matrices_any_order(n))
    t, lam = P.index_scalar(u * a + v * c, u * b + v * d)
    ok = t >= 0
    t, lam = t[ok], lam[ok]
    A = poly_action_row(a[ok], b[ok], c[ok], d[ok], i, w, ell or None)
    if A.dtype == object:
        raise ValueError(f"T_{n} on weight {k}: the exact action needs ℓ")  # pragma: no cover
    syms, coefs, lams = [], [], []
    for m in range(w + 1):
        sel = A[:, m] != 0
        syms.append(m * psi + t[sel])
        coefs.append(A[sel, m])
        lams.append(lam[sel])
    return (np.concatenate(syms).astype(np.int32), np.concatenate(coefs).astype(np.int64),
            np.concatenate(lams).astype(np.int32))


@lru_cache(maxsize=8)  # emptied between units (builder.symbols.space.clear_caches)
def _symbol_hecke_block(N: int, k: int, ell: int, x: int,
                        ns: tuple[int, ...]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``_symbol_hecke_terms`` for every n in ns, concatenated, the symbol of the r-th
    shifted by r·nsym: one bincount gives all the rows T_n(x).  Weight 2: coefficients
    None (all 1)."""
    nsym = (k - 1) * len(p1(N))
    parts = [_symbol_hecke_terms(N, k, ell, x, n) for n in ns]
    idx = np.concatenate([t[0].astype(np.int64) + r * nsym for r, t in enumerate(parts)])
    coefs = None if k == 2 else np.concatenate([t[1] for t in parts]).astype(np.int64)
    return idx, coefs, np.concatenate([t[2] for t in parts])


def _bincount_mod(idx: np.ndarray, coef: np.ndarray, n: int, ell: int) -> np.ndarray:
    """Σ coef over equal indices, modulo ℓ (float sums kept below 2^52: exact)."""
    out = np.zeros(n)
    step = max(1, int((1 << 52) // ell))
    for s0 in range(0, len(idx), step):
        wt = coef[s0:s0 + step].astype(np.float64, copy=False)
        out += np.bincount(idx[s0:s0 + step], weights=wt, minlength=n)
        np.mod(out, ell, out=out)
    return out


@lru_cache(maxsize=64)
def _units_and_inverses(N: int) -> tuple[np.ndarray, np.ndarray]:
    """(Z/NZ)^× as integers in [1, N) (N ≤ 2: [1]) and their inverses modulo N."""
    if N <= 2:
        return np.array([1], dtype=np.int64), np.array([1], dtype=np.int64)
    units = [x for x in range(1, N) if gcd(x, N) == 1]
    return (np.array(units, dtype=np.int64),
            np.array([pow(x, -1, N) for x in units], dtype=np.int64))
