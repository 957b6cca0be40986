"""The compiled dense LU (engine.integrators.linalg) against numpy.linalg.solve (LAPACK)."""
import numpy as np
import pytest

from engine.integrators.linalg import lu_factor, lu_solve


@pytest.mark.parametrize("dtype", [np.float64, np.complex128])
@pytest.mark.parametrize("n", [1, 3, 8, 40])
def test_solves_agree_with_lapack(n, dtype):
    rng = np.random.default_rng(n)
    A = rng.normal(size=(n, n)) + (1j * rng.normal(size=(n, n)) if dtype == np.complex128 else 0)
    if n > 1:
        A[0, 0] = 0.0  # forces a row exchange
    b = rng.normal(size=n).astype(dtype)
    LU, piv = A.astype(dtype).copy(), np.zeros(n, dtype=np.int64)
    assert lu_factor(LU, piv)
    x = b.copy()
    lu_solve(LU, piv, x)
    ref = np.linalg.solve(A, b)
    assert np.allclose(x, ref, rtol=1e-10, atol=1e-12 * np.abs(ref).max())
    x2 = 2 * b  # the factors serve any number of right-hand sides
    lu_solve(LU, piv, x2)
    assert np.allclose(x2, 2 * ref, rtol=1e-10, atol=1e-12 * np.abs(ref).max())


def test_a_zero_pivot_column_is_reported_singular():
    Z = np.zeros((3, 3))
    assert not lu_factor(Z, np.zeros(3, dtype=np.int64))
