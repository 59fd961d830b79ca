"""The symbol space M_k(Γ0(N), χ) with a sign, modulo a prime ℓ ≡ 1 (mod order χ).

Manin symbols with character ([St] §8.3–8.5): the symbols [P, (c, d)] of Γ1(N) modulo
γ·x = χ(d_γ)·x for γ ∈ Γ0(N), i.e. [P, (λc, λd)] = χ(λ)·[P, (c, d)] for λ ∈ (Z/NZ)^×; so a
symbol is a monomial times a point of P¹(Z/NZ), and a pair (c, d) is χ(λ) times the
symbol of its representative (``P1.index_scalar``).  The relations are those of
builder.symbols.manin — x + xσ = 0, x + xτ + xτ² = 0, x = s·x* with
x* = [P(−X, Y), (−c, d)] — each term carrying the χ(λ) of its point.

Everything is over F_ℓ, χ reduced by builder.characters (ζ_m ↦ ω_ℓ); ``conj`` = a uses
χ^a, so the Galois conjugate spaces come from the same ℓ.  The 2-term and star relations
identify symbols in pairs up to a scalar of F_ℓ^×: a weighted union–find (a cycle whose
scalar is not 1 kills its class); the 3-term relations are eliminated sparsely mod ℓ.
Dimensions can only grow modulo ℓ (ranks drop), so a subspace whose dimension equals the
exact one given by a dimension formula is the reduction of the exact subspace: the
builder.forms.charforms pipeline certifies its spaces that way.
"""

from __future__ import annotations

from functools import cached_property
from math import gcd

import numpy as np

from builder.characters import CharacterOrbit
from builder.linalg_modp import matmul_mod
from builder.symbols.heilbronn import hecke_matrices
from builder.symbols.manin import poly_action
from builder.symbols.p1 import P1, p1


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


class _WeightedUnionFind:
    """x = mult·parent(x) over F_ℓ; roots may be forced to zero."""

    def __init__(self, n: int, ell: int) -> None:
        self.parent = list(range(n))
        self.mult = [1] * n
        self.zero = [False] * n
        self.ell = ell

    def find(self, x: int) -> tuple[int, int]:
        ell = self.ell
        path = []
        m = 1
        while self.parent[x] != x:
            path.append(x)
            m = m * self.mult[x] % ell
            x = self.parent[x]
        root = x
        acc = m
        for y in path:  # compress: y = acc·root, then step along
            ym = acc
            acc = acc * pow(self.mult[y], -1, ell) % ell
            self.parent[y] = root
            self.mult[y] = ym
        return root, m

    def union(self, x: int, y: int, s: int) -> None:
        """Impose x = s·y."""
        ell = self.ell
        rx, a = self.find(x)
        ry, b = self.find(y)
        # x = a·rx, y = b·ry: rx = s·b·a⁻¹·ry
        t = s * b % ell * pow(a, -1, ell) % ell
        if rx == ry:
            if t != 1:
                self.zero[rx] = True
            return
        self.parent[rx] = ry
        self.mult[rx] = t
        self.zero[ry] = self.zero[ry] or self.zero[rx]


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
        w, psi, ell = self.w, self.psi, self.ell
        c, d = self.P1.c, self.P1.d
        sig_j, sig_x = self._lookup(d, -c)
        eta_j, eta_x = self._lookup(-c, d)
        uf = _WeightedUnionFind(self.nsym, ell)
        sig_j, sig_x = sig_j.tolist(), sig_x.tolist()
        eta_j, eta_x = eta_j.tolist(), eta_x.tolist()
        for i in range(w + 1):
            si = -1 if i % 2 else 1
            for j in range(psi):
                x = i * psi + j
                # x + xσ = 0, xσ = (−1)^i χ(λ) [X^(w−i) Y^i, rep]: x = −(−1)^i χ(λ)·x'
                uf.union(x, (w - i) * psi + sig_j[j], (-si * sig_x[j]) % ell)
                if self.sign:
                    # x = s·x*, x* = (−1)^i χ(λ) [X^i Y^(w−i), rep(−c, d)]
                    uf.union(x, i * psi + eta_j[j], (self.sign * si * eta_x[j]) % ell)
        root_of = [0] * self.nsym
        mult = [0] * self.nsym
        roots: dict[int, int] = {}
        for x in range(self.nsym):
            r, m = uf.find(x)
            if uf.zero[r]:
                root_of[x] = -1
                continue
            if r not in roots:
                roots[r] = len(roots)
            root_of[x], mult[x] = roots[r], m
        ngen = len(roots)
        gen_symbol = [0] * ngen
        for r, g in roots.items():
            gen_symbol[g] = r
        rels = self._three_term(root_of, mult)
        pivots = _eliminate_mod(rels, ell)
        free_gens = [g for g in range(ngen) if g not in pivots]
        pos = {g: t for t, g in enumerate(free_gens)}
        gen_expr: list[dict[int, int]] = []
        for g in range(ngen):
            gen_expr.append({pos[g]: 1} if g in pos else {pos[h]: v for h, v in
                                                          pivots[g].items()})
        self.free = [gen_symbol[g] for g in free_gens]
        indptr = [0]
        gens: list[int] = []
        vals: list[int] = []
        for x in range(self.nsym):
            g = root_of[x]
            if g >= 0:
                m = mult[x]
                for t, v in gen_expr[g].items():
                    gens.append(t)
                    vals.append(v * m % ell)
            indptr.append(len(gens))
        self._csr = (np.array(indptr, dtype=np.int64), np.array(gens, dtype=np.int64),
                     np.array(vals, dtype=np.int64))

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
        ell, psi, w = self.ell, self.psi, self.w
        a, b, c, d = (np.asarray(t, dtype=np.int64) for t in hecke_matrices(n))
        H = len(a)
        A = poly_action_mod(a, b, c, d, w, ell) if w else None
        out = np.zeros((len(xs), max(self.dim, 1)))
        step = max(1, (1 << 21) // max(H, 1))
        for s0 in range(0, len(xs), step):
            chunk = xs[s0:s0 + step]
            I, J = np.divmod(chunk, psi)
            u, v = self.P1.c[J][:, None], self.P1.d[J][:, None]
            t, chi = self._lookup((u * a + v * c).ravel(), (u * b + v * d).ravel())
            gens = np.repeat(np.arange(len(chunk)), H)
            ok = t >= 0
            if w == 0:
                rows, syms, coefs = gens[ok], t[ok], chi[ok]
            else:
                hh = np.tile(np.arange(H), len(chunk))[ok]
                ii, t, chi, g = np.repeat(I, H)[ok], t[ok], chi[ok], gens[ok]
                parts = []
                for m in range(w + 1):
                    cm = A[hh, ii, m]
                    sel = cm != 0
                    parts.append((g[sel], m * psi + t[sel], cm[sel] * chi[sel] % ell))
                rows, syms, coefs = (np.concatenate(z) for z in zip(*parts, strict=True))
            if len(rows):
                out[s0:s0 + len(chunk)] = self._accumulate(rows, syms, coefs, len(chunk))
        return out[:, : self.dim]

    def hecke_of_symbol(self, x: int, ns: list[int]) -> np.ndarray:
        """Rows T_n(x) for one Manin symbol x and several n (one Heilbronn sum each)."""
        return np.concatenate([self.images(np.array([x], dtype=np.int64), n) for n in ns])

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
        γ ∈ Γ0(N) with lower right entry δ maps the key (v, u) to (δv, δ⁻¹u).  A weighted
        union–find over the keys under generators of (Z/NZ)^× and the sign gives the
        classes and the scalars; a class whose relations are inconsistent (χ nontrivial on
        its stabiliser) is zero.
        """
        N, ell, w = self.N, self.ell, self.w
        g_of = np.array([gcd(v, N) if v else N for v in range(N)], dtype=np.int64)
        off = np.concatenate([[0], np.cumsum(g_of)])
        uf = _WeightedUnionFind(int(off[-1]), ell)
        for dd in unit_generators(N):
            dinv = pow(dd, -1, N) if N > 1 else 0
            chi = int(self.values[dd % N]) if N > 1 else 1
            for v in range(N):
                g = int(g_of[v])
                v2 = dd * v % N
                for u in range(g):
                    if gcd(u, g) == 1:
                        # e(δ·K) = χ(δ)·e(K)
                        uf.union(int(off[v2]) + dinv * u % g, int(off[v]) + u, chi)
        if self.sign:
            for v in range(N):
                g = int(g_of[v])
                for u in range(g):
                    if gcd(u, g) == 1:
                        uf.union(int(off[v]) + u, int(off[v]) + (-u) % g, self.sign % ell)
        classes: dict[int, int] = {}
        rows = np.zeros((self.dim, 0))
        entries: list[tuple[int, int, int]] = []
        free = np.array(self.free, dtype=np.int64)
        I, J = np.divmod(free, self.psi)
        c, d = self.P1.c[J], self.P1.d[J]
        from builder.symbols.space import _complete_vec

        a, b = _complete_vec(c, d)
        for r in range(len(free)):
            terms = []
            if I[r] == w:
                terms.append((int(a[r]), int(c[r]), 1))
            if I[r] == 0:
                terms.append((int(b[r]), int(d[r]), ell - 1))
            for u, v, sgn in terms:
                vv = v % N
                g = int(g_of[vv])
                root, m = uf.find(int(off[vv]) + u % g)
                if uf.zero[root]:
                    continue
                col = classes.setdefault(root, len(classes))
                entries.append((r, col, sgn * m % ell))
        rows = np.zeros((self.dim, len(classes)))
        for r, col, val in entries:
            rows[r, col] = (rows[r, col] + val) % ell
        return rows

    # -- modular symbols and degeneracy maps ----------------------------------------------------
    def symbol_terms(self, poly: list[int], alpha: tuple[int, int],
                     beta: tuple[int, int]) -> list[tuple[int, int]]:
        """P(X, Y){α, β} as (Manin symbol index, coefficient mod ℓ) pairs: convergents of the
        continued fractions of α and β ([Ma], [Cr] §2.1), each symbol with its χ(λ)."""
        out: list[tuple[int, int]] = []
        self._from_zero(poly, beta, 1, out)
        self._from_zero(poly, alpha, -1, out)
        return out

    def _from_zero(self, poly: list[int], cusp: tuple[int, int], sgn: int, out: list) -> None:
        from builder.symbols.space import convergents

        u, v = cusp
        if v < 0:
            u, v = -u, -v
        if v == 0:
            self._poly_terms(poly, (1, 0, 0, 1), sgn, out)
            return
        gg = gcd(u, v)
        cv = convergents(u // gg, v // gg)
        for j in range(1, len(cv)):
            (p0, q0), (p1, q1) = cv[j - 1], cv[j]
            mat = (p1, p0, q1, q0) if p1 * q0 - p0 * q1 == 1 else (-p1, p0, -q1, q0)
            self._poly_terms(poly, mat, sgn, out)

    def _poly_terms(self, poly: list[int], g: tuple[int, int, int, int], sgn: int,
                    out: list) -> None:
        a, b, c, d = g
        j, lam = self.P1.index_scalar(np.array([c]), np.array([d]))
        if j[0] < 0:
            return
        chi = int(self.values[int(lam[0])]) * sgn
        A = poly_action(a, b, c, d, self.w)
        for i, pi in enumerate(poly):
            if pi:
                for m, coef in enumerate(A[i]):
                    if coef:
                        out.append((m * self.psi + int(j[0]), pi * coef * chi % self.ell))

    def degeneracy(self, target: CharSpace, t: int) -> np.ndarray:
        """The degeneracy map to level M = target.N induced by z ↦ t z (t·M | N), modulo ℓ:
        x = P{α, β} ↦ (P|[[1, 0], [0, t]]){tα, tβ} ([St] §8.6; the conjugate of Γ0(N) by
        diag(t, 1) keeps the lower right entries, so χ restricted to M is respected)."""
        from builder.symbols.space import _act, _complete, _reduce

        if self.N % (t * target.N):
            raise ValueError(f"degeneracy map needs t·M | N, got t={t}, M={target.N}")
        rows, syms, coefs = [], [], []
        for r, x in enumerate(self.free):
            i, j = divmod(x, self.psi)
            c, d = int(self.P1.c[j]), int(self.P1.d[j])
            a, b = _complete(c, d)
            poly = [0] * (self.w + 1)
            poly[i] = 1
            p2 = _act(_act(poly, (d, -b, -c, a), self.w), (1, 0, 0, t), self.w)
            for sym, cf in target.symbol_terms(p2, _reduce((t * b, d)), _reduce((t * a, c))):
                rows.append(r)
                syms.append(sym)
                coefs.append(cf % self.ell)
        if not rows:
            return np.zeros((self.dim, target.dim))
        return target._accumulate(np.array(rows, dtype=np.int64), np.array(syms, dtype=np.int64),
                                  np.array(coefs, dtype=np.int64), self.dim)


def unit_generators(N: int) -> list[int]:
    """A generating set of (Z/NZ)^× (greedy: each generator outside the subgroup so far)."""
    if N <= 2:
        return [1]
    units = [x for x in range(1, N) if gcd(x, N) == 1]
    group = {1}
    gens = []
    for x in units:
        if x in group:
            continue
        gens.append(x)
        new = set(group)
        frontier = list(group)
        while frontier:
            y = frontier.pop()
            for gq in gens:
                z = y * gq % N
                if z not in new:
                    new.add(z)
                    frontier.append(z)
        group = new
        if len(group) == len(units):
            break
    return gens


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
