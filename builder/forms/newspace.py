"""The new part of S_k(Γ0(N)) seen through functionals on the sign +1 symbols, and its
splitting into Galois orbits of newforms.

Why functionals.  A newform f gives a functional φ_f on the symbols M = M_k(Γ0(N))⁺
(its period map) with φ_f∘T_n = a_n(f)·φ_f; the eigenvalues of every orbit are read
off such a functional ([St] §9.3, [Cr] §2.9).  So we compute the space of those
functionals directly and never the new *subspace* of M.

The old-dual.  Let Old ⊂ M be the span of the images of the symbols of the levels N/p
(p | N) under the transfer α_1 and under α_p = W_N∘α_1∘W_{N/p} (f ↦ f(pz), [AL],
[St] §8.6); every old form of every lower level comes through some N/p.  Its annihilator

    Ann(Old) = {λ ∈ M* : λ∘α_1 = 0 and (λ∘W_N)∘α_1 = 0 on M_{N/p}, for all p | N}

is Hecke- and W_Q-stable and is, as a Hecke module, the dual of M/Old: the new cusp
forms plus the new Eisenstein part.  It is the right kernel of one integer matrix with
rows α_1(g) and α_1(g)·W_N (g a basis of M_{N/p}), computed exactly once by
``linalg_modp.exact_rref`` (modular elimination, Dixon lifting, exact check).  Its basis
X (X[free] = identity) is the certificate of everything below.  Operators act on
functionals by λ ↦ T·λ (T given on rows, v ↦ v·T); on Ann(Old) their matrix is
(T·X)[free, :].

Pieces modulo primes.  All further linear algebra is done modulo primes ℓ < 2^21 on the
reduction X mod ℓ (``_ModStructure``), where it is exact reduction of the exact objects:
* W_Q (Q ∥ N) are commuting involutions, also modulo ℓ, so the sign pieces modulo ℓ
  have dimensions adding up to dim Ann(Old); as each is at least the exact dimension,
  they are the reductions of the exact pieces;
* a primary part ker g(T_q)^e is used modulo ℓ only where g stays coprime to the rest of
  the characteristic polynomial modulo ℓ (then its dimension is the exact one).

Splitting (design.md §3).  On each sign piece, the exact characteristic polynomial of T_q
(q the smallest prime ∤ N) comes from its reductions by CRT with the bound (1 + ρ)^s
on the coefficients (eigenvalues are algebraic integers of absolute value ≤ ρ =
1 + q^(k−1)).  Its Eisenstein factors are recognised exactly: T_q acts on the Eisenstein
part by ψ(q) + q^(k−1)ψ̄(q) for characters ψ with cond(ψ)² | N ([DS] §4.5–4.8), whose
minimal polynomials we compute from Ramanujan sums; cusp eigenvalues are real with
|a_q| ≤ 2q^((k−1)/2) (Deligne), so the two never share a factor.  A cusp factor of
multiplicity one is an orbit (multiplicity one for newforms, [AL]); a repeated one is
refined with the next prime on its primary part, up to the Sturm bound.  The total cusp
dimension is checked against G. Martin's formula [Mt].
"""

from __future__ import annotations

from functools import cached_property
from math import comb, gcd, isqrt

import flint
import numpy as np

from builder.arith import divisors, factor, is_prime, moebius, prime_divisors, sturm_bound
from builder.checks.formulas import dim_new
from builder.linalg_modp import (
    DigitKernel,
    QMat,
    charpoly_bounded,
    exact_rref,
    float_primes,
    int_matmul,
    matmul_mod,
    q_equal,
    residue_nmod_mat,
    rref_mod,
)
from builder.symbols.space import SymbolSpace, cuspidal_space

Label = tuple  # path of a piece: (("W", Q, ε), …, ("P", q, g, e), …)
EXACT_PIECES_MAX = 8  # exact sign pieces (62-bit charpolys) for at most this many pieces …
EXACT_PIECE_MIN_DIM = 80  # … when the biggest has at least this dimension


class Orbit:
    """A Galois orbit of newforms: the f-part of the piece ``label`` for an irreducible f.

    ``prime``: q with T_q of characteristic polynomial ``poly`` (irreducible, degree d) on
    the orbit — the proof of irreducibility; ``cofactor``: the characteristic polynomial of
    T_q on the piece divided by ``poly`` (coprime to it); ``hecke_poly``: the
    characteristic polynomial of T_{q0} on the orbit for the first prime q0 ∤ N;
    ``signs``: p ↦ ε_{p^e} (p^e ∥ N).
    """

    def __init__(self, new: NewSpace, label: Label, prime: int, poly: flint.fmpz_poly,
                 cofactor: flint.fmpz_poly, hecke_poly: flint.fmpz_poly,
                 signs: dict[int, int]) -> None:
        self.new = new
        self.label = label
        self.prime = prime
        self.poly = poly
        self.cofactor = cofactor
        self.hecke_poly = hecke_poly
        self.signs = dict(signs)

    @property
    def dim(self) -> int:
        return self.poly.degree()

    @cached_property
    def dual_columns(self) -> QMat:
        """Exact columns (r × d, old-dual coordinates) spanning the orbit's functionals.

        The common kernel of the exact conditions along the piece's path and f(T_q): exact
        arithmetic on Ann(Old), used by the tests and by rare exact fallbacks only.
        """
        new = self.new
        blocks = []
        for step in self.label:
            if step[0] == "W":
                _, Q, eps = step
                blocks.append(_minus_scalar(new.op("W", Q), eps))
            else:
                _, q, g, e = step
                blocks.append(poly_at(_power(flint.fmpz_poly(list(g)), e), new.op(*op_key(q))))
        blocks.append(poly_at(self.poly, new.op(*op_key(self.prime))))
        den = 1
        for b in blocks:
            den = den * b.den // gcd(den, b.den)
        Z = np.concatenate([_times(b.num, den // b.den) for b in blocks], axis=0)
        K = exact_rref(Z).kernel()
        if K.shape[1] != self.dim:
            raise ArithmeticError("the exact orbit has the wrong dimension")
        return K

    @property
    def basis(self) -> flint.fmpq_mat:
        """The orbit as rows (d × r) in the coordinates of ``NewSpace.hecke`` (exact)."""
        return self.dual_columns.to_fmpq_mat().transpose()


class _ModStructure:
    """Ann(Old) and its pieces modulo one prime ℓ < 2^21 (see the module doc)."""

    def __init__(self, new: NewSpace, ell: int) -> None:
        self.new, self.ell = new, ell
        self.ok = new.X.den % ell != 0
        self.X = new.X.mod(ell) if self.ok else None
        self._ops: dict = {}
        self._pieces: dict = {(): (None, list(range(new.coord_dim)))} if self.ok else {}
        self._piece_ops: dict = {}

    def root_op(self, kind: str, n: int) -> np.ndarray:
        """The operator on Ann(Old) modulo ℓ (r × r, column action)."""
        key = (kind, n)
        if key not in self._ops and kind == "C":
            # Σ c·T_q from the T_q modulo ℓ: no exact combination of the big matrices
            out = sum(c * self.root_op("T", q) for q, c in n)
            self._ops[key] = np.mod(out, self.ell)
        if key not in self._ops:
            T = self.new.full_op(kind, n)
            free = self.new.free
            if len(free) == T.shape[0]:
                self._ops[key] = T.mod(self.ell)
            else:
                self._ops[key] = matmul_mod(QMat(T.num[free], T.den).mod(self.ell), self.X,
                                            self.ell)
        return self._ops[key]

    def piece(self, label: Label):
        """(K, free) describing the piece inside its parent, or None if ℓ is bad for it."""
        if label in self._pieces:
            return self._pieces[label]
        parent = self.piece(label[:-1])
        out = None
        if parent is not None:
            step = label[-1]
            s = self.dim(label[:-1])
            if step[0] == "W" and self.new.exact_signs:
                K, free = self.new.exact_sign_piece(label)
                out = (K.mod(self.ell), free) if K.den % self.ell else None
            elif step[0] == "W":
                _, Q, eps = step
                A = self.op(label[:-1], "W", Q)
                out = _kernel_mod(A - eps * np.eye(s), self.ell)
            else:
                _, q, g, e = step
                A = self.op(label[:-1], *op_key(q))
                G = _poly_at_mod(_power(flint.fmpz_poly(list(g)), e), A, self.ell)
                K, free = _kernel_mod(G, self.ell)
                rest = self.new.node_charpoly(label[:-1]) // _power(flint.fmpz_poly(list(g)), e)
                gl = flint.nmod_poly([int(c) for c in g], self.ell)
                rl = flint.nmod_poly([int(c) for c in rest.coeffs()], self.ell)
                if len(free) == (len(g) - 1) * e and gl.gcd(rl).degree() == 0:
                    out = (K, free)
        self._pieces[label] = out
        return out

    def dim(self, label: Label) -> int:
        if label == ():
            return self.new.coord_dim
        return len(self._pieces[label][1])

    def op(self, label: Label, kind: str, n: int) -> np.ndarray:
        """An operator on the piece modulo ℓ (s × s, column action, A·K = K·A')."""
        if label == ():
            return self.root_op(kind, n)
        key = (label, kind, n)
        if key not in self._piece_ops:
            K, free = self.piece(label)
            A = self.op(label[:-1], kind, n)
            self._piece_ops[key] = matmul_mod(A, K, self.ell)[free]
        return self._piece_ops[key]

    def basis(self, label: Label) -> np.ndarray:
        """Columns of the piece in Ann(Old) coordinates (r × s) modulo ℓ."""
        if label == ():
            return np.eye(self.new.coord_dim)
        K, _ = self.piece(label)
        return matmul_mod(self.basis(label[:-1]), K, self.ell)


class NewSpace:
    """The new part of S_k(Γ0(N)), as functionals on the sign +1 symbols."""

    def __init__(self, space: SymbolSpace) -> None:
        if space.sign != 1:
            raise ValueError("the new subspace is computed in the sign +1 space")
        self.space = space
        self.N, self.k = space.N, space.k
        self.X, self.free = self._old_dual()
        self.coord_dim = len(self.free)
        self._mods: dict[int, _ModStructure] = {}
        self._charpolys: dict[Label, flint.fmpz_poly] = {}
        self._split_prime: dict[Label, int] = {}

    # -- the old-dual (exact) ----------------------------------------------------------------
    def _old_dual(self) -> tuple[QMat, list[int]]:
        S = self.space
        n = S.dim
        blocks = []
        for p in prime_divisors(self.N):
            src = cuspidal_space(self.N // p, self.k, 1)
            if src.dim == 0:
                continue
            blocks.append(S.transfer_dense(src).num)
            blocks.append(S.fricke_transfer_dense(src).num)
        if not blocks or n == 0:
            self.old_conditions = np.zeros((0, n), dtype=np.int64)
            return QMat.identity(n), list(range(n))
        Z = np.concatenate([b.astype(object) if b.dtype == object else b for b in blocks])
        self.old_conditions = Z  # rows whose common kernel is Ann(Old)
        # Ann(Old) contains the new cusp functionals: rank ≤ n − dim S_k^new (a bound only)
        E = exact_rref(Z, rank_max=n - dim_new(self.N, self.k))
        return E.kernel(), E.free

    def full_op(self, kind: str, n) -> QMat:
        """T_n ("T"), W_n ("W") or Σ c_q T_q ("C", n = ((q, c), …)) on the whole symbol
        space (rows = images), exact."""
        S = self.space
        if kind == "C":
            key = ("combo", n)
            if key not in self._exact_ops:
                parts = [(S.hecke_dense(q), c) for q, c in n]
                den = 1
                for T, _ in parts:
                    den = den * T.den // gcd(den, T.den)
                num = sum(_times(T.num, c * (den // T.den)) for T, c in parts)
                if num.dtype == object and _row_abs_max(num) < (1 << 62):
                    num = num.astype(np.int64)
                self._exact_ops[key] = QMat(num, den).reduced()
            return self._exact_ops[key]
        return S.hecke_dense(n) if kind == "T" else S.atkin_lehner_dense(n)

    def apply_exact(self, kind: str, n: int, v: np.ndarray) -> np.ndarray:
        """num·v exactly for the integer numerator of an operator on M ("T", "W") or of the
        old conditions ("old"), with a cached float copy of the (big) matrix."""
        key = ("float", kind, n)
        cache = self._exact_ops
        if key not in cache:
            A = self.old_conditions if kind == "old" else self.full_op(kind, n).num
            Af = A.astype(np.float64) if A.dtype != object else None
            cache[key] = (A, Af, int(np.abs(Af).sum(axis=1).max(initial=0)) if (
                Af is not None) else None)
        A, Af, ra = cache[key]
        if Af is not None and v.dtype != object and ra * int(np.max(np.abs(v), initial=0)) < (
                1 << 53):
            return np.rint(Af @ v.astype(np.float64)).astype(np.int64)
        return int_matmul(A, v)

    @cached_property
    def _exact_ops(self) -> dict:
        return {}

    def op(self, kind: str, n: int) -> QMat:
        """The operator on Ann(Old), column action, exact (tests and exact fallbacks)."""
        key = (kind, n)
        if key not in self._exact_ops:
            T = self.full_op(kind, n)
            if len(self.free) == self.space.dim:
                A = T
            else:
                TX = QMat(int_matmul(T.num, self.X.num), T.den * self.X.den)
                A = QMat(TX.num[self.free], TX.den).reduced()
                if not q_equal(TX, self.X @ A):
                    raise ArithmeticError(f"level {self.N}: Ann(Old) is not {kind}_{n}-stable")
            self._exact_ops[key] = A
        return self._exact_ops[key]

    def hecke(self, n: int) -> flint.fmpq_mat:
        """T_n on the old-dual coordinates, rows convention (the transpose of ``op``)."""
        return self.op("T", n).to_fmpq_mat().transpose()

    def atkin_lehner(self, Q: int) -> flint.fmpq_mat:
        return self.op("W", Q).to_fmpq_mat().transpose()

    def mod(self, ell: int) -> _ModStructure:
        if ell not in self._mods:
            self._mods[ell] = _ModStructure(self, ell)
        return self._mods[ell]

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

    # -- pieces and their exact characteristic polynomials --------------------------------------
    def _sign_labels(self) -> list[tuple[Label, dict[int, int]]]:
        """The nonzero Atkin–Lehner sign pieces (dimensions read modulo the first good ℓ)."""
        labels: list[tuple[Label, dict[int, int]]] = [((), {})]
        st = self._first_mod()
        for p, e in factor(self.N):
            Q = p**e
            out = []
            for lab, signs in labels:
                for eps in (1, -1):
                    child = lab + (("W", Q, eps),)
                    if st.piece(child) is not None and st.dim(child):
                        out.append((child, {**signs, p: eps}))
            labels = out
        return labels

    def _first_mod(self) -> _ModStructure:
        for ell in float_primes():
            st = self.mod(ell)
            if st.ok:
                return st
        raise ArithmeticError("no prime")  # pragma: no cover

    def node_charpoly(self, label: Label) -> flint.fmpz_poly:
        """Exact charpoly of the node's splitting operator T_q on the piece (CRT)."""
        if label in self._charpolys:
            return self._charpolys[label]
        q = self._split_prime[label]
        cusp = any(step[0] == "P" for step in label)
        rho = op_bound(q, self.k) if cusp else 1 + q ** (self.k - 1)
        exact = self._exact_piece_op(label, q) if isinstance(q, int) else None
        if exact is not None:
            chi = charpoly_bounded(exact, rho)
            self._charpolys[label] = chi
            return chi
        s = None
        need = None
        res, mods, prod = [], [], 1
        bad = 0
        for ell in float_primes():
            st = self.mod(ell)
            if not st.ok or st.piece(label) is None:
                bad += 1
                if bad > 50:
                    raise ArithmeticError(f"level {self.N}: no good prime for a piece")
                continue
            A = st.op(label, *op_key(q))
            if s is None:
                s = A.shape[0]
                need = 2 * (1 + rho) ** s
            elif A.shape[0] != s:
                continue
            M = residue_nmod_mat(A, ell)
            res.append([int(c) for c in M.charpoly().coeffs()])
            mods.append(ell)
            prod *= ell
            if prod > need:
                break
        coeffs = []
        for i in range(s + 1):
            x = _crt_list([r[i] for r in res], mods)
            coeffs.append(x - prod if x > prod // 2 else x)
        chi = flint.fmpz_poly(coeffs)
        self._charpolys[label] = chi
        return chi

    def _exact_piece_op(self, label: Label, q: int) -> QMat | None:
        """T_q on a sign piece exactly, when that is cheaper than many 21-bit primes.

        With ``exact_signs`` (an Ann(Old) basis of word-size entries) the piece's T_q comes
        from the exact pieces inside Ann(Old).  Otherwise a sign piece is the kernel of the
        integer matrix [old conditions; W_Q − ε_Q] on the whole symbol space: one exact
        rref (Dixon) gives it with the heights of Ann(Old) (not compounded), then its
        characteristic polynomial needs few 62-bit primes; used for big pieces of levels
        with few sign vectors (``_exact_pieces_pay``).  None otherwise (primary parts, many
        small pieces: the modular CRT of ``node_charpoly``).
        """
        if any(step[0] != "W" for step in label):
            return None
        if self.exact_signs:
            return self._exact_node_op(label, "T", q)
        if not self._exact_pieces_pay:
            return None
        E = self._exact_sign_piece(label)
        if E is None:
            return None
        Y, rows = E
        T = self.full_op("T", q)
        return QMat(int_matmul(T.num, Y.num)[rows], T.den * Y.den).reduced()

    @cached_property
    def exact_signs(self) -> bool:
        """Whether the sign pieces are cut out exactly inside Ann(Old): when its basis X
        has word-size entries, (W_Q·X)[free] is a small exact matrix and the kernels of
        W_Q − ε on it cost less than one elimination per prime; every piece then reduces
        modulo each good prime without any elimination, and its T_q has an exact
        characteristic polynomial (``charpoly_bounded``) instead of many 21-bit CRT steps."""
        return (not isinstance(self.X, DigitKernel) and self.X.num.dtype != object
                and self.coord_dim > 0)

    def exact_sign_piece(self, label: Label) -> tuple[QMat, list[int]]:
        """(K, free): the ε-eigenspace of W_Q (label[-1] = ("W", Q, ε)) inside the parent
        sign piece, exactly: columns in the parent's coordinates, K[free] = identity."""
        cache = self._exact_ops
        key = ("sign", label)
        if key not in cache:
            _, Q, eps = label[-1]
            A = self._exact_node_op(label[:-1], "W", Q)
            E = exact_rref(_minus_scalar(A, eps).num)
            cache[key] = (E.kernel(), E.free)
        return cache[key]

    def _exact_node_op(self, label: Label, kind: str, n) -> QMat:
        """An operator on an exact sign piece (column action): A' with A·K = K·A'."""
        if label == ():
            return self.op(kind, n)
        key = ("node", label, kind, n)
        cache = self._exact_ops
        if key not in cache:
            K, free = self.exact_sign_piece(label)
            AK = self._exact_node_op(label[:-1], kind, n) @ K
            cache[key] = QMat(AK.num[free], AK.den).reduced()
        return cache[key]

    @cached_property
    def _exact_pieces_pay(self) -> bool:
        labels = self._sign_labels()
        st = self._first_mod()
        biggest = max((st.dim(lab) for lab, _ in labels), default=0)
        return len(labels) <= EXACT_PIECES_MAX and biggest >= EXACT_PIECE_MIN_DIM

    def _exact_sign_piece(self, label: Label):
        S = self.space
        blocks = [self.old_conditions] if self.old_conditions.shape[0] else []
        for _, Q, eps in label:
            W = S.atkin_lehner_dense(Q)
            blocks.append(_minus_scalar(W, eps).num if W.den == 1 else None)
        if any(b is None for b in blocks):
            return None
        Z = np.concatenate([b.astype(object) if b.dtype == object else b for b in blocks]) if (
            len(blocks) > 1) else blocks[0]
        # the piece's dimension modulo ℓ is the exact one (module doc): the rank is known
        E = exact_rref(Z, rank_max=S.dim - self._first_mod().dim(label))
        return E.kernel(), E.free

    # -- splitting ------------------------------------------------------------------------------
    @cached_property
    def _split(self) -> list[Orbit]:
        if self.coord_dim == 0:
            return []
        primes = self.good_primes()
        orbits: list[Orbit] = []
        for label, signs in self._sign_labels():
            self._split_node(label, signs, primes, 0, None, orbits)
        return orbits

    def _split_node(self, label: Label, signs, primes: list[int], i: int, top,
                    orbits: list[Orbit]) -> None:
        if i >= len(primes):
            raise ArithmeticError(
                f"level {self.N} weight {self.k}: Hecke operators up to the Sturm bound "
                "did not split the new subspace (multiplicity one violated?)"
            )
        q = split_operator(primes, i)
        self._split_prime[label] = q
        chi = self.node_charpoly(label)
        _, facs = chi.factor()
        eis_polys = eisenstein_polys(self.N, self.k, q) if i == 0 else set()
        for g, e in sorted(facs, key=lambda fe: (fe[0].degree(), [int(c) for c in fe[0].coeffs()])):
            key = tuple(int(c) for c in g.coeffs())
            if key in eis_polys:
                continue
            hp = g if top is None else top
            if e == 1:
                hecke = hp if top is None else _power(top, g.degree() // top.degree())
                orbits.append(Orbit(self, label, q, g, chi // g, hecke, signs))
            else:
                child = label + (("P", q, key, e),)
                self._split_node(child, signs, primes, i + 1, hp, orbits)

    def orbits(self) -> list[Orbit]:
        """The Galois orbits of newforms, each with its proof of irreducibility."""
        self._check_dim()
        return list(self._split)

    @property
    def dim(self) -> int:
        """dim S_k^new(Γ0(N)) = the cusp part of Ann(Old)."""
        return sum(o.dim for o in self._split)

    def _check_dim(self) -> None:
        if self.dim != dim_new(self.N, self.k):
            raise ArithmeticError(
                f"level {self.N} weight {self.k}: new dimension {self.dim} differs from "
                f"G. Martin's formula {dim_new(self.N, self.k)}")

    def sign_pieces(self) -> list[tuple[dict[int, int], flint.fmpq_mat]]:
        """(signs, rows) for every nonzero sign-vector eigenspace of the new cusp part:
        the orbits' exact functionals grouped by their signs (API and tests)."""
        groups: dict[tuple, list[Orbit]] = {}
        for o in self.orbits():
            groups.setdefault(tuple(sorted(o.signs.items())), []).append(o)
        out = []
        for key in sorted(groups):
            rows = [o.basis for o in groups[key]]
            M = flint.fmpq_mat(sum(r.nrows() for r in rows), self.coord_dim)
            i = 0
            for r in rows:
                for a in range(r.nrows()):
                    for b in range(self.coord_dim):
                        M[i, b] = r[a, b]
                    i += 1
            out.append((dict(key), M))
        return out


# -- helpers ----------------------------------------------------------------------------------


def split_operator(primes: list[int], i: int):
    """The operator of a splitting node at depth i: T_q for q = primes[i] when i ≤ 1, else
    the combination Σ_{t=1..i} t·T_{primes[t]} (as ((q, c), …)).  A primary part on which
    every single a_q lies in a proper subfield of K_f (forms with several inner twists,
    e.g. N = 7200) is never split by one T_q; a combination of a_q from different subfields
    generates K_f (design.md §3: "Z-combinations where one operator does not separate")."""
    if i <= 1:
        return primes[i]
    return tuple((primes[t], t) for t in range(1, i + 1))


def op_key(q) -> tuple[str, object]:
    """(kind, n) of a splitting operator: ("T", q) for a prime, ("C", combo) otherwise."""
    return ("T", q) if isinstance(q, int) else ("C", q)


def op_bound(q, k: int) -> int:
    """An integer ≥ |σ(eigenvalue)| of the splitting operator on cusp forms (Deligne)."""
    if isinstance(q, int):
        return isqrt(4 * q ** (k - 1)) + 1
    return sum(abs(c) * (isqrt(4 * p ** (k - 1)) + 1) for p, c in q)


def _kernel_mod(A: np.ndarray, ell: int) -> tuple[np.ndarray, list[int]]:
    """Right kernel modulo ℓ: K (s × s') with K[free, :] = identity."""
    s = A.shape[1]
    R, piv = rref_mod(np.mod(A, ell), ell)
    ps = set(piv)
    free = [c for c in range(s) if c not in ps]
    K = np.zeros((s, len(free)))
    K[free, np.arange(len(free))] = 1.0
    if piv and free:
        K[piv] = np.mod(-R[:, free], ell)
    return K, free


def _poly_at_mod(f: flint.fmpz_poly, A: np.ndarray, ell: int) -> np.ndarray:
    s = A.shape[0]
    R = np.zeros((s, s))
    for c in reversed([int(x) % ell for x in f.coeffs()]):
        R = matmul_mod(R, A, ell)
        R[np.arange(s), np.arange(s)] += c
    return np.mod(R, ell)


def _minus_scalar(A: QMat, c: int) -> QMat:
    num = np.array(A.num, dtype=A.num.dtype, copy=True)
    idx = np.arange(A.shape[0])
    num[idx, idx] = num[idx, idx] - c * A.den
    return QMat(num, A.den)


def _bits(A: QMat) -> int:
    """Height of an exact matrix: bits of its denominator plus of its largest numerator."""
    return A.den.bit_length() + int(np.max(np.abs(A.num), initial=0)).bit_length()


def _row_abs_max(A: np.ndarray) -> int:
    return int(np.max(np.sum(np.abs(A).astype(np.float64), axis=1))) if A.size else 0


def _times(Z: np.ndarray, s: int) -> np.ndarray:
    return Z if s == 1 else Z.astype(object) * s


def _power(g: flint.fmpz_poly, e: int) -> flint.fmpz_poly:
    out = flint.fmpz_poly([1])
    for _ in range(e):
        out *= g
    return out


def poly_at(f: flint.fmpz_poly, A: QMat) -> QMat:
    """f(A) for an exact square matrix, by Horner's rule (exact)."""
    s = A.shape[0]
    R = QMat(np.zeros((s, s), dtype=np.int64), 1)
    for c in reversed([int(x) for x in f.coeffs()]):
        R = R @ A if not R.is_zero() else R
        if c:
            R = _minus_scalar(R, -c)
    return R


def _crt_list(res: list[int], mods: list[int]) -> int:
    x, m = 0, 1
    for r, q in zip(res, mods, strict=True):
        t = ((r - x) * pow(m, -1, q)) % q
        x += m * t
        m *= q
    return x


def _ramanujan_sum(o: int, e: int) -> int:
    """Σ over primitive o-th roots of unity ζ of ζ^e (common practice)."""
    return sum(moebius(o // d) * d for d in divisors(gcd(o, e)))


def _carmichael(u: int) -> int:
    lam = 1
    for p, e in factor(u):
        t = (1 if e == 1 else (2 if e == 2 else 2 ** (e - 2))) if p == 2 else (p - 1) * p ** (e - 1)
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
        deg = sum(1 for j in range(1, o + 1) if gcd(j, o) == 1)
        ps = [0] * (deg + 1)
        for m in range(1, deg + 1):
            ps[m] = sum(comb(m, i) * c ** (m - i) * _ramanujan_sum(o, 2 * i - m)
                        for i in range(m + 1))
        e = [1] + [0] * deg  # Newton: m·e_m = Σ_{i=1}^{m} (−1)^(i−1) e_{m−i} p_i
        for m in range(1, deg + 1):
            e[m] = sum((-1) ** (i - 1) * e[m - i] * ps[i] for i in range(1, m + 1)) // m
        out.add(tuple((-1) ** (deg - j) * e[deg - j] for j in range(deg + 1)))
    return out


def new_space(N: int, k: int) -> NewSpace:
    """The new part of level N, weight k (functionals on the sign +1 symbols)."""
    return NewSpace(cuspidal_space(N, k, 1))
