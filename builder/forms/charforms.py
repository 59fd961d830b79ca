"""Newform orbits of S_k(Γ0(N), χ) for a nontrivial character orbit [χ], modulo primes.

A *unit* is (N, k, [χ]): the Galois orbit of χ (the characters χ^a, a ∈ (Z/mZ)^×,
m = order χ).  A Galois orbit of newforms with character in [χ] has absolute degree
d = [K_f : Q] and meets every S_k(N, χ^a) in d/φ(m) forms (relative degree over Q(χ)).
Everything is computed modulo primes ℓ ≡ 1 (mod m), < 2^21, for every conjugate χ^a
(builder.symbols.charspace; ζ_m ↦ ω_ℓ^a), and made exact by certificates and bounds:

1. **Certified subspaces.**  In M = M_k(N, χ^a)⁺ mod ℓ: the cuspidal part S = ker(boundary)
   and the new part V = S ∩ ker β_1 ∩ ker β_p (degeneracy maps to N/p, cond χ | N/p,
   [St] §8.6).  Dimensions only grow modulo ℓ; a prime is used only when dim S and dim V
   equal the Cohen–Oesterlé dimension of S_k(N, χ) and its new part
   (builder.checks.char_formulas), so that S and V mod ℓ are the reductions of the exact
   subspaces ([St] Thm 8.x: the +1 cuspidal symbols are S_k(N, χ) as a Hecke module).
2. **Exact absolute characteristic polynomials.**  Π_a charpoly(T_q | V(χ^a)) ∈ Z[x]: its
   roots are the σ(a_q), |σ(a_q)| ≤ 2q^((k−1)/2) (Deligne), so CRT past 2(1 + ρ)^deg gives
   it exactly.  Its irreducible factors of multiplicity one are the orbits; repeated ones
   are refined with the next prime on their primary parts (strong multiplicity one), as for
   the trivial character.  The degrees add up to φ(m)·dim V (checked).
   Above absolute degree ``RELATIVE_ABOVE`` the new part is first tested for
   irreducibility over Q(χ) instead, from the factorisations of its relative charpoly
   modulo the degree-one primes 𝔩 above one or two ℓ (``_irreducible_combo``): if it is,
   the unit is one orbit and no absolute polynomial is lifted (none is stored).  If it is
   not, the new part is cut by the W_Q whose eigenvalues ±Q^((k−2)/2)·ζ_m^t lie in Q(χ)
   and into its CM and non-CM parts (``_irreducible_pieces``); each piece, Galois-stable
   over Q(χ), is tested the same way and irreducible pieces are the orbits.  Otherwise the
   absolute path, refused when its polynomial cannot be lifted.
3. **Eigen-functionals.**  For an orbit (F, the operator T_q whose charpoly it is) and a
   conjugate a: f_a = gcd(F mod ℓ, charpoly_a) is its relative factor; the functionals of
   the orbit are the kernel of f_a(T_q^t) on M*, cut further by g(T_{q'}^t) (g the
   charpoly of T_{q'} on the orbit's subspace) until its dimension is deg f_a — a kernel
   that can only be too big, never too small, modulo ℓ, so equality certifies it.  An
   eigenvector over F_ℓ[x]/(f_a) gives a_p = φ(T_p v)/φ(v) by one Heilbronn sum.
4. **Exact numbers.**  Tr_{K/Q} a_n = Σ_a Tr(a_n over F_ℓ[x]/(f_a)) lifted past Deligne's
   bound d·σ0(n)·n^((k−1)/2); a_p ∈ K = Q[x]/(F) (x = a_q generates K since F is
   irreducible of degree d) from the CRT of its images in the F_ℓ[x]/(f_a), through
   b = a_p·F'(x) with the bound of builder.forms.eigen (valid for complex roots too).
5. **Atkin–Lehner pseudo-eigenvalues.**  At p | N with χ trivial modulo p (p^e = Q ∥ N)
   the integral W_Q of Atkin–Li's normalisation maps S_k(N, χ) to itself and commutes
   with the T_q, q ∤ N, and every newform f has f|W_Q = λ_Q·f, |λ_Q| = 1, λ_Q² =
   χ̄_{N/Q}(Q) ([AL78] §1).  Its eigenvalue on the +1 symbols,
   w_Q = Q^(k/2−1)·λ_Q ∈ K, is read off the eigen-functionals like a_p and made exact the
   same way (|σ(w_Q)| = Q^(k/2−1)); stored for orbits with exact a_p.  For p ∥ N it is
   −p^(k−2)/a_p ([AL78] §2; the tests check it).
Atkin–Lehner *signs*, the Fricke sign, the root number and L-values are not recorded for a
nontrivial χ (W_N maps S_k(N, χ) to S_k(N, χ̄)): those fields are None.

[AL78] A. O. L. Atkin, W.-C. W. Li, Twists of newforms and pseudo-eigenvalues of
W-operators, Invent. Math. 48 (1978).
"""

from __future__ import annotations

import time
from functools import cached_property, lru_cache
from math import comb, gcd, isqrt

import flint
import numpy as np

from builder.arith import factor, iter_primes, prime_divisors, primes_up_to, sturm_bound
from builder.characters import CharacterOrbit, primes_one_mod
from builder.forms.eigen import _crt, _h_matrix, deligne_trace_bound, krylov_start
from builder.forms.fields import NumberField, canonical_polynomial, change_basis_matrix
from builder.forms.newspace import _kernel_mod
from builder.forms.record import NewformRecord, Params, SpaceRecord, make_label
from builder.linalg_modp import matmul_mod, residue_nmod_mat, rref_mod
from builder.symbols.charspace import CharSpace, char_space, induced_values

FIELD_BOUND = 50
Label = tuple  # refinement path: ((q, F coefficients, e), ...)


# -- small modular helpers --------------------------------------------------------------------


def _nmod(coeffs, ell: int) -> flint.nmod_poly:
    return flint.nmod_poly([int(c) % ell for c in coeffs], ell)


def _charpoly_mod(A: np.ndarray, ell: int) -> flint.nmod_poly:
    s = A.shape[0]
    if s == 0:
        return flint.nmod_poly([1], ell)
    return residue_nmod_mat(A, ell).charpoly()


def _poly_at(f: flint.nmod_poly, A: np.ndarray, ell: int) -> np.ndarray:
    """f(A) modulo ℓ by Paterson–Stockmeyer (M. S. Paterson, L. J. Stockmeyer, On the number
    of nonscalar multiplications necessary to evaluate polynomials, SIAM J. Comput. 2 (1973);
    from memory): the powers I, A, …, A^(b−1)
    once, then Horner in A^b over blocks of b coefficients — about 2√deg f matrix
    products instead of deg f (the eigen-functionals evaluate f_a of degree up to
    dim_new on the whole symbol space)."""
    s = A.shape[0]
    coeffs = [int(x) for x in f.coeffs()]
    b = max(1, isqrt(len(coeffs)))
    while b > 1 and b * s * s > (1 << 24):  # the powers kept: at most 128 MB
        b -= 1
    powers = [np.eye(s)]
    for _ in range(1, b):
        powers.append(np.mod(matmul_mod(powers[-1], A, ell), ell))
    stack = np.stack(powers)
    step = np.mod(matmul_mod(powers[-1], A, ell), ell)  # A^b
    R = np.zeros((s, s))
    for i in reversed(range(0, len(coeffs), b)):
        block = np.array(coeffs[i : i + b], dtype=np.float64)
        part = np.mod(np.tensordot(block, stack[: len(block)], axes=1), ell)  # exact
        R = np.mod(matmul_mod(R, step, ell) + part, ell)
    return R


def _left_kernel_cols(A: np.ndarray, ell: int) -> tuple[np.ndarray, list[int]]:
    """(K, cols): rows K spanning {x : x·A = 0} modulo ℓ, K[:, cols] = identity."""
    K, free = _kernel_mod(np.ascontiguousarray(A.T), ell)
    return np.ascontiguousarray(K.T), free


def _product_basis(Y: np.ndarray, ycols: list[int], S: np.ndarray, scols: list[int],
                   ell: int) -> tuple[np.ndarray, list[int]]:
    """(Y·S, cols) for Y[:, ycols] = identity and S[:, scols] = identity: then
    (Y·S)[:, scols[ycols]] = identity — a basis with its pivots, no elimination."""
    return np.mod(matmul_mod(Y, S, ell), ell), [scols[c] for c in ycols]


def _degree_sums(f: flint.nmod_poly) -> int:
    """Bit e set iff e is the degree of a product of some irreducible factors of f mod ℓ
    (with multiplicity): the degrees a factor over Q(χ) could have (``_irreducible_combo``)."""
    sums = 1
    for g, e in f.factor()[1]:
        for _ in range(e):
            sums |= sums << g.degree()
    return sums


def _restrict_rows(V: np.ndarray, piv: list[int], T: np.ndarray, ell: int) -> np.ndarray:
    """Matrix of T (row action) on the row space of V, V[:, piv] = identity."""
    return matmul_mod(V, T, ell)[:, piv]


def _power(g: flint.fmpz_poly, e: int) -> flint.fmpz_poly:
    out = flint.fmpz_poly([1])
    for _ in range(e):
        out *= g
    return out


# -- one conjugate space modulo one prime -------------------------------------------------------


class _Conj:
    """M_k(N, χ^a)⁺ modulo ℓ with its certified new part V (rows, V[:, piv] = identity)."""

    def __init__(self, unit: CharUnit, ell: int, a: int) -> None:
        self.unit, self.ell, self.a = unit, ell, a
        N, k, chi = unit.N, unit.k, unit.chi
        self.M: CharSpace = char_space(N, k, chi, 1, ell, conj=a)
        M = self.M
        self.ok = False
        self.dim_s = 0
        if M.dim == 0:
            self.V = np.zeros((0, 0))
            self.piv: list[int] = []
            self.ok = unit.dim_cusp == 0
            return
        B = M.boundary()
        S, scols = _left_kernel_cols(B, ell) if B.shape[1] else (np.eye(M.dim),
                                                                  list(range(M.dim)))
        self.dim_s = S.shape[0]
        if S.shape[0] != unit.dim_cusp:
            return
        conds = []
        for p in prime_divisors(N):
            if (N // p) % chi.conductor:
                continue
            tgt = CharSpace(N // p, k, induced_values(M.values, N, N // p), 1, ell)
            if tgt.dim == 0:
                continue
            for t in (1, p):
                conds.append(M.degeneracy(tgt, t))
        if conds and S.shape[0]:
            D = matmul_mod(S, np.concatenate(conds, axis=1), ell)
            Y, ycols = _left_kernel_cols(D, ell)
            self.V, self.piv = _product_basis(Y, ycols, S, scols, ell)
        else:
            self.V, self.piv = np.mod(S, ell), scols
        self.ok = self.V.shape[0] == unit.dim_new

    @cached_property
    def _ops(self) -> dict:
        return {}

    def op(self, q: int) -> np.ndarray:
        """T_q on V (row action, coordinates read at V's pivot columns)."""
        if q not in self._ops:
            self._ops[q] = _restrict_rows(self.V, self.piv, self.M.hecke(q), self.ell)
        return self._ops[q]

    def combo(self, combo: tuple) -> np.ndarray:
        """T = Σ c_q T_q + c·⟨g⟩ on V (row action); ⟨g⟩ acts on S_k(N, χ^a) by χ^a(g)."""
        terms, (g, c) = combo
        n = self.V.shape[0]
        A = np.zeros((n, n))
        for q, cq in terms:
            A = np.mod(A + cq * self.op(q), self.ell)
        A[np.arange(n), np.arange(n)] += c * int(self.M.values[g % self.unit.N])
        return np.mod(A, self.ell)

    def combo_full(self, combo: tuple) -> np.ndarray:
        """The same operator on the whole symbol space M (row action)."""
        terms, (g, c) = combo
        n = self.M.dim
        A = np.zeros((n, n))
        for q, cq in terms:
            A = np.mod(A + cq * self.M.hecke(q), self.ell)
        A[np.arange(n), np.arange(n)] += c * int(self.M.values[g % self.unit.N])
        return np.mod(A, self.ell)


# -- the unit ---------------------------------------------------------------------------------


class CharOrbit:
    """An absolute Galois orbit: the irreducible factor F (degree d) of the absolute
    characteristic polynomial of the unit's splitting operator T (``CharUnit.combo``) —
    or, with ``poly = None``, a *relative* orbit: the whole new part, or a ``piece`` of it
    (Atkin–Lehner eigenspaces, CM parts), when that is irreducible over Q(χ)
    (``CharUnit.split``: F is then never lifted; ``dim`` = φ(m)·its dimension).
    ``piece``: the cuts that define it (``CharUnit._piece_rows``)."""

    def __init__(self, poly: flint.fmpz_poly | None, dim: int | None = None,
                 piece: tuple = ()) -> None:
        self.poly = poly
        self._dim = dim
        self.piece = piece

    @property
    def dim(self) -> int:
        return self.poly.degree() if self.poly is not None else self._dim

    @property
    def relative(self) -> bool:
        return self.poly is None


class CharUnit:
    """S_k(Γ0(N), χ) for the character orbit of χ: splitting and eigen-data (module doc)."""

    def __init__(self, N: int, k: int, chi: CharacterOrbit) -> None:
        from builder.checks.char_formulas import dim_cusp, dim_new

        self.N, self.k, self.chi = N, k, chi
        self.dim_cusp = dim_cusp(N, k, chi)
        self.dim_new = dim_new(N, k, chi)
        self.conjugates = chi.conjugates()
        self.phi_m = len(self.conjugates)
        self._states: dict[tuple[int, int], _Conj] = {}
        self._good: list[int] = []  # primes ℓ where every conjugate is certified
        # ⟨g⟩ with χ(g) of order m: its scalar generates Q(χ)
        self.gen = next(x for x in range(1, max(N, 2)) if gcd(x, N) == 1 and (
            chi.order == 1 or gcd(chi.exponent(x), chi.order) == 1))

    # -- primes ----------------------------------------------------------------------------------
    def conj(self, ell: int, a: int) -> _Conj:
        if (ell, a) not in self._states:
            self._states[(ell, a)] = _Conj(self, ell, a)
        return self._states[(ell, a)]

    def primes(self, limit: int = 80):
        """Primes ℓ ≡ 1 (mod m) at which every conjugate's new part is certified (an error
        after ``limit`` primes that are not)."""
        yield from list(self._good)
        tried = 0
        for ell in primes_one_mod(self.chi.order):
            if ell in self._good:
                continue
            if all(self.conj(ell, a).ok for a in self.conjugates):
                self._good.append(ell)
                yield ell
            else:
                for a in self.conjugates:
                    self._states.pop((ell, a), None)
                tried += 1  # only failures count: a wrong dimension shows up at every ℓ
                if tried > limit:
                    raise ArithmeticError(f"level {self.N}: no certified prime for "
                                          f"character {self.chi.index}")

    def good_hecke_primes(self) -> list[int]:
        """Primes q ∤ N up to the Sturm bound, and at least 8 of them: orbits that differ
        only at primes beyond the bound (as at N = 12, k = 3) must still be separated."""
        B = max(sturm_bound(self.N, self.k), 2)
        out = [q for q in primes_up_to(max(B, 3)) if self.N % q]
        for q in iter_primes(10**6):
            if len(out) >= 8:
                break
            if q > B and self.N % q:
                out.append(q)
        return out

    # -- the splitting operator and its exact absolute characteristic polynomial -----------------
    def _combos(self):
        """Candidate operators T = Σ c_q T_q + c⟨g⟩, in a fixed order (ours)."""
        qs = self.good_hecke_primes()
        g = self.gen
        for r in range(1, len(qs) + 1):
            patterns = ((1,) * r, tuple(range(1, r + 1))) if r > 1 else ((1,),)
            for pattern in patterns:
                for c in (1, 2, 3):
                    yield (tuple(zip(qs[:r], pattern, strict=True)), (g, c))

    def root_bound(self, combo: tuple) -> int:
        """A bound on |σ(a_T)|: Σ |c_q|·2q^((k−1)/2) + |c| (Deligne)."""
        terms, (_, c) = combo
        return sum(abs(cq) * (isqrt(4 * q ** (self.k - 1)) + 1) for q, cq in terms) + abs(c)

    def charpoly(self, combo: tuple, which=None) -> flint.fmpz_poly:
        """Π_a charpoly(T | V(χ^a)) ∈ Z[x] (or of T_q alone: which = q), exactly.

        Two stages.  The relative charpoly P ∈ Z[ζ_m][x] (on V(χ), degree dim_new) is
        lifted from its images at the conjugates, ζ_m ↦ ω_ℓ^a, which determine it modulo
        ℓ (ℓ splits completely in Q(ζ_m)): the power-basis coordinates of a coefficient c
        are V⁻¹·(σ_a(c))_a, V the complex Vandermonde of the ζ_m^a, so they are bounded by
        ‖V⁻¹‖_∞·max_a |σ_a(c)| ≤ ‖V⁻¹‖_∞·C(d, j)ρ^j (Deligne, ρ = ``root_bound``).
        The absolute polynomial is then the norm Π_a σ_a(P), by CRT over further primes
        at the cost of polynomial products only."""
        key = (combo, which)
        cache = self.__dict__.setdefault("_charpolys", {})
        if key in cache:
            return cache[key]
        rho = self.root_bound(combo) if which is None else isqrt(4 * which ** (self.k - 1)) + 1

        def image(ell: int, a: int) -> flint.nmod_poly:
            st = self.conj(ell, a)
            return _charpoly_mod(st.combo(combo) if which is None else st.op(which), ell)

        out = self._norm_of_relative(self.primes(), image, self.dim_new, rho)
        cache[key] = out
        return out

    def _norm_of_relative(self, primes, image, d: int, rho: int) -> flint.fmpz_poly:
        """Π_a σ_a(P) for a monic P ∈ Z[ζ_m][x] of degree d with roots bounded by ρ, from
        its images ``image(ℓ, a)`` (ζ_m ↦ ω_ℓ^a) at the primes given (see ``charpoly``)."""
        m, conj = self.chi.order, self.conjugates
        need = 2 * _vinv_norm(m) * (1 + rho) ** d + 1
        res, mods, prod = [], [], 1
        for ell in primes:
            vals = [[int(c) for c in image(ell, a).coeffs()] for a in conj]
            res.append(_coords_mod(np.array(vals, dtype=np.int64).T, m, conj, ell))
            mods.append(ell)
            prod *= ell
            if prod > need:
                break
        rel = _crt_sym(res, mods)
        return _norm_poly(rel, m, conj, rho, d)

    def check_liftable(self) -> None:
        """Raise ArithmeticError at once (not after hours of conjugate spaces) when no
        absolute charpoly can be lifted: its CRT needs 2(1 + ρ)^(φ(m)·dim_new) below the
        product of all primes ℓ ≡ 1 (mod m), ℓ < 2^21, and the first combination has the
        smallest ρ.  Such units need the splitting over Q(χ) (not implemented)."""
        deg = self.phi_m * self.dim_new
        need = 2 * (1 + self.root_bound(next(self._combos()))) ** deg + 1
        have = _moduli_product(self.chi.order, need)
        if need >= have:
            raise ArithmeticError(
                f"level {self.N} weight {self.k} character {self.chi.index}: absolute degree "
                f"φ({self.chi.order})·{self.dim_new} = {deg} is beyond the absolute method "
                f"(its charpoly needs {need.bit_length()} bits of primes ≡ 1 mod "
                f"{self.chi.order} below 2^21, there are {have.bit_length()}); not computed")

    def _irreducible_combo(self, tries: int = 2) -> tuple | None:
        """The first combination T if its relative charpoly P ∈ Z[ζ_m][x] on V(χ) is
        proved irreducible over Q(χ) by its factorisations modulo the primes 𝔩 = (ℓ, ζ_m −
        ω_ℓ^a) of degree one (the conjugates of the first ``tries`` certified ℓ), else None.
        A factor of P in Z[ζ_m][x] (monic factors of a monic polynomial over the integrally
        closed Z[ζ_m], Gauss) reduces modulo every 𝔩 to a product of some of the
        irreducible factors of P mod 𝔩, so its degree is a subset sum of their degrees at
        every 𝔩: when only 0 and dim_new are sums at all the 𝔩 seen, P is irreducible —
        also when no single 𝔩 keeps it irreducible (inner twists: all degrees even).  Then
        the new part is one Galois orbit: the orbits meet S_k(N, χ) in the Gal(Q̄/Q(χ))-
        orbits of its eigenforms, i.e. in the irreducible factors of P.  P mod 𝔩 is the
        charpoly of T on the certified V(χ^a) mod ℓ, so nothing is lifted."""
        combo = self._squarefree_combo()
        if combo is None:
            return None
        d = self.dim_new
        possible = (1 << (d + 1)) - 1  # bit e: a factor of degree e is not excluded
        for t, ell in enumerate(self.primes()):
            if t >= tries:
                break
            for a in self.conjugates:
                possible &= _degree_sums(_charpoly_mod(self.conj(ell, a).combo(combo), ell))
                if possible == 1 | (1 << d):
                    return combo
        return None

    def _squarefree_combo(self, tries: int = 6) -> tuple | None:
        """The first of the first ``tries`` combinations whose relative charpoly is
        squarefree modulo the first 𝔩 (hence over Q(χ)); T_q alone cannot separate f from
        a twist f ⊗ ψ with ψ(q) = 1, and then its charpoly is a square."""
        ell = next(self.primes())
        for t, combo in enumerate(self._combos()):
            if t >= tries:
                break
            f = _charpoly_mod(self.conj(ell, self.conjugates[0]).combo(combo), ell)
            if f.gcd(f.derivative()).degree() == 0:
                return combo
        return None

    def _squarefree_mod(self, combo: tuple, ell: int) -> bool:
        """Whether the absolute charpoly of T, Π_a charpoly(T | V(χ^a)), is squarefree
        modulo the certified ℓ — then it is squarefree over Q (a square factor would
        reduce to one); one image per conjugate instead of a lift."""
        P = flint.nmod_poly([1], ell)
        for a in self.conjugates:
            P *= _charpoly_mod(self.conj(ell, a).combo(combo), ell)
        return P.gcd(P.derivative()).degree() == 0

    @cached_property
    def split(self) -> tuple[tuple, list[CharOrbit]]:
        """(T, orbits): the first T whose absolute charpoly is squarefree; its irreducible
        factors are then in bijection with the Galois orbits of newforms (equal factors
        would be needed for two orbits with the same minimal polynomial of a_T).  The
        combinations squarefree modulo the first certified ℓ come first (each is squarefree
        over Q, and the others would be lifted in vain); then the rest, in case ℓ divides
        every discriminant."""
        if self.dim_new == 0:
            return None, []
        if self.phi_m > 1 and self.phi_m * self.dim_new > RELATIVE_ABOVE:
            combo = self._irreducible_combo()
            if combo is not None:
                return combo, [CharOrbit(None, self.phi_m * self.dim_new)]
            found = self._irreducible_pieces()
            if found is not None:
                return found
        self.check_liftable()
        ell = next(self.primes())
        skipped: list[tuple] = []

        def candidates():
            for c in self._combos():
                if self._squarefree_mod(c, ell):
                    yield c
                else:
                    skipped.append(c)
            yield from skipped

        for combo in candidates():
            P = self.charpoly(combo)
            _, facs = P.factor()
            if all(e == 1 for _, e in facs):
                orbits = [CharOrbit(g) for g, _ in sorted(
                    facs, key=lambda fe: (fe[0].degree(), [int(c) for c in fe[0].coeffs()]))]
                return combo, orbits
        raise ArithmeticError(f"level {self.N} weight {self.k} character {self.chi.index}: "
                              "no combination of Hecke operators split the new part")

    @property
    def orbits(self) -> list[CharOrbit]:
        return self.split[1]

    # -- eigen-data modulo ℓ --------------------------------------------------------------------
    def _rows(self, ell: int, orbit: CharOrbit):
        """Per conjugate a: (f_a, T on V, W_f, pivots) — f_a = gcd(F mod ℓ, charpoly of T
        on V(χ^a)) and W_f = ker f_a(T) on V as rows in M coordinates — or None if ℓ is
        bad for the orbit (F not squarefree or not coprime to the rest modulo ℓ, or a
        kernel of the wrong dimension)."""
        cache = self.__dict__.setdefault("_orbit_rows", {})
        key = (ell, id(orbit))
        if key in cache:
            return cache[key]
        if orbit.relative:
            cache[key] = self._rows_relative(ell, orbit.piece)
            return cache[key]
        combo = self.split[0]
        F = orbit.poly
        Fl = _nmod(F.coeffs(), ell)
        rest = _nmod((self.charpoly(combo) // F).coeffs(), ell)
        out: dict | None = {}
        if Fl.gcd(Fl.derivative()).degree() != 0 or Fl.gcd(rest).degree() != 0:
            out = None
        for a in self.conjugates if out is not None else ():
            st = self.conj(ell, a)
            A = st.combo(combo)
            fa = Fl.gcd(_charpoly_mod(A, ell))
            if fa.degree() == 0:
                out = None
                break
            fa = fa * flint.nmod_poly([pow(int(fa.coeffs()[-1]), -1, ell)], ell)
            # the orbit inside V: rows W_f (in M coordinates) = ker f_a(T) on V
            Kf, kcols = _left_kernel_cols(_poly_at(fa, A, ell), ell)
            Wf, wpiv = _product_basis(Kf, kcols, st.V, st.piv, ell)
            if Wf.shape[0] != fa.degree():
                out = None
                break
            out[a] = (fa, A, Wf, wpiv)
        cache[key] = out
        return out

    def _rows_relative(self, ell: int, piece: tuple, combo: tuple | None = None) -> dict | None:
        """``_rows`` for a relative orbit: W_f = the new part V(χ^a), or its joint
        eigenspace ``piece`` (``_piece_rows``), f_a = charpoly of T on it; None if some
        f_a is not squarefree modulo ℓ or ℓ is bad for the piece."""
        combo = combo or self.split[0]
        out = {}
        for a in self.conjugates:
            st = self.conj(ell, a)
            A = st.combo(combo)
            Wf, wpiv = (st.V, st.piv) if not piece else self._piece_rows(st, piece, combo)
            if Wf is None:
                return None
            fa = _charpoly_mod(_restrict_rows(Wf, wpiv, st.combo_full(combo), ell)
                               if piece else A, ell)
            if fa.gcd(fa.derivative()).degree() != 0:
                return None
            out[a] = (fa, A, Wf, wpiv)
        return out

    # -- relative pieces: Atkin–Lehner eigenspaces and CM parts of the new part ------------------
    def _al_roots(self) -> list[tuple[int, int]]:
        """(Q, t) for the Q ∥ N with χ trivial modulo Q whose W_Q has its eigenvalues
        ±Q^((k−2)/2)·ζ_m^t in Q(χ): W_Q² = χ̄_{N/Q}(Q)·Q^(k−2) on the new part ([AL78] §1),
        so they are when k is even or Q a square, and χ̄_{N/Q}(Q) = ζ_m^(−e) is a square in
        μ_m (m odd, or e even): 2t ≡ −e (mod m)."""
        m, out = self.chi.order, []
        for p in al_primes(self.N, self.chi):
            Q = p ** dict(factor(self.N))[p]
            if self.k % 2 and isqrt(Q) ** 2 != Q:
                continue
            R = self.N // Q
            e = self.chi.exponent(Q + R * pow(R, -1, Q))  # n ≡ Q (mod N/Q), n ≡ 1 (mod Q)
            if m % 2:
                out.append((Q, (-e * pow(2, -1, m)) % m))
            elif e % 2 == 0:
                out.append((Q, (-e // 2) % m))
        return out

    def _piece_rows(self, st: _Conj, piece: tuple, combo: tuple) -> tuple:
        """(rows, pivots) of the piece of V(χ^a) mod ℓ, cut entry by entry:
        ("W", Q, t, sign): ker(W_Q − σ_a(λ)), λ = sign·Q^((k−2)/2)·ζ_m^t ↦
        sign·Q^((k−2)/2)·ω^(a·t); ("CM", D, True): ⋂ ker T_p over the first ``CM_CUT``
        primes p ∤ N inert in Q(√D); ("CM", D, False): its complement ker h(T), h the
        charpoly of T on the piece over that of the kernel.  (None, None) when ℓ | 2Q or
        the two parts of a CM cut are not coprime.  For ℓ ∤ 2Q the W_Q-eigenspaces mod ℓ
        are the reductions of the exact ones (the projectors (W_Q ± λ)/(±2λ) are
        ℓ-integral); the CM kernels only can be too big, which ``_irreducible_pieces``
        rules out by the count of CM newforms."""
        from builder.characters import root_of_unity
        from builder.forms.unit import kronecker

        ell, M = st.ell, st.M
        w = root_of_unity(ell, self.chi.order) if self.chi.order > 1 else 1
        Wf, wpiv = st.V, st.piv
        for entry in piece:
            if entry[0] == "W":
                _, Q, t, sign = entry
                if (2 * Q) % ell == 0:
                    return None, None
                lam = sign * isqrt(Q ** (self.k - 2)) * pow(w, st.a * t, ell) % ell
                if ("W", Q) not in st._ops:
                    st._ops[("W", Q)] = np.stack([M.atkin_lehner_of_symbol(x, Q) for x in M.free])
                A = _restrict_rows(Wf, wpiv, st._ops[("W", Q)], ell)
                A = np.mod(A - lam * np.eye(Wf.shape[0]), ell)
                K, kcols = _left_kernel_cols(A, ell)
                Wf, wpiv = _product_basis(K, kcols, Wf, wpiv, ell)
                continue
            _, D, inside = entry
            In, ipiv = Wf, wpiv
            inert = (p for p in iter_primes(10**6) if self.N % p and kronecker(D, p) == -1)
            for _, p in zip(range(CM_CUT), inert, strict=False):
                if In.shape[0] == 0:
                    break
                K, kcols = _left_kernel_cols(_restrict_rows(In, ipiv, M.hecke(p), ell), ell)
                In, ipiv = _product_basis(K, kcols, In, ipiv, ell)
            if inside:
                Wf, wpiv = In, ipiv
                continue
            T = st.combo_full(combo)
            f = _charpoly_mod(_restrict_rows(Wf, wpiv, T, ell), ell)
            g = _charpoly_mod(_restrict_rows(In, ipiv, T, ell), ell)
            h = f // g
            if h * g != f or h.gcd(g).degree() != 0:
                return None, None
            A = _poly_at(h, _restrict_rows(Wf, wpiv, T, ell), ell)
            K, kcols = _left_kernel_cols(A, ell)
            Wf, wpiv = _product_basis(K, kcols, Wf, wpiv, ell)
        return Wf, wpiv

    def _irreducible_pieces(self, tries: int = 2) -> tuple | None:
        """(T, orbits) when the new part, cut by the W_Q of ``_al_roots`` (joint
        eigenspaces) and by CM (for each D with CM newforms, ``cm_newform_count``: the
        common kernel of T_p, p inert, and its complement), has pieces that are each
        irreducible over Q(χ) — the subset-sum test of ``_irreducible_combo`` on the
        charpoly of T on each piece modulo the 𝔩 above the first ``tries`` certified ℓ —
        else None.  W_Q and the T_p are defined over Q(χ) and commute with the T_q, q ∤ N,
        so each piece is stable under Gal(Q̄/Q(χ)) and, irreducible, one Galois orbit.
        Dimensions: the W_Q-eigenspaces mod ℓ only grow and their sum is direct, so Σ =
        dim_new certifies them; the CM kernels only grow, and contain the reductions of
        the CM subspaces, so Σ of their dimensions = the number of CM newforms certifies
        them (then their complements too)."""
        from builder.forms.hecke_characters import cm_newform_count
        from builder.forms.unit import _fundamental_discriminants_dividing

        combo = self._squarefree_combo()
        cms = {D: c for D in _fundamental_discriminants_dividing(self.N)
               if (c := cm_newform_count(D, self.N, self.k, self.chi.order, self.chi.exponent))}
        roots = self._al_roots()
        if combo is None or not (roots or cms):
            return None
        pieces = [()]
        for Q, t in roots:
            pieces = [p + (("W", Q, t, sg),) for p in pieces for sg in (1, -1)]
        primes = [ell for _, ell in zip(range(tries), self.primes(), strict=False)]
        dims = self._piece_dims(primes[0], pieces, combo)
        if dims is None or sum(dims.values()) != self.dim_new:
            return None
        pieces = [p for p in pieces if dims[p]]
        for D, count in cms.items():
            pieces = [p + (("CM", D, True),) for p in pieces] + [
                p + (("CM", D, False),) for p in pieces if not any(e[0] == "CM" and e[2]
                                                                  for e in p)]
            dims = self._piece_dims(primes[0], pieces, combo)
            if dims is None or sum(d for p, d in dims.items() if p[-1] == ("CM", D, True)
                                   ) != count:
                return None
            pieces = [p for p in pieces if dims[p]]
        found = []
        for pc in pieces:
            d = dims[pc]
            possible = (1 << (d + 1)) - 1
            for ell in primes:
                rows = self._rows_relative(ell, pc, combo)
                if rows is None:
                    continue
                for fa, *_ in rows.values():
                    if fa.degree() != d:
                        return None
                    possible &= _degree_sums(fa)
            if possible != 1 | (1 << d):
                return None
            found.append(CharOrbit(None, self.phi_m * d, piece=pc))
        return combo, found

    def _piece_dims(self, ell: int, pieces: list, combo: tuple) -> dict | None:
        dims = {}
        for pc in pieces:
            rows = self._rows_relative(ell, pc, combo)
            if rows is None:
                return None
            dims[pc] = rows[self.conjugates[0]][0].degree()
        return dims

    def _eigen(self, ell: int, orbit: CharOrbit):
        """Per conjugate a: (f_a, φ on the free generators (n × d_a), v, φ(v)⁻¹) or None."""
        cache = self.__dict__.setdefault("_eig", {})
        key = (ell, id(orbit))
        if key in cache:
            return cache[key]
        rows = self._rows(ell, orbit)
        out: dict | None = None if rows is None else {}
        for a in self.conjugates if out is not None else ():
            fa, _, Wf, wpiv = rows[a]
            piece = self._functionals(self.conj(ell, a), self.split[0], fa, Wf, wpiv)
            if piece is None:
                out = None
                break
            out[a] = piece
        cache[key] = out
        return out

    def _functionals(self, st: _Conj, combo: tuple, fa, Wf: np.ndarray, wpiv: list[int]):
        """The orbit's functionals on M as an eigenvector over F_ℓ[x]/(f_a) (module doc)."""
        ell, M = st.ell, st.M
        d = fa.degree()
        # its functionals: columns U with f_a(T)·U = 0 on M*, cut further by other operators
        T = st.combo_full(combo)
        U, _ = _kernel_mod(_poly_at(fa, np.ascontiguousarray(T), ell), ell)
        for q in self.good_hecke_primes():
            if U.shape[1] <= d:
                break
            g = _charpoly_mod(_restrict_rows(Wf, wpiv, M.hecke(q), ell), ell)
            Gq = _poly_at(g, np.ascontiguousarray(M.hecke(q)), ell)
            K, _ = _kernel_mod(matmul_mod(Gq, U, ell), ell)
            U = matmul_mod(U, K, ell)
        if U.shape[1] != d:
            return None
        # T on U (column action λ ↦ T·λ): T·E = E·B with E[piv] = identity
        R, piv = rref_mod(np.ascontiguousarray(np.mod(U.T, ell)), ell)
        E = np.ascontiguousarray(R.T)
        B = matmul_mod(T, E, ell)[piv]
        chi = [int(c) for c in _charpoly_mod(B, ell).coeffs()]
        Kv = np.empty((d, d))
        v = krylov_start(d, ell)
        for t in range(d):
            Kv[:, t] = v
            v = matmul_mod(B, v[:, None], ell)[:, 0]
        phi = matmul_mod(E, matmul_mod(Kv, _h_matrix(chi, fa, d, ell), ell), ell)
        for t in range(phi.shape[0]):
            val = flint.nmod_poly([int(x) for x in phi[t]], ell)
            gg, s_, _ = val.xgcd(fa)
            if gg.degree() == 0:
                inv = s_ * flint.nmod_poly([pow(int(gg.coeffs()[0]), -1, ell)], ell)
                return fa, phi, t, inv
        return None

    def aps_mod(self, orbit: CharOrbit, ps: list[int], ell: int) -> dict | None:
        """{a: {p: a_p(χ^a-form) in F_ℓ[x]/(f_a)}} or None if ℓ is bad for the orbit."""
        data = self._eigen(ell, orbit)
        if data is None:
            return None
        cache = self.__dict__.setdefault("_aps", {})
        out = {}
        for a, (fa, phi, v, inv) in data.items():
            want = [p for p in ps if (ell, id(orbit), a, p) not in cache]
            if want:
                rows = self._hecke_rows(ell, a, self.conj(ell, a).M.free[v], want)
                vals = matmul_mod(rows, phi, ell)
                for r, p in enumerate(want):
                    x = flint.nmod_poly([int(y) for y in vals[r]], ell)
                    cache[(ell, id(orbit), a, p)] = (x * inv) % fa
            out[a] = {p: cache[(ell, id(orbit), a, p)] for p in ps}
        return out

    def _hecke_rows(self, ell: int, a: int, x: int, ps: list[int]) -> np.ndarray:
        """Rows T_p(x) modulo ℓ on the χ^a-space, cached per symbol: orbits whose
        eigenvector is read at the same symbol (the first one, nearly always) share one
        Heilbronn sum per p instead of one each."""
        cache = self.__dict__.setdefault("_hecke_row_cache", {})
        need = [p for p in ps if (ell, a, x, p) not in cache]
        if need:
            R = self.conj(ell, a).M.hecke_of_symbol(x, need)
            for r, p in enumerate(need):
                cache[(ell, a, x, p)] = R[r]
        return np.stack([cache[(ell, a, x, p)] for p in ps])

    def good_primes_for(self, orbit: CharOrbit):
        for ell in self.primes():
            if self._eigen(ell, orbit) is not None:
                yield ell

    # -- exact numbers ------------------------------------------------------------------------
    def traces(self, orbit: CharOrbit, B: int) -> list[int]:
        """[Tr_{K/Q} a_n, n = 1..B] exactly (Deligne's bound, CRT)."""
        k, N = self.k, self.N
        need = 2 * deligne_trace_bound(orbit.dim, k, B) + 1
        ps = primes_up_to(B)
        res, mods, prod = [], [], 1
        for ell in self.good_primes_for(orbit):
            aps = self.aps_mod(orbit, ps, ell)
            eig = self._eigen(ell, orbit)
            items = [(by_p, eig[a][0], self.conj(ell, a).M.values) for a, by_p in aps.items()]
            res.append(_traces_rel(items, B, N, k, ell))
            mods.append(ell)
            prod *= ell
            if prod > need:
                break
        return _crt_sym(res, mods)

    def exact_aps(self, orbit: CharOrbit, ps: list[int]) -> dict[int, flint.fmpq_poly]:
        """Exact a_p ∈ K = Q[x]/(F), x = a_T (F irreducible of degree d); |σ(a_p)| ≤
        2p^((k−1)/2) (Deligne)."""
        return self._exact(orbit, ps, lambda ell: self.aps_mod(orbit, ps, ell),
                           lambda p: isqrt(4 * p ** (self.k - 1)) + 1)

    def atkin_lehner_mod(self, orbit: CharOrbit, Qs: list[int], ell: int) -> dict | None:
        """{a: {Q: w_Q in F_ℓ[x]/(f_a)}}: the eigenvalue of the integral W_Q (Q ∥ N, χ
        trivial modulo Q; ``CharSpace.atkin_lehner_of_symbol``) read off by the orbit's
        functionals — W_Q commutes with every T_q, q ∤ N, on M_k(N, χ) ([AL78] §1),
        so it acts on the orbit's cyclic F_ℓ[T]-module of functionals as an element of
        F_ℓ[T]/(f_a)."""
        data = self._eigen(ell, orbit)
        if data is None:
            return None
        out = {}
        for a, (fa, phi, v, inv) in data.items():
            M = self.conj(ell, a).M
            rows = np.stack([M.atkin_lehner_of_symbol(M.free[v], Q) for Q in Qs])
            vals = matmul_mod(rows, phi, ell)
            out[a] = {Q: (flint.nmod_poly([int(y) for y in vals[r]], ell) * inv) % fa
                      for r, Q in enumerate(Qs)}
        return out

    def exact_atkin_lehner(self, orbit: CharOrbit, Qs: list[int]) -> dict[int, flint.fmpq_poly]:
        """Exact w_Q ∈ K for each Q ∥ N with χ trivial modulo Q: f|W_Q = λ_Q·f with
        w_Q = Q^(k/2−1)·λ_Q, |λ_Q| = 1 ([AL78] §1: the pseudo-eigenvalue)."""
        return self._exact(orbit, Qs, lambda ell: self.atkin_lehner_mod(orbit, Qs, ell),
                           lambda Q: isqrt(Q ** (self.k - 2)) + 1)

    def _exact(self, orbit: CharOrbit, keys: list[int], residues, bound) -> dict:
        """Elements of K = Q[x]/(F) from their residues modulo (ℓ, f_a) for every conjugate
        a (``residues(ℓ)`` → {a: {key: value}}), |σ(value)| ≤ ``bound(key)`` for every
        embedding σ: CRT in F_ℓ[x] gives value·F'(x) mod (ℓ, F), whose power-basis
        coordinates are bounded by d·bound·max_j C(d−1, j)ρ^(d−1−j) (the trace-dual basis
        of the roots, ρ = root_bound); CRT over ℓ until twice that is passed."""
        F = orbit.poly
        d = F.degree()
        Fp = F.derivative()
        rho = self.root_bound(self.split[0])
        shape = max(comb(d - 1, j) * rho ** (d - 1 - j) for j in range(d))
        need = 2 * max(d * bound(key) * shape for key in keys) + 1
        res, mods, prod = [], [], 1
        for ell in self.good_primes_for(orbit):
            vals = residues(ell)
            data = self._eigen(ell, orbit)
            Fl, Fpl = _nmod(F.coeffs(), ell), _nmod(Fp.coeffs(), ell)
            per = {}
            for key in keys:
                # CRT in F_ℓ[x]: value ≡ vals[a][key] mod f_a for every conjugate a
                val = _crt_poly([(vals[a][key], data[a][0]) for a in vals], ell)
                per[key] = _coeffs((val * Fpl) % Fl, d)
            res.append(per)
            mods.append(ell)
            prod *= ell
            if prod > need:
                break
        K = NumberField(F)
        inv = K.inv(K.elt([int(c) for c in Fp.coeffs()]))
        out = {}
        for key in keys:
            b = [_sym(_crt([r[key][j] for r in res], mods), prod) for j in range(d)]
            out[key] = K.mul(K.elt(b), inv)
        return out

    def orbit_charpoly(self, orbit: CharOrbit, q: int) -> flint.fmpz_poly:
        """Absolute charpoly of T_q on the orbit: the norm of its relative charpoly (degree
        d/φ(m), lifted to Z[ζ_m][x] as in ``charpoly``, Deligne's bound ρ = 2q^((k−1)/2));
        the orbit's rows W_f suffice, not its functionals."""
        if orbit.relative:
            raise ValueError("a relative orbit has no lifted absolute polynomial")
        if len(self.orbits) == 1:
            return self.charpoly(None, which=q)  # the whole new part: its spaces are built
        rho = isqrt(4 * q ** (self.k - 1)) + 1

        def image(ell: int, a: int) -> flint.nmod_poly:
            _, _, Wf, wpiv = self._rows(ell, orbit)[a]
            return _charpoly_mod(_restrict_rows(Wf, wpiv, self.conj(ell, a).M.hecke(q), ell),
                                 ell)

        primes = (ell for ell in self.primes() if self._rows(ell, orbit) is not None)
        return self._norm_of_relative(primes, image, orbit.dim // self.phi_m, rho)

    def ap_is_zero(self, orbit: CharOrbit, p: int) -> bool:
        """a_p = 0 exactly.  For p ∤ N: ā_p = χ̄(p)a_p in every complex embedding (T_p* =
        χ̄(p)T_p, [DS] Prop. 5.5.2 / [Mi] Thm. 4.5.4), so T = Tr_{K/Q}(χ̄(p)a_p²) =
        Σ_σ |σ(a_p)|² is an integer in [0, d·4p^(k−1)] (Deligne) that vanishes iff a_p = 0:
        one or two primes ℓ decide it.  For p | N, p^r ∥ N, p^s ∥ cond χ: a_p = 0 iff
        r ≥ 2 and s < r; otherwise |a_p|² = p^(k−1) or p^(k−2) ([Li] Thm. 3, [Mi] Thm.
        4.6.17; the tests compare it with the exact a_p)."""
        d, k = orbit.dim, self.k
        if self.N % p == 0:
            r, s = dict(factor(self.N))[p], dict(factor(self.chi.conductor)).get(p, 0)
            return r >= 2 and s < r
        need = 2 * d * 4 * p ** (k - 1) + 1
        res, mods, prod = [], [], 1
        for ell in self.good_primes_for(orbit):
            aps = self.aps_mod(orbit, [p], ell)
            data = self._eigen(ell, orbit)
            t = 0
            for a, by_p in aps.items():
                fa = data[a][0]
                chi_inv = pow(int(self.conj(ell, a).M.values[p % self.N]), -1, ell)
                t += _trace_mod((by_p[p] * by_p[p]) % fa, fa, ell) * chi_inv
            res.append(t % ell)
            mods.append(ell)
            prod *= ell
            if prod > need:
                return _sym(_crt(res, mods), prod) == 0
        raise ArithmeticError("no good prime left")  # pragma: no cover


RELATIVE_ABOVE = 500  # absolute degree above which the new part is first tried whole
CM_CUT = 8  # inert primes whose T_p-kernels cut out a CM piece


def compute_char(N: int, k: int, chi: CharacterOrbit, params: Params, t0: float) -> SpaceRecord:
    """The record of the unit (N, k, [χ]) for a nontrivial character orbit (module doc)."""
    from builder.checks.char_formulas import dim_eisenstein

    U = CharUnit(N, k, chi)
    B = params.trace_bound
    forms = []
    for o in U.orbits:
        traces = U.traces(o, B)
        forms.append(_orbit_record(U, o, traces, params))
    forms.sort(key=lambda f: f["_key"])
    records = []
    for i, f in enumerate(forms, start=1):
        f.pop("_key")
        records.append(NewformRecord(label=make_label(N, k, i, chi.index), orbit=i, **f))
    return SpaceRecord(
        level=N, weight=k, char_index=chi.index,
        dim_cusp=U.dim_cusp, dim_new=U.dim_new, dim_old=U.dim_cusp - U.dim_new,
        dim_eis=dim_eisenstein(N, k, chi), num_orbits=len(records),
        sturm_bound=sturm_bound(N, k), params={"trace_bound": params.trace_bound,
                                              "ap_bound": params.ap_bound,
                                              "dim_cap": params.dim_cap},
        newforms=records, seconds=round(time.perf_counter() - t0, 4),
        char_order=chi.order, char_conductor=chi.conductor, char_parity=chi.parity,
        char_number=chi.number, char_degree=U.phi_m,
    )


def _orbit_record(U: CharUnit, o: CharOrbit, traces: list[int], params: Params) -> dict:
    d = o.dim
    exact = d <= params.dim_cap and not o.relative
    if exact:
        poly, ap, al = _exact_field_data(U, o, params.ap_bound)
    else:
        poly, ap, al = o.poly, None, None
    q0 = U.good_hecke_primes()[0]
    cm = _cm_discriminant(U, o)
    ptraces = [traces[p - 1] for p in primes_up_to(params.trace_bound)]
    return {
        "dim": d,
        "rel_dim": d // U.phi_m,
        "field_poly": [] if o.relative else [int(c) for c in poly.coeffs()],
        "field_disc": (str(int(poly.discriminant())) if d > 1 else "1") if exact else None,
        "traces": traces,
        "atkin_lehner": {},
        "fricke_sign": None,
        "root_number": None,
        "is_cm": cm is not None,
        "cm_disc": cm,
        "lvalue_zero": None,
        "l_ratio": None,
        "ap": ap,
        "al_pseudo": al,
        "hecke_poly_2": None if o.relative else [
            int(c) for c in U.orbit_charpoly(o, q0).coeffs()],
        "_key": (d, ptraces, traces),
    }


def _exact_field_data(U: CharUnit, o: CharOrbit, ap_bound: int):
    """Canonical polynomial (T2-reduced: K has complex embeddings), exact a_p and the
    Atkin–Lehner pseudo-eigenvalues w_{p^e} (p | N, χ trivial modulo p; ``al_primes``)
    in the power basis of its root; the a_n generate an order of rank d (doubling the
    bound)."""
    K = NumberField(o.poly)
    bound = FIELD_BOUND
    cache: dict = {}
    chi_of = _chi_in_K(U, K, o)
    conj = _conjugation(U, K, o, chi_of)
    while True:
        ps = primes_up_to(bound)
        missing = [p for p in ps if p not in cache]
        if missing:
            cache.update(U.exact_aps(o, missing))
        a: list = [None] * (bound + 1)
        a[1] = K.elt([1])
        for p in ps:
            a[p] = cache[p]
        _fill_char(a, bound, U, K, chi_of)
        try:
            poly, beta = canonical_polynomial(K, a[1:], conj=conj)
            break
        except ArithmeticError:
            if bound > 4 * sturm_bound(U.N, U.k) + 100:
                raise
            bound *= 2
    P = change_basis_matrix(K, beta)
    missing = [p for p in primes_up_to(ap_bound) if p not in cache]
    if missing:
        cache.update(U.exact_aps(o, missing))

    def coords(x) -> list[str]:
        row = flint.fmpq_mat(1, K.d, K.coords(x)) * P
        return [str(row[0, j]) for j in range(K.d)]

    Qs = {p: p ** e for p, e in factor(U.N) if p in al_primes(U.N, U.chi)}
    w = U.exact_atkin_lehner(o, list(Qs.values())) if Qs else {}
    return (poly, {p: coords(cache[p]) for p in primes_up_to(ap_bound)},
            {p: coords(w[Q]) for p, Q in Qs.items()})


def al_primes(N: int, chi: CharacterOrbit) -> list[int]:
    """The primes p | N at which χ is trivial (p ∤ cond χ): there W_{p^e} (p^e ∥ N) maps
    S_k(N, χ) to itself and every newform is an eigenvector ([AL78] §1)."""
    return [p for p in prime_divisors(N) if chi.conductor % p]


def _chi_in_K(U: CharUnit, K: NumberField, o: CharOrbit):
    """p ↦ χ(p) ∈ K.  The splitting operator is T = Σ c_q T_q + c⟨g⟩, so χ(g) =
    (x − Σ c_q a_q)/c with x = a_T the generator of K; χ(g) has order m, and
    χ(n) = χ(g)^(e(n)·e(g)⁻¹ mod m) (0 when gcd(n, N) > 1)."""
    terms, (g, c) = U.split[0]
    exact = U.exact_aps(o, [q for q, _ in terms])
    chi_g = K.elt([0, 1])
    for q, cq in terms:
        chi_g = chi_g - exact[q] * cq
    chi_g = chi_g * flint.fmpq(1, c)
    m, chi = U.chi.order, U.chi
    inv = pow(chi.exponent(g), -1, m) if m > 1 else 0
    powers = [K.elt([1])]
    for _ in range(1, m):
        powers.append(K.mul(powers[-1], chi_g))
    if K.mul(powers[-1], chi_g) != powers[0]:
        raise ArithmeticError(f"χ(g) in K does not have order {m}")

    def chi_of(n: int):
        if gcd(n, U.N) != 1:
            return K.elt([0])
        return powers[chi.exponent(n) * inv % m] if m > 1 else powers[0]

    return chi_of


def _conjugation(U: CharUnit, K: NumberField, o: CharOrbit, chi_of) -> flint.fmpq_mat:
    """Complex conjugation of K (a CM field, [Ri] Ribet, Galois representations attached to
    eigenforms with Nebentypus, §1): conj(a_p) = χ̄(p)·a_p for p ∤ N, so conj(x) for
    x = Σ c_q a_q + c·χ(g); the matrix on power-basis coordinates (rows = conj(x^i)),
    checked to be a ring involution (F(conj x) = 0 and conj² = 1)."""
    m = U.chi.order
    terms, (g, c) = U.split[0]
    exact = U.exact_aps(o, [q for q, _ in terms])

    def bar(z):
        return _pow_K(K, z, m - 1)  # χ(n)^(−1) = χ(n)^(m−1)

    cx = bar(chi_of(g)) * c
    for q, cq in terms:
        cx = cx + K.mul(bar(chi_of(q)), exact[q]) * cq
    C = flint.fmpq_mat(K.d, K.d)
    z = K.elt([1])
    for i in range(K.d):
        row = K.coords(z)
        for j in range(K.d):
            C[i, j] = row[j]
        z = K.mul(z, cx)
    val = K.elt([0])
    for coef in reversed(list(K.f.coeffs())):
        val = K.mul(val, cx) + K.elt([coef])
    if val != K.elt([0]) or C * C != flint.fmpq_mat(K.d, K.d, [int(i == j) for i in range(K.d)
                                                               for j in range(K.d)]):
        raise ArithmeticError("complex conjugation of K failed its check")
    return C


def _fill_char(a: list, B: int, U: CharUnit, K: NumberField, chi_of) -> None:
    """a_n ∈ K (n ≤ B) from the a_p by a_{p^(r+1)} = a_p a_{p^r} − χ(p)p^(k−1) a_{p^(r−1)}
    and multiplicativity ([DS] Prop. 5.8.5 with character)."""
    one = K.elt([1])
    for p in primes_up_to(B):
        cp = chi_of(p) * (p ** (U.k - 1))
        prev2, prev, q = one, a[p], p
        while q * p <= B:
            nxt = K.mul(a[p], prev) - K.mul(cp, prev2)
            prev2, prev = prev, nxt
            q *= p
            a[q] = nxt
    for n in range(2, B + 1):
        f = factor(n)
        if len(f) > 1:
            val = one
            for p, e in f:
                val = K.mul(val, a[p**e])
            a[n] = val


def _pow_K(K: NumberField, x, e: int):
    out = K.elt([1])
    for _ in range(e):
        out = K.mul(out, x)
    return out


def _cm_discriminant(U: CharUnit, o: CharOrbit) -> int | None:
    """The CM discriminant D < 0 (|D| | N, fundamental) of the orbit, or None (``_cm_all``)."""
    return _cm_all(U)[id(o)]


def _cm_all(U: CharUnit) -> dict[int, int | None]:
    """id(orbit) ↦ its CM discriminant or None, for every orbit of U: for each D the
    number of newforms with CM by Q(√D) is counted from Hecke characters, then the orbits
    that carry them are found and certified by ``cm_orbits`` (builder.forms.hecke_characters)."""
    from builder.forms.hecke_characters import cm_discriminants

    if "_cm" not in U.__dict__:
        found = cm_discriminants(U.N, U.k, U.chi.order, U.chi.exponent, U.orbits,
                                 U.ap_is_zero, lambda o: o.dim // U.phi_m)
        U.__dict__["_cm"] = {id(o): D for o, D in zip(U.orbits, found, strict=True)}
    return U.__dict__["_cm"]


_MODULI: dict[int, list] = {}  # m ↦ [primes ℓ ≡ 1 (mod m) still to come, their product so far]


def _moduli_product(m: int, need: int) -> int:
    """The product of the first primes ℓ ≡ 1 (mod m), ℓ < 2^21, of ``primes_one_mod``,
    taken until it exceeds ``need`` or they run out (extended lazily, kept per m)."""
    st = _MODULI.setdefault(m, [primes_one_mod(m), 1])
    while st[1] <= need and st[0] is not None:
        try:
            st[1] *= next(st[0])
        except RuntimeError:  # exhausted
            st[0] = None
    return st[1]


def _crt_sym(res: list, mods: list[int]) -> list:
    """The symmetric lifts modulo Π mods of residue arrays res[i] (any shape, the same for
    every i; res[i] modulo mods[i]), by the CRT basis e_i ≡ δ_ij (mod mods[j]) at once."""
    M = 1
    for q in mods:
        M *= q
    acc = np.zeros(np.shape(res[0]), dtype=object)
    for r, q in zip(res, mods, strict=True):
        e = (M // q) * pow(M // q, -1, q)
        acc = (acc + np.asarray(r, dtype=np.int64).astype(object) * e) % M
    acc = np.where(acc > M // 2, acc - M, acc)
    return acc.tolist()


def _sym(x: int, prod: int) -> int:
    return x - prod if x > prod // 2 else x


@lru_cache(maxsize=64)
def _vinv_norm(m: int) -> int:
    """An integer ≥ ‖V⁻¹‖_∞ (max row sum of |entries|), V[a, i] = ζ_m^(a·i) for a ∈ (Z/m)^×,
    0 ≤ i < φ(m): certified with FLINT's ball arithmetic (acb_mat.inv)."""
    units = [a for a in range(1, m + 1) if gcd(a, m) == 1] if m > 1 else [1]
    old = flint.ctx.prec
    flint.ctx.prec = 128
    try:
        z = [flint.acb(flint.arb(2 * a) / m).exp_pi_i() for a in units]
        V = flint.acb_mat([[z[r] ** i for i in range(len(units))] for r in range(len(units))])
        W = V.inv()
        best = flint.arb(0)
        for i in range(W.nrows()):
            row = sum((abs(W[i, j]) for j in range(W.ncols())), flint.arb(0))
            best = max(best, row, key=lambda x: float(x.upper()))
        return int(float(best.upper()) * 1.001) + 1
    finally:
        flint.ctx.prec = old


def _coords_mod(vals: np.ndarray, m: int, conj: list[int], ell: int) -> list[list[int]]:
    """Rows j: power-basis coordinates mod ℓ of the element whose images at ζ_m ↦ ω^a
    (a in ``conj``) are vals[j] — the inverse of the reduction Z[ζ_m]/ℓ ≅ F_ℓ^φ(m)."""
    from builder.characters import root_of_unity

    w = root_of_unity(ell, m) if m > 1 else 1
    n = len(conj)
    V = flint.nmod_mat([[pow(w, a * i, ell) for i in range(n)] for a in conj], ell)
    Vi = V.inv()
    out = []
    for row in vals:
        x = Vi * flint.nmod_mat([[int(v)] for v in row], ell)
        out.append([int(x[i, 0]) for i in range(n)])
    return out


def _norm_poly(rel: list[list[int]], m: int, conj: list[int], rho: int,
               d: int) -> flint.fmpz_poly:
    """Π_a σ_a(P) ∈ Z[x] for P ∈ Z[ζ_m][x] (coefficient j has coordinates rel[j]): by CRT
    over primes ℓ ≡ 1 (mod m), its roots bounded by ρ (coefficients by 2(1 + ρ)^deg)."""
    from builder.characters import root_of_unity

    deg = d * len(conj)
    need = 2 * (1 + rho) ** deg + 1
    n = len(conj)
    R = np.array(rel, dtype=object).reshape(len(rel), n)
    res, mods, prod = [], [], 1
    for ell in primes_one_mod(m):
        w = root_of_unity(ell, m) if m > 1 else 1
        # σ_a of every coefficient at once: (coordinates mod ℓ) · (w^(a·i))_{i, a}
        Wm = np.array([[pow(w, a * i, ell) for a in conj] for i in range(n)], dtype=np.float64)
        E = np.mod(matmul_mod(np.mod(R, ell).astype(np.float64), Wm, ell), ell).astype(np.int64)
        P = flint.nmod_poly([1], ell)
        for col in E.T:
            P *= flint.nmod_poly(col.tolist(), ell)
        res.append([int(c) for c in P.coeffs()])
        mods.append(ell)
        prod *= ell
        if prod > need:
            break
    return flint.fmpz_poly(_crt_sym(res, mods))


def _coeffs(a: flint.nmod_poly, d: int) -> list[int]:
    c = [int(x) for x in a.coeffs()]
    return c + [0] * (d - len(c))


def _crt_poly(pairs: list, ell: int) -> flint.nmod_poly:
    """x ≡ r_i (mod f_i) in F_ℓ[x] for pairwise coprime f_i."""
    x = flint.nmod_poly([0], ell)
    m = flint.nmod_poly([1], ell)
    for r, f in pairs:
        g, s, _ = m.xgcd(f)  # s·m ≡ g (mod f)
        ginv = pow(int(g.coeffs()[0]), -1, ell)
        t = ((r - x) * s * ginv) % f
        x = x + m * t
        m = m * f
    return x % m


def _traces_rel(items: list, B: int, N: int, k: int, ell: int) -> list[int]:
    """Σ_a Tr over F_ℓ[x]/(f_a) of a_n(χ^a-form), n = 1..B, for ``items`` = [(a_p by p,
    f_a, χ^a values mod ℓ)], from the a_p by a_{p^(r+1)} = a_p a_{p^r} − χ(p) p^(k−1)
    a_{p^(r−1)} ([DS] Prop. 5.8.5 with character) and multiplicativity.

    All conjugates of one degree and all n of one layer (prime powers of one exponent;
    composites by their number of prime factors) are multiplied at once: elements are
    coefficient rows, a product z·y is z times the multiplication matrix of y (rows
    x^i·y mod f_a), batched over the conjugates — float64 and exact while d < 2^11
    (every sum < d·ℓ² < 2^53)."""
    tot = np.zeros(B + 1, dtype=np.int64)
    by_deg: dict[int, list] = {}
    for it in items:
        by_deg.setdefault(it[1].degree(), []).append(it)
    for d, group in by_deg.items():
        if d >= 2048:
            raise ArithmeticError(f"relative degree {d} too large for the batched traces")
        tot += _traces_rel_batch(group, d, B, N, k, ell)
    return [int(x) % ell for x in tot[1:]]


def _traces_rel_batch(group: list, d: int, B: int, N: int, k: int, ell: int) -> np.ndarray:
    ps_all = primes_up_to(B)
    A = len(group)
    E = np.zeros((A, B + 1, d))  # E[a, n] = coefficients of a_n in F_ℓ[x]/(f_a)
    E[:, 1, 0] = 1.0
    top = np.zeros((A, d))  # x^d ≡ Σ top_j x^j (mod f_a)
    pows = np.zeros((A, d))
    for r, (aps, f, _) in enumerate(group):
        for p in ps_all:
            cs = [int(c) for c in aps[p].coeffs()]
            E[r, p, : len(cs)] = cs
        fc = [int(c) for c in f.coeffs()]
        top[r] = [(-c) % ell for c in fc[:d]]
        pows[r] = _power_sums(f, ell)
    chi_p = np.array([[int(g[2][p % N]) * pow(p, k - 1, ell) % ell for p in ps_all]
                      for g in group], dtype=np.float64)

    def mult_matrix(y: np.ndarray) -> np.ndarray:
        """(A, d, d): row i = x^i·y mod f_a, so z·y = z @ M for coefficient rows z."""
        M = np.zeros((A, d, d))
        M[:, 0] = y
        for i in range(1, d):
            prev = M[:, i - 1]
            M[:, i, 1:] = prev[:, :-1]
            M[:, i, 0] = 0.0
            M[:, i] += prev[:, -1:] * top
            np.mod(M[:, i], ell, out=M[:, i])
        return M

    for t, p in enumerate(ps_all):
        if p * p > B:
            break
        Mp = mult_matrix(E[:, p])
        c = chi_p[:, t : t + 1]
        prev2, prev = 1, p
        while prev * p <= B:
            E[:, prev * p] = np.mod(np.matmul(E[:, prev][:, None, :], Mp)[:, 0]
                                    - c * E[:, prev2], ell)
            prev2, prev = prev, prev * p
    layers: dict[int, dict[int, list[int]]] = {}
    for n in range(2, B + 1):
        fa = factor(n)
        if len(fa) > 1:
            q = fa[0][0] ** fa[0][1]
            layers.setdefault(len(fa), {}).setdefault(q, []).append(n // q)
    for size in sorted(layers):
        for q, ms in layers[size].items():
            idx = np.array(ms)
            E[:, q * idx] = np.mod(np.matmul(E[:, idx], mult_matrix(E[:, q])), ell)
    per_conj = np.mod(np.einsum("anj,aj->an", E, pows), ell)  # d terms < ℓ² each: exact
    return np.mod(per_conj.astype(np.int64).sum(axis=0), ell)


def _power_sums(f: flint.nmod_poly, ell: int) -> list[int]:
    """Σ α^m over the roots α of the monic f, m = 0..deg f − 1, modulo ℓ (Newton's
    identities)."""
    d = f.degree()
    c = [int(x) for x in f.coeffs()]
    e = [(-1) ** i * c[d - i] % ell for i in range(d + 1)]
    ps = [d % ell]
    for m in range(1, d):
        s = sum((-1) ** (i - 1) * e[i] * ps[m - i] for i in range(1, m)) if m > 1 else 0
        s += (-1) ** (m - 1) * m * e[m]
        ps.append(s % ell)
    return ps


def _trace_mod(y: flint.nmod_poly, f: flint.nmod_poly, ell: int) -> int:
    """Tr of y (reduced modulo f) in F_ℓ[x]/(f): Σ y_j·(power sum j)."""
    ps = _power_sums(f, ell)
    return sum(int(ci) * ps[j] for j, ci in enumerate(y.coeffs())) % ell


__all__ = ["CharUnit", "CharOrbit", "compute_char"]
