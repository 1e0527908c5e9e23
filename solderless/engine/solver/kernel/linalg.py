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
