"""Dense LU factorisation with partial pivoting, real and complex, compiled.

Own loops: for the small and medium systems of chemical kinetics (n up to a
few hundred) they beat a call into LAPACK through an object boundary, and they
run inside the compiled step loop. Large sparse systems use SuperLU instead
(see ``engine.integrators.sparse.core``).
"""
from numba import njit


@njit(cache=True, nogil=True, _nrt=False)
def lu_factor(a, piv):
    """In-place LU of ``a`` (row pivots into ``piv``); returns False if singular.

    Real or complex ``a``; pivots by |re| + |im| (the modulus for real entries). The
    diagonal keeps the *reciprocals* of U's diagonal, so :func:`lu_solve` multiplies
    instead of dividing (a complex division costs several times a multiplication, and
    the solves run two or three times per Newton iteration).
    """
    n = a.shape[0]
    for k in range(n):
        p = k
        big = abs(a[k, k].real) + abs(a[k, k].imag)
        for i in range(k + 1, n):
            v = abs(a[i, k].real) + abs(a[i, k].imag)
            if v > big:
                big = v
                p = i
        piv[k] = p
        if big == 0.0:
            return False
        if p != k:
            for j in range(n):
                tmp = a[k, j]
                a[k, j] = a[p, j]
                a[p, j] = tmp
        inv = 1.0 / a[k, k]
        a[k, k] = inv
        for i in range(k + 1, n):
            a[i, k] *= inv
        for i in range(k + 1, n):
            m = a[i, k]
            if m != 0.0:
                for j in range(k + 1, n):
                    a[i, j] -= m * a[k, j]
    return True


@njit(cache=True, nogil=True, _nrt=False, inline="always")
def lu_solve(a, piv, b):
    """Solve in place: ``b`` <- A^-1 b using the factors from :func:`lu_factor`."""
    n = a.shape[0]
    for k in range(n):
        p = piv[k]
        if p != k:
            tmp = b[k]
            b[k] = b[p]
            b[p] = tmp
    for i in range(n):
        s = b[i]
        for j in range(i):
            s -= a[i, j] * b[j]
        b[i] = s
    for i in range(n - 1, -1, -1):
        s = b[i]
        for j in range(i + 1, n):
            s -= a[i, j] * b[j]
        b[i] = s * a[i, i]  # the reciprocal of U's diagonal (lu_factor)


# numba compiles one specialisation per argument type, so the same functions serve
# Radau's complex system; the pivot measure |re| + |im| is abs() for real entries.
clu_factor = lu_factor
clu_solve = lu_solve


@njit(cache=True, nogil=True, _nrt=False)
def shifted(J, shift, a):
    """a <- shift * I - J (real)."""
    n = J.shape[0]
    for i in range(n):
        for j in range(n):
            a[i, j] = -J[i, j]
        a[i, i] += shift


@njit(cache=True, nogil=True, _nrt=False)
def cshifted(J, shift_re, shift_im, a):
    """a <- (shift_re + i shift_im) * I - J (complex)."""
    n = J.shape[0]
    for i in range(n):
        for j in range(n):
            a[i, j] = -J[i, j]
        a[i, i] += complex(shift_re, shift_im)


@njit(cache=True, nogil=True, _nrt=False)
def copy(src, dst):
    """dst[:] = src for 1-D arrays (an array-to-array slice assignment needs the
    runtime's allocator for a possible overlap copy, which these loops run without)."""
    for i in range(dst.shape[0]):
        dst[i] = src[i]
