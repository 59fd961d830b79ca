"""Manin symbols of weight k for Γ0(N) and the presentation of the symbol space.

A Manin symbol is [X^i Y^(w−i), (c:d)] with w = k − 2, 0 ≤ i ≤ w and
(c : d) ∈ P¹(Z/NZ); it stands for g·(X^i Y^(w−i){0, ∞}) with g ∈ SL2(Z) of
bottom row (c, d) ([Ma], [Me], [St] ch. 8).  Symbols carry the right action
[P, g]·h = [P|h, gh], with (P|h)(X, Y) = P(aX + bY, cX + dY) for
h = [[a, b], [c, d]].  The space of modular symbols is the quotient of the free
Q-module on the symbols by

    x + xσ = 0,   x + xτ + xτ² = 0,   (sign s ≠ 0:)  x − s·x* = 0,

σ = [[0, −1], [1, 0]], τ = [[0, −1], [1, −1]], and the star involution
x* = [P(−X, Y), (−c : d)] coming from η = [[−1, 0], [0, 1]] (z ↦ −z̄).  With
this normalisation the winding element {0, ∞} = [Y^w, (0:1)] is in the +1 part.

Method ([Cr] §2.3, [St] §8.3): the two-term and star relations identify
symbols in signed pairs, so a signed union–find reduces them to generators;
only the three-term relations need elimination, done sparsely and exactly over
Q.  The result keeps, for every Manin symbol, its sparse expression in the
basis of free generators.
"""

from __future__ import annotations

from fractions import Fraction
from math import comb

import numpy as np

from builder.arith import check_level, check_sign, check_weight
from builder.symbols.p1 import P1, p1


def poly_action(a: int, b: int, c: int, d: int, w: int) -> list[list[int]]:
    """Matrix A with X^i Y^(w−i) | h = Σ_m A[i][m] X^m Y^(w−m), h = [[a,b],[c,d]].

    (aX + bY)^i (cX + dY)^(w−i), expanded with exact integers.
    """
    rows = []
    for i in range(w + 1):
        first = [comb(i, s) * a**s * b ** (i - s) for s in range(i + 1)]  # X^s
        j = w - i
        second = [comb(j, t) * c**t * d ** (j - t) for t in range(j + 1)]
        row = [0] * (w + 1)
        for s, u in enumerate(first):
            if u:
                for t, v in enumerate(second):
                    if v:
                        row[s + t] += u * v
        rows.append(row)
    return rows


class _SignedUnionFind:
    """Union–find where each element is ± its root, and roots may be zero."""

    def __init__(self, n: int) -> None:
        self.parent = list(range(n))
        self.sign = [1] * n
        self.zero = [False] * n

    def find(self, x: int) -> tuple[int, int]:
        s = 1
        path = []
        while self.parent[x] != x:
            path.append(x)
            s *= self.sign[x]
            x = self.parent[x]
        root = x
        # path compression with the correct accumulated signs
        acc = s
        for y in path:
            ys = acc
            acc *= self.sign[y]
            self.parent[y] = root
            self.sign[y] = ys
        return root, s

    def union(self, x: int, y: int, s: int) -> None:
        """Impose x = s·y."""
        rx, a = self.find(x)
        ry, b = self.find(y)
        t = a * s * b  # rx = t·ry
        if rx == ry:
            if t == -1:
                self.zero[rx] = True
            return
        self.parent[rx] = ry
        self.sign[rx] = t
        self.zero[ry] = self.zero[ry] or self.zero[rx]


class ManinPresentation:
    """The quotient of the Manin symbols of weight k, level N, by the relations.

    After construction:
      * ``nsym`` = (k − 1)·ψ(N) symbols, symbol (i, j) has index i·ψ + j;
      * ``free``: list of symbol indices whose classes form a Q-basis;
      * ``coords(x)``: dict {position in free: Fraction/int} for symbol x;
      * ``dim`` = len(free), the dimension of the symbol space with this sign.

    Odd k with trivial character gives the zero space (−1 ∈ Γ0(N) acts by
    (−1)^k), documented and returned as dim 0.
    """

    def __init__(self, N: int, k: int, sign: int = 0) -> None:
        self.N = check_level(N)
        self.k = check_weight(k)
        self.sign = check_sign(sign)
        self.w = self.k - 2
        self.P1: P1 = p1(self.N)
        self.psi = len(self.P1)
        self.nsym = (self.w + 1) * self.psi
        if self.k % 2 == 1:
            self.free: list[int] = []
            self._expr: list[dict[int, object]] = [{} for _ in range(self.nsym)]
            return
        self._build()

    # -- the point maps under σ, τ, τ², η, vectorised over P¹ ------------------
    def _point_maps(self) -> dict[str, np.ndarray]:
        c, d = self.P1.c, self.P1.d
        idx = self.P1.index
        return {
            "sigma": idx(d, -c),
            "tau": idx(d, -c - d),
            "tau2": idx(-c - d, c),
            "eta": idx(-c, d),
        }

    def _build(self) -> None:
        w, psi = self.w, self.psi
        maps = self._point_maps()
        uf = _SignedUnionFind(self.nsym)
        sig = maps["sigma"].tolist()
        eta = maps["eta"].tolist()
        for i in range(w + 1):
            si = -1 if i % 2 else 1
            for j in range(psi):
                x = i * psi + j
                # x + xσ = 0 with xσ = (−1)^i [X^(w−i) Y^i, (c:d)σ]
                uf.union(x, (w - i) * psi + sig[j], -si)
                if self.sign:
                    uf.union(x, i * psi + eta[j], self.sign * si)
        roots = {}
        root_of = [0] * self.nsym
        sgn = [0] * self.nsym
        for x in range(self.nsym):
            r, s = uf.find(x)
            if uf.zero[r]:
                root_of[x], sgn[x] = -1, 0
                continue
            if r not in roots:
                roots[r] = len(roots)
            root_of[x], sgn[x] = roots[r], s
        ngen = len(roots)
        gen_symbol = [0] * ngen
        for r, g in roots.items():
            gen_symbol[g] = r
        relations = self._three_term(maps, root_of, sgn)
        pivots = _sparse_eliminate(relations, ngen)
        free_gens = [g for g in range(ngen) if g not in pivots]
        pos = {g: t for t, g in enumerate(free_gens)}
        gen_expr: list[dict[int, object]] = []
        for g in range(ngen):
            if g in pos:
                gen_expr.append({pos[g]: 1})
            else:
                gen_expr.append({pos[h]: v for h, v in pivots[g].items()})
        self.free = [gen_symbol[g] for g in free_gens]
        self.root_of = np.array(root_of, dtype=np.int64)  # symbol → generator (−1: zero)
        self.root_sign = np.array(sgn, dtype=np.int64)  # symbol = sign · generator
        self.gen_expr = gen_expr  # generator → {free position: coefficient}
        self._expr = []
        for x in range(self.nsym):
            g = root_of[x]
            if g < 0:
                self._expr.append({})
            elif sgn[x] == 1:
                self._expr.append(gen_expr[g])
            else:
                self._expr.append({t: -v for t, v in gen_expr[g].items()})

    def _three_term(self, maps, root_of, sgn) -> list[dict[int, object]]:
        """x + xτ + xτ² = 0 for one base point per τ-orbit and every monomial."""
        w, psi = self.w, self.psi
        tau = maps["tau"].tolist()
        tau2 = maps["tau2"].tolist()
        A1 = poly_action(0, -1, 1, -1, w)
        A2 = poly_action(-1, 1, -1, 0, w)
        seen = bytearray(psi)
        rels = []
        for j in range(psi):
            if seen[j]:
                continue
            seen[j] = seen[tau[j]] = seen[tau2[j]] = 1
            for i in range(w + 1):
                rel: dict[int, object] = {}
                terms = [(i * psi + j, 1)]
                terms += [(m * psi + tau[j], A1[i][m]) for m in range(w + 1) if A1[i][m]]
                terms += [(m * psi + tau2[j], A2[i][m]) for m in range(w + 1) if A2[i][m]]
                for x, coef in terms:
                    g = root_of[x]
                    if g < 0:
                        continue
                    v = rel.get(g, 0) + sgn[x] * coef
                    if v:
                        rel[g] = v
                    else:
                        rel.pop(g, None)
                if rel:
                    rels.append(rel)
        return rels

    @property
    def dim(self) -> int:
        return len(self.free)

    def coords(self, x: int) -> dict[int, object]:
        """Sparse coordinates of Manin symbol x in the free basis."""
        return self._expr[x]

    def symbol_index(self, i: int, c: int, d: int) -> int:
        """Index of [X^i Y^(w−i), (c:d)], or -1 if (c:d) ∉ P¹(Z/NZ)."""
        j = self.P1.index_one(c, d)
        return -1 if j < 0 else i * self.psi + j


def _sparse_eliminate(relations: list[dict[int, object]], ngen: int) -> dict[int, dict]:
    """Exact sparse Gaussian elimination over Q.

    Returns {pivot generator: {free generator: coefficient}} meaning
    pivot = Σ coefficient · free, fully reduced (no pivot on a right side).
    Pivots are chosen to limit fill-in: a unit coefficient on the generator
    that occurs in the fewest reduced rows (Markowitz-style, common practice).
    """
    pivots: dict[int, dict] = {}
    occurs: dict[int, set] = {}
    for rel in relations:
        row: dict[int, object] = {}
        for g, v in rel.items():
            if g in pivots:
                for h, u in pivots[g].items():
                    t = row.get(h, 0) + v * u
                    if t:
                        row[h] = t
                    else:
                        row.pop(h, None)
            else:
                t = row.get(g, 0) + v
                if t:
                    row[g] = t
                else:
                    row.pop(g, None)
        if not row:
            continue
        best = None
        for g, v in row.items():
            key = (0 if v in (1, -1) else 1, len(occurs.get(g, ())), g)
            if best is None or key < best[0]:
                best = (key, g)
        q = best[1]
        cq = row.pop(q)
        expr = {h: _div(-v, cq) for h, v in row.items()}
        # substitute q into every pivot row that mentions it
        for p in occurs.pop(q, set()):
            prow = pivots[p]
            u = prow.pop(q)
            for h, v in expr.items():
                t = prow.get(h, 0) + u * v
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


def _div(a, b):
    if b == 1:
        return a
    if b == -1:
        return -a
    r = Fraction(a) / b
    return r.numerator if r.denominator == 1 else r
