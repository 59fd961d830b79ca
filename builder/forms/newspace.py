"""The new part of S_k(Γ0(N)) seen through functionals on the sign +1 symbols, and its
splitting into Galois orbits of newforms.

Why functionals.  A newform f gives a functional φ_f on the symbols M = M_k(Γ0(N))⁺
(its period map) with φ_f∘T_n = a_n(f)·φ_f; the eigenvalues of every orbit are read
off such a functional ([St] §9.3, [Cr] §2.9).  So we compute the space D of those
functionals directly and never the new *subspace* of M.

The old-dual.  Let Old ⊂ M be the span of the images of the symbols of the levels N/p
(p | N) under the transfer α_1 and under α_p = W_N∘α_1∘W_{N/p} (f ↦ f(pz), [AL],
[St] §8.6); every old form of every lower level comes through some N/p.  Its annihilator

    Ann(Old) = {λ ∈ M* : λ∘α_1 = 0 and (λ∘W_N)∘α_1 = 0 on M_{N/p}, for all p | N}

is Hecke- and W_Q-stable and is, as a Hecke module, the dual of M/Old: the new cusp
forms plus the new Eisenstein part.  It is the right kernel of one integer matrix with
rows α_1(g) and α_1(g)·W_N (g a basis of M_{N/p}), computed exactly by
``linalg_modp.exact_rref`` (modular elimination, rational reconstruction, exact check).
Operators act on functionals by λ ↦ T·λ (T given on rows, v ↦ v·T); on Ann(Old) with
basis X (X[free] = identity) their matrix is (T·X)[free, :].

Splitting (design.md §3).  The W_Q (Q ∥ N) are commuting involutions: Ann(Old) is the
direct sum of its sign-vector eigenspaces.  On each, factor the exact characteristic
polynomial of T_q (q the smallest prime ∤ N).  Its Eisenstein factors are recognised
exactly: T_q acts on the Eisenstein part by ψ(q) + q^(k−1)ψ̄(q) for characters ψ with
cond(ψ)² | N ([DS] §4.5–4.8, Eisenstein series E_k^{ψ,ψ̄}), whose minimal polynomials
we compute from Ramanujan sums; cusp eigenvalues are real with |a_q| ≤ 2q^((k−1)/2)
(Deligne), so the two never share a factor.  A cusp factor of multiplicity one is an
orbit (multiplicity one for newforms, [AL]); a repeated one is refined with the next
prime on its exact primary subspace, up to the Sturm bound.  The total cusp dimension is
checked against G. Martin's formula [Mt].

Characteristic polynomials are computed modulo word primes and lifted by CRT with the
bound (1 + ρ)^s on the coefficients (all eigenvalues are algebraic integers with
|·| ≤ ρ = 1 + q^(k−1)), so they are exact.
"""

from __future__ import annotations

from functools import cached_property
from math import gcd, isqrt

import flint
import numpy as np

from builder.arith import divisors, factor, is_prime, moebius, prime_divisors, sturm_bound
from builder.linalg_modp import (
    QMat,
    charpoly_bounded,
    column_space,
    exact_rref,
    int_matmul,
    q_equal,
)
from builder.symbols.space import SymbolSpace, cuspidal_space


class Piece:
    """A Hecke-stable piece of Ann(Old): columns Y (r × s), with Y[rows, :] = identity.

    ``ops[key]`` caches the s × s matrix (column action, T·Y = Y·A) of an operator.
    """

    def __init__(self, basis: QMat, rows: list[int], signs: dict[int, int]) -> None:
        self.basis = basis
        self.rows = rows
        self.signs = dict(signs)
        self.ops: dict = {}

    @property
    def dim(self) -> int:
        return self.basis.shape[1]

    def sub(self, K: QMat, free: list[int]) -> Piece:
        """The piece spanned by the columns Y·K (K[free, :] = identity); operators carried."""
        child = Piece((self.basis @ K) if self.dim else self.basis, [self.rows[f] for f in free],
                      self.signs)
        for key, A in self.ops.items():
            child.ops[key] = QMat(int_matmul(A.num, K.num)[free], A.den * K.den).reduced()
        return child


class Orbit:
    """A Galois orbit of newforms: the f-part of a piece for an irreducible f.

    ``prime``: q with T_q of charpoly ``poly`` (irreducible, degree d) on the orbit — the
    proof of irreducibility; ``cofactor``: charpoly of T_q on the piece divided by
    ``poly`` (coprime to it); ``hecke_poly``: charpoly of T_{q0} on the orbit for the
    first prime q0 ∤ N; ``signs``: Q's prime ↦ ε_Q.
    """

    def __init__(self, new: NewSpace, piece: Piece, prime: int, poly: flint.fmpz_poly,
                 cofactor: flint.fmpz_poly, hecke_poly: flint.fmpz_poly) -> None:
        self.new = new
        self.piece = piece
        self.prime = prime
        self.poly = poly
        self.cofactor = cofactor
        self.hecke_poly = hecke_poly
        self.signs = dict(piece.signs)

    @property
    def dim(self) -> int:
        return self.poly.degree()

    def operator(self) -> QMat:
        """T_prime on the piece (column action)."""
        return self.new.piece_op(self.piece, "T", self.prime)

    @cached_property
    def dual_columns(self) -> QMat:
        """Exact columns (r × d, old-dual coordinates) spanning the orbit: ker f(T_q)."""
        A = self.operator()
        K = exact_rref(poly_at(self.poly, A).num).kernel()
        return self.piece.basis @ K if self.piece.dim else K

    @property
    def basis(self) -> flint.fmpq_mat:
        """The orbit as rows (d × r) in the coordinates of ``NewSpace.hecke`` (exact)."""
        return self.dual_columns.to_fmpq_mat().transpose()


class NewSpace:
    """The new part of S_k(Γ0(N)), as functionals on the sign +1 symbols."""

    def __init__(self, space: SymbolSpace) -> None:
        if space.sign != 1:
            raise ValueError("the new subspace is computed in the sign +1 space")
        self.space = space
        self.N, self.k = space.N, space.k
        self.X, self.free = self._old_dual()
        self.coord_dim = len(self.free)

    # -- the old-dual --------------------------------------------------------------------
    def _old_dual(self) -> tuple[QMat, list[int]]:
        S = self.space
        n = S.dim
        blocks = []
        for p in prime_divisors(self.N):
            src = cuspidal_space(self.N // p, self.k, 1)
            if src.dim == 0:
                continue
            Tr = S.transfer_dense(src)
            blocks.append(Tr.num)
            blocks.append(int_matmul(Tr.num, S.atkin_lehner_dense(self.N).num))
        if not blocks or n == 0:
            return QMat.identity(n), list(range(n))
        Z = np.concatenate([_as_common(b) for b in blocks], axis=0)
        E = exact_rref(Z)
        return E.kernel(), E.free

    def _full_op(self, kind: str, n: int) -> QMat:
        S = self.space
        return S.hecke_dense(n) if kind == "T" else S.atkin_lehner_dense(n)

    @cached_property
    def _op_cache(self) -> dict:
        return {}

    def op(self, kind: str, n: int) -> QMat:
        """The operator (T_n: "T", W_Q: "W") on Ann(Old), column action, exact."""
        key = (kind, n)
        if key not in self._op_cache:
            T = self._full_op(kind, n)
            if len(self.free) == self.space.dim:
                A = T
            else:
                TX = QMat(int_matmul(T.num, self.X.num), T.den * self.X.den)
                A = QMat(TX.num[self.free], TX.den).reduced()
                # Ann(Old) is stable: T·X = X·A exactly (a check, cheap)
                if not q_equal(TX, self.X @ A):
                    raise ArithmeticError(f"level {self.N}: Ann(Old) is not {kind}_{n}-stable")
            self._op_cache[key] = A
        return self._op_cache[key]

    def piece_op(self, piece: Piece, kind: str, n: int) -> QMat:
        key = (kind, n)
        if key not in piece.ops:
            A = self.op(kind, n)
            if piece.dim == self.coord_dim and piece.rows == list(range(self.coord_dim)):
                piece.ops[key] = A
            else:
                AY = int_matmul(A.num, piece.basis.num)[piece.rows]
                piece.ops[key] = QMat(AY, A.den * piece.basis.den).reduced()
        return piece.ops[key]

    # -- API in rows convention (v ↦ v·M), as the tests and notebooks use it -------------
    def hecke(self, n: int) -> flint.fmpq_mat:
        """T_n on the old-dual coordinates, rows convention (the transpose of ``op``)."""
        return self.op("T", n).to_fmpq_mat().transpose()

    def atkin_lehner(self, Q: int) -> flint.fmpq_mat:
        return self.op("W", Q).to_fmpq_mat().transpose()

    def good_primes(self) -> list[int]:
        """Primes q ∤ N up to the Sturm bound (at least one), increasing."""
        B = max(sturm_bound(self.N, self.k), 2)
        out = []
        q = 2
        while q <= B or not out:
            if self.N % q and is_prime(q):
                out.append(q)
            q += 1
        return out

    # -- splitting ------------------------------------------------------------------------
    def sign_pieces_full(self) -> list[Piece]:
        """Ann(Old) split by the Atkin–Lehner signs (Eisenstein part included)."""
        r = self.coord_dim
        pieces = [Piece(QMat.identity(r), list(range(r)), {})]
        for p, e in factor(self.N):
            Q = p**e
            out = []
            for P in pieces:
                if P.dim == 0:
                    continue
                W = self.piece_op(P, "W", Q)
                for eps in (1, -1):
                    E = exact_rref(_minus_scalar(W, eps).num)
                    if E.rank == P.dim:
                        continue
                    child = P.sub(E.kernel(), E.free)
                    child.signs[p] = eps
                    out.append(child)
            pieces = out
        return [P for P in pieces if P.dim]

    @cached_property
    def _split(self) -> tuple[list[Orbit], dict]:
        if self.coord_dim == 0:
            return [], {}
        primes = self.good_primes()
        orbits: list[Orbit] = []
        eis: dict = {}
        for P in self.sign_pieces_full():
            self._split_piece(P, primes, 0, None, orbits, eis)
        return orbits, eis

    def _split_piece(self, P: Piece, primes: list[int], i: int, top, orbits: list, eis: dict):
        if i >= len(primes):
            raise ArithmeticError(
                f"level {self.N} weight {self.k}: Hecke operators up to the Sturm bound "
                "did not split the new subspace (multiplicity one violated?)"
            )
        q = primes[i]
        A = self.piece_op(P, "T", q)
        rho = 1 + q ** (self.k - 1) if i == 0 else isqrt(4 * q ** (self.k - 1)) + 1
        chi = charpoly_bounded(A, rho)
        _, facs = chi.factor()
        eis_polys = eisenstein_polys(self.N, self.k, q) if i == 0 else set()
        for g, e in sorted(facs, key=lambda fe: (fe[0].degree(), [int(c) for c in fe[0].coeffs()])):
            key = tuple(int(c) for c in g.coeffs())
            if key in eis_polys:
                eis[tuple(sorted(P.signs.items()))] = eis.get(tuple(sorted(P.signs.items())), 0) + (
                    g.degree() * e)
                continue
            hp = g if top is None else top
            if e == 1:
                cof = chi // g
                d = g.degree()
                hecke = hp if top is None else _power(top, d // top.degree())
                orbits.append(Orbit(self, P, q, g, cof, hecke))
            else:
                E = exact_rref(poly_at(_power(g, e), A).num)
                sub = P.sub(E.kernel(), E.free)
                if sub.dim != g.degree() * e:
                    raise ArithmeticError(f"level {self.N}: primary part of wrong dimension")
                self._split_piece(sub, primes, i + 1, hp, orbits, eis)

    def orbits(self) -> list[Orbit]:
        """The Galois orbits of newforms, each with its proof of irreducibility."""
        orbits = self._split[0]
        self._check_dim()
        return list(orbits)

    @property
    def dim(self) -> int:
        """dim S_k^new(Γ0(N)) = the cusp part of Ann(Old)."""
        return sum(o.dim for o in self._split[0])

    def _check_dim(self) -> None:
        from builder.checks.formulas import dim_new

        if self.dim != dim_new(self.N, self.k):
            raise ArithmeticError(
                f"level {self.N} weight {self.k}: new dimension {self.dim} differs from "
                f"G. Martin's formula {dim_new(self.N, self.k)}")

    def sign_pieces(self) -> list[tuple[dict[int, int], flint.fmpq_mat]]:
        """(signs, rows) for every nonzero sign-vector eigenspace of the *cusp* new part.

        The cusp part of a piece is the image of E(T_q) for E the Eisenstein part of the
        characteristic polynomial of T_q on it (exact; for the API and the tests).
        """
        q = self.good_primes()[0]
        out = []
        eis_polys = eisenstein_polys(self.N, self.k, q)
        for P in self.sign_pieces_full():
            A = self.piece_op(P, "T", q)
            chi = charpoly_bounded(A, 1 + q ** (self.k - 1))
            Epoly = flint.fmpz_poly([1])
            for g, e in chi.factor()[1]:
                if tuple(int(c) for c in g.coeffs()) in eis_polys:
                    Epoly *= _power(g, e)
            C = column_space(poly_at(Epoly, A))
            if C.shape[1] == 0:
                continue
            cols = P.basis @ C
            out.append((dict(P.signs), cols.to_fmpq_mat().transpose()))
        return out


# -- helpers ----------------------------------------------------------------------------------


def _as_common(Z: np.ndarray) -> np.ndarray:
    return Z.astype(object) if Z.dtype == object else Z


def _minus_scalar(A: QMat, c: int) -> QMat:
    num = np.array(A.num, dtype=A.num.dtype, copy=True)
    idx = np.arange(A.shape[0])
    num[idx, idx] = num[idx, idx] - c * A.den
    return QMat(num, A.den)


def _power(g: flint.fmpz_poly, e: int) -> flint.fmpz_poly:
    out = flint.fmpz_poly([1])
    for _ in range(e):
        out *= g
    return out


def poly_at(f: flint.fmpz_poly, A: QMat) -> QMat:
    """f(A) for an exact square matrix, by Horner's rule (exact)."""
    s = A.shape[0]
    coeffs = [int(c) for c in f.coeffs()]
    R = QMat(np.zeros((s, s), dtype=np.int64), 1)
    for c in reversed(coeffs):
        R = R @ A if not R.is_zero() else R
        if c:
            R = _minus_scalar(R, -c)
    return R


def _ramanujan_sum(o: int, e: int) -> int:
    """Σ over primitive o-th roots of unity ζ of ζ^e (common practice)."""
    g = gcd(o, e)
    return sum(moebius(o // d) * d for d in divisors(g))


def _carmichael(u: int) -> int:
    lam = 1
    for p, e in factor(u):
        if p == 2:
            t = 1 if e == 1 else (2 if e == 2 else 2 ** (e - 2))
        else:
            t = (p - 1) * p ** (e - 1)
        lam = lam * t // gcd(lam, t)
    return lam


def eisenstein_polys(N: int, k: int, q: int) -> set[tuple[int, ...]]:
    """Minimal polynomials (coefficient tuples, constant first) of the eigenvalues
    ζ + q^(k−1)·ζ^(−1) of T_q on the Eisenstein part of M_k(Γ0(N)) (q ∤ N), ζ = ψ(q) of
    order o | λ(u), u² | N ([DS] §4.5–4.8).  Power sums Σ (ζ + cζ⁻¹)^m come from Ramanujan
    sums, then Newton's identities give the polynomial (exact integers)."""
    c = q ** (k - 1)
    orders: set[int] = set()
    for u in divisors(N):
        if N % (u * u) == 0:
            orders.update(divisors(_carmichael(u)))
    out = set()
    for o in sorted(orders):
        deg = len([j for j in range(1, o + 1) if gcd(j, o) == 1])
        ps = [0] * (deg + 1)
        from math import comb

        for m in range(1, deg + 1):
            ps[m] = sum(comb(m, i) * c ** (m - i) * _ramanujan_sum(o, 2 * i - m)
                        for i in range(m + 1))
        # Newton: e_m = (1/m) Σ_{i=1}^{m} (−1)^(i−1) e_{m−i} p_i
        e = [1] + [0] * deg
        for m in range(1, deg + 1):
            s = sum((-1) ** (i - 1) * e[m - i] * ps[i] for i in range(1, m + 1))
            e[m] = s // m
        coeffs = [(-1) ** (deg - j) * e[deg - j] for j in range(deg + 1)]  # const first
        out.add(tuple(coeffs))
    return out


def new_space(N: int, k: int) -> NewSpace:
    """The new part of level N, weight k (functionals on the sign +1 symbols)."""
    return NewSpace(cuspidal_space(N, k, 1))
