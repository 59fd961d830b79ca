"""The new subspace of the sign +1 cuspidal symbols and its Hecke splitting.

New subspace ([St] §8.6, [AL]): the intersection of the kernels of the two
degeneracy maps z ↦ z and z ↦ p z to level N/p, over the primes p | N
(restricted to the cuspidal subspace).  Its dimension is dim S_k^new(Γ0(N))
([Mt]).

Splitting (design.md §3): the Atkin–Lehner involutions W_Q (Q ∥ N) commute
with every T_n and with each other, so the new subspace is the direct sum of
its sign-vector eigenspaces.  On each, factor the characteristic polynomial
of T_q for the smallest prime q ∤ N; by multiplicity one a factor of
multiplicity one cuts out one Galois orbit; a repeated factor is refined with
the next prime, up to the Sturm bound (which always suffices).
Each orbit ends with a proof of irreducibility: its T_q (or the refining
operator) has an irreducible characteristic polynomial on it.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import flint

from builder.arith import factor, prime_divisors, sturm_bound
from builder.linalg import (
    charpoly_int,
    hstack,
    identity,
    left_kernel,
    poly_at_matrix,
    restrict,
    rref_rows,
)
from builder.symbols.space import SymbolSpace, cuspidal_space


@dataclass
class Orbit:
    """A Hecke-irreducible piece of the new subspace.

    ``basis``: rows in the coordinates of the new subspace basis (rref);
    ``prime``/``poly``: an operator T_prime whose charpoly ``poly`` on the piece is
    irreducible (the proof of irreducibility); ``signs``: Q ↦ ε_Q.
    """

    basis: flint.fmpq_mat
    prime: int
    poly: flint.fmpz_poly
    signs: dict[int, int] = field(default_factory=dict)

    @property
    def dim(self) -> int:
        return self.basis.nrows()


class NewSpace:
    """The new subspace of S_k(Γ0(N)) inside the sign +1 symbols."""

    def __init__(self, space: SymbolSpace) -> None:
        if space.sign != 1:
            raise ValueError("the new subspace is computed in the sign +1 space")
        self.space = space
        self.N, self.k = space.N, space.k
        self.basis = self._new_basis()  # rows in cuspidal coordinates, rref
        self.dim = self.basis.nrows()
        self._ops: dict[object, flint.fmpq_mat] = {}

    def _new_basis(self) -> flint.fmpq_mat:
        S = self.space
        s = S.dim_cuspidal
        if s == 0:
            return flint.fmpq_mat(0, 0)
        maps = []
        for p in prime_divisors(self.N):
            M = self.N // p
            target = cuspidal_space(M, self.k, 1)
            if target.dim_cuspidal == 0:
                continue
            for t in (1, p):
                rows = S.degeneracy_rows(target, t)
                D = _rows_matrix(rows, target.dim)
                maps.append(S.cusp_basis * D)
        if not maps:
            return identity(s)
        return left_kernel(hstack(maps, s))

    # -- operators on the new subspace ----------------------------------------
    def hecke(self, n: int) -> flint.fmpq_mat:
        if ("T", n) not in self._ops:
            self._ops[("T", n)] = restrict(self.basis, self.space.hecke_matrix(n))
        return self._ops[("T", n)]

    def atkin_lehner(self, Q: int) -> flint.fmpq_mat:
        if ("W", Q) not in self._ops:
            self._ops[("W", Q)] = restrict(self.basis, self.space.atkin_lehner(Q))
        return self._ops[("W", Q)]

    def good_primes(self) -> list[int]:
        """Primes q ∤ N up to the Sturm bound (at least one), increasing."""
        B = max(sturm_bound(self.N, self.k), 2)
        out = []
        q = 2
        while q <= B or not out:
            if self.N % q and all(q % r for r in range(2, int(q**0.5) + 1)):
                out.append(q)
            q += 1
        return out

    # -- splitting --------------------------------------------------------------
    def sign_pieces(self) -> list[tuple[dict[int, int], flint.fmpq_mat]]:
        """(signs, rows) for every nonzero Atkin–Lehner sign-vector eigenspace."""
        pieces = [({}, identity(self.dim))]
        for p, e in factor(self.N):
            Q = p**e
            W = self.atkin_lehner(Q)
            new = []
            for signs, B in pieces:
                WB = restrict(B, W) if B.nrows() else B
                for eps in (1, -1):
                    K = left_kernel(WB - identity(B.nrows()) * eps)
                    if K.nrows():
                        new.append(({**signs, p: eps}, rref_rows(K * B)))
            pieces = new
        return pieces

    def orbits(self) -> list[Orbit]:
        """The Galois orbits of newforms, each with its proof of irreducibility."""
        if self.dim == 0:
            return []
        primes = self.good_primes()
        out: list[Orbit] = []
        for signs, B in self.sign_pieces():
            out.extend(self._split(B, primes, 0, signs))
        return out

    def _split(self, B: flint.fmpq_mat, primes: list[int], i: int, signs) -> list[Orbit]:
        if i >= len(primes):
            raise ArithmeticError(
                f"level {self.N} weight {self.k}: Hecke operators up to the Sturm bound "
                "did not split the new subspace (multiplicity one violated?)"
            )
        q = primes[i]
        T = restrict(B, self.hecke(q))
        chi = charpoly_int(T)
        _, facs = chi.factor()
        out = []
        for f, mult in sorted(facs, key=lambda fe: (fe[0].degree(), list(fe[0].coeffs()))):
            K = left_kernel(poly_at_matrix(f, T))
            sub = rref_rows(K * B)
            if mult == 1 and K.nrows() == f.degree():
                out.append(Orbit(basis=sub, prime=q, poly=f, signs=dict(signs)))
            else:
                out.extend(self._split(sub, primes, i + 1, signs))
        return out


def _rows_matrix(rows: list[dict], ncols: int) -> flint.fmpq_mat:
    from builder.symbols.space import rows_to_fmpq_mat

    return rows_to_fmpq_mat(rows, ncols)


def new_space(N: int, k: int) -> NewSpace:
    """The new subspace of level N, weight k (sign +1 symbols)."""
    return NewSpace(cuspidal_space(N, k, 1))
