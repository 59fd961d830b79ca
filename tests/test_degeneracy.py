"""Degeneracy maps in both directions between levels M | N.

Sources: W. Stein, Modular Forms: A Computational Approach, §8.6 (degeneracy
maps α_t, β_t on modular symbols) and A. O. L. Atkin, J. Lehner, Math. Ann. 185
(1970) (the old space is spanned by f(z), f(tz) from lower levels).  The
identity β_1∘α_1 = [Γ0(M) : Γ0(N)] = ψ(N)/ψ(M) is the transfer followed by the
projection (common practice).
"""

from __future__ import annotations

import flint
import pytest

from builder.arith import prime_divisors, psi
from builder.forms.newspace import new_space
from builder.linalg import identity, rref_rows
from builder.symbols.space import cuspidal_space, rows_to_fmpq_mat

CASES = [(22, 2), (44, 2), (30, 2), (64, 2), (98, 2), (50, 4), (18, 6)]


@pytest.mark.parametrize("N,k", CASES)
def test_transfer_then_projection_is_the_index(N, k):
    SN = cuspidal_space(N, k, 1)
    for p in prime_divisors(N):
        SM = cuspidal_space(N // p, k, 1)
        A = SN.raising_matrix(SM, 1)
        B = rows_to_fmpq_mat(SN.degeneracy_rows(SM, 1), SM.dim)
        assert A * B == identity(SM.dim) * (psi(N) // psi(N // p))


@pytest.mark.parametrize("N,k", CASES)
def test_raising_maps_commute_with_hecke(N, k):
    SN = cuspidal_space(N, k, 1)
    q = next(q for q in (3, 5, 7, 11, 13) if N % q)
    for p in prime_divisors(N):
        SM = cuspidal_space(N // p, k, 1)
        for t in (1, p):
            A = SN.raising_matrix(SM, t)
            assert SM.hecke_full(q) * A == A * SN.hecke_full(q), (N, p, t)


@pytest.mark.parametrize("N,k", CASES)
def test_images_span_the_old_space(N, k):
    """dim(Σ α_t(S_k(N/p))) = dim S_k(N) − dim S_k^new(N) (Atkin–Lehner)."""
    SN = cuspidal_space(N, k, 1)
    rows = []
    for p in prime_divisors(N):
        SM = cuspidal_space(N // p, k, 1)
        if SM.dim_cuspidal == 0:
            continue
        for t in (1, p):
            I = SM.cusp_basis * SN.raising_matrix(SM, t)
            rows += [[I[i, j] for j in range(SN.dim)] for i in range(I.nrows())]
    old = rref_rows(flint.fmpq_mat(rows)).nrows() if rows else 0
    assert old == SN.dim_cuspidal - new_space(N, k).dim


def test_raising_map_arguments():
    with pytest.raises(ValueError, match="t·M"):
        cuspidal_space(30, 2, 1).raising_matrix(cuspidal_space(10, 2, 1), 2)
    with pytest.raises(ValueError, match="weight"):
        cuspidal_space(30, 2, 1).raising_matrix(cuspidal_space(10, 4, 1), 1)
