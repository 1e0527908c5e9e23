"""Dense building blocks: the padded matrix-vector product and Gauss-Jordan
inversion."""
from __future__ import annotations

from solderless.engine.solver.kernel.params import PIVOT_TINY, kernel_jit


@kernel_jit(inline="always")
def gemv_inl(A, x, y, nr, nc):
    """y[:nr] += A[:nr, :nc] @ x[:nc], four rows at a time.

    The model's port and source dimensions are padded to multiples of four
    (statespace.PAD), so every inner loop runs whole SIMD vectors; four rows
    per pass share each load of x and one loop's overhead.

    Inlined at the four products every sample makes once (p, the
    predictor, and the state update's two) and at the chord loop's two
    (residual and step): a call passes each array as ~7 scalars on the
    stack, which costs more than these products at the designs' sizes
    (inlining the chord loop's two: 5-10 % less time per sample on
    octave-up, the flagship and feedforward, by the CPU's cycle counter,
    best of three on a quiet machine).  :func:`gemv_add` is the same
    product as a real call."""
    r = 0
    while r + 4 <= nr:
        s0 = 0.0
        s1 = 0.0
        s2 = 0.0
        s3 = 0.0
        for c in range(nc):
            xc = x[c]
            s0 += A[r, c] * xc
            s1 += A[r + 1, c] * xc
            s2 += A[r + 2, c] * xc
            s3 += A[r + 3, c] * xc
        y[r] += s0
        y[r + 1] += s1
        y[r + 2] += s2
        y[r + 3] += s3
        r += 4
    while r < nr:
        s = 0.0
        for c in range(nc):
            s += A[r, c] * x[c]
        y[r] += s
        r += 1


@kernel_jit()
def gemv_add(A, x, y, nr, nc):
    """:func:`gemv_inl` as a real call (the products in Newton's loops)."""
    gemv_inl(A, x, y, nr, nc)


@kernel_jit(inline="always")
def absmax(a, b):
    """max(|a|, |b|) as straight-line code (numba's builtin max is an
    out-of-line call per use)."""
    a = abs(a)
    b = abs(b)
    return a if a > b else b


@kernel_jit(inline="always")
def gj_inverse(A, Ji, n):
    """Ji <- J^-1 by Gauss-Jordan elimination with partial pivoting.

    A is (n + 1) x 2n: rows 0..n-1 hold the augmented matrix [J | I]
    (overwritten), row n is scratch for the scaled pivot row.  Each
    elimination is one full-width row update from that scratch row (n is
    padded to a multiple of 4, the columns left of the pivot are zero to
    rounding), which vectorises.  Returns False when J is singular."""
    w = 2 * n
    for k in range(n):
        m = k
        big = abs(A[k, k])
        for r in range(k + 1, n):
            a = abs(A[r, k])
            if a > big:
                big = a
                m = r
        if not big > PIVOT_TINY:
            return False
        inv = 1.0 / A[m, k]
        for c in range(w):
            A[n, c] = A[m, c] * inv
        if m != k:
            for c in range(w):
                A[m, c] = A[k, c]
        for c in range(w):
            A[k, c] = A[n, c]
        for r in range(n):
            f = A[r, k]
            if r != k and f != 0.0:
                for c in range(w):
                    A[r, c] -= f * A[n, c]
    for r in range(n):
        for c in range(n):
            Ji[r, c] = A[r, n + c]
    return True


#: inverse4 declines a matrix whose determinant is below this fraction of
#: the product of its rows' largest entries (Hadamard's bound, up to a factor
#: of 4 for 4 x 4): such a matrix is near-singular for cofactors, and Gauss-
#: Jordan with partial pivoting takes it instead.
COFACTOR_MIN = 1e-8


@kernel_jit(inline="always")
def inverse4(A, Ji):
    """Ji <- A[:4, :4]^-1 by cofactors (the adjugate over the determinant,
    with the determinant expanded in 2 x 2 minors of the first two and the
    last two rows: Laplace's expansion), straight-line code with no
    pivoting: about 50 cycles against about 250 for :func:`gj_inverse` at
    this size.  Returns 1 on success, 0 if A is singular, -1 if it is too
    close to singular for cofactors (COFACTOR_MIN; the caller then pivots)."""
    a00, a01, a02, a03 = A[0, 0], A[0, 1], A[0, 2], A[0, 3]
    a10, a11, a12, a13 = A[1, 0], A[1, 1], A[1, 2], A[1, 3]
    a20, a21, a22, a23 = A[2, 0], A[2, 1], A[2, 2], A[2, 3]
    a30, a31, a32, a33 = A[3, 0], A[3, 1], A[3, 2], A[3, 3]
    s0 = a00 * a11 - a10 * a01
    s1 = a00 * a12 - a10 * a02
    s2 = a00 * a13 - a10 * a03
    s3 = a01 * a12 - a11 * a02
    s4 = a01 * a13 - a11 * a03
    s5 = a02 * a13 - a12 * a03
    c5 = a22 * a33 - a32 * a23
    c4 = a21 * a33 - a31 * a23
    c3 = a21 * a32 - a31 * a22
    c2 = a20 * a33 - a30 * a23
    c1 = a20 * a32 - a30 * a22
    c0 = a20 * a31 - a30 * a21
    det = s0 * c5 - s1 * c4 + s2 * c3 + s3 * c2 - s4 * c1 + s5 * c0
    if not abs(det) > PIVOT_TINY:
        return 0
    scale = (absmax(absmax(a00, a01), absmax(a02, a03))
             * absmax(absmax(a10, a11), absmax(a12, a13))
             * absmax(absmax(a20, a21), absmax(a22, a23))
             * absmax(absmax(a30, a31), absmax(a32, a33)))
    if not abs(det) > COFACTOR_MIN * scale:
        return -1
    q = 1.0 / det
    Ji[0, 0] = (a11 * c5 - a12 * c4 + a13 * c3) * q
    Ji[0, 1] = (-a01 * c5 + a02 * c4 - a03 * c3) * q
    Ji[0, 2] = (a31 * s5 - a32 * s4 + a33 * s3) * q
    Ji[0, 3] = (-a21 * s5 + a22 * s4 - a23 * s3) * q
    Ji[1, 0] = (-a10 * c5 + a12 * c2 - a13 * c1) * q
    Ji[1, 1] = (a00 * c5 - a02 * c2 + a03 * c1) * q
    Ji[1, 2] = (-a30 * s5 + a32 * s2 - a33 * s1) * q
    Ji[1, 3] = (a20 * s5 - a22 * s2 + a23 * s1) * q
    Ji[2, 0] = (a10 * c4 - a11 * c2 + a13 * c0) * q
    Ji[2, 1] = (-a00 * c4 + a01 * c2 - a03 * c0) * q
    Ji[2, 2] = (a30 * s4 - a31 * s2 + a33 * s0) * q
    Ji[2, 3] = (-a20 * s4 + a21 * s2 - a23 * s0) * q
    Ji[3, 0] = (-a10 * c3 + a11 * c1 - a12 * c0) * q
    Ji[3, 1] = (a00 * c3 - a01 * c1 + a02 * c0) * q
    Ji[3, 2] = (-a30 * s3 + a31 * s1 - a32 * s0) * q
    Ji[3, 3] = (a20 * s3 - a21 * s1 + a22 * s0) * q
    return 1
