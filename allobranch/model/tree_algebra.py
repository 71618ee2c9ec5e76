"""Dense linear algebra of the exact tree conditional, and its first-order complex perturbation.

Under a tree with at most :data:`allobranch.model.density.TREE_EXACT_MAX_TAXA` taxa, the compiled density
samples the taxon deviations (in the tree's eigenbasis) from their exact conditional given the spreads,
whose precision is ``A = diag(e0) + V' diag(p) V``: ``e0 = 1 / (tau^2 d)`` the prior precisions of the
eigen-coordinates and ``p`` each taxon's data precision. Everything the density needs from ``A`` is

- ``A^-1 v`` for a few vectors,
- ``log det A`` (through the log Jacobian ``-sum log L_ii`` of ``A = L L'``),
- ``L'^-1 z`` for the standardised coordinates ``z`` (the non-centred deviations).

The gradient takes complex steps in the spreads and Pagel's lambda, which move ``A`` by a tiny imaginary
part ``i A_i`` with ``A_i = diag(e) + V' diag(f) V`` (``e`` from the taxon spread and lambda, ``f`` from
the specimen spread). Instead of a complex Cholesky factor per step (O(taxa^3) each), the imaginary parts
are taken to first order from the real factor, which is exact for a complex step (its square is below
double precision):

- ``A^-1 v = x + i A^-1 (v_i - A_i x)`` with ``x = A^-1 v_r``;
- ``Im log det A = tr(A^-1 A_i) = e . diag(A^-1) + f . diag(V A^-1 V')``;
- ``d L = L Phi(L^-1 dA L'^-1)`` (``Phi`` keeps the lower triangle and halves the diagonal), so
  ``Im L'^-1 z = -L'^-1 Phi(M)' z`` with ``M = W A_i W'`` and ``W = L^-1``.

``Phi(M)' z`` is O(taxa^2) per step from suffix sums computed once per density (:func:`factor_context`).
The loops are written for vectorisation (row updates, reductions reassociated); no BLAS, which would run
threads of its own under the sampler's.
"""

from __future__ import annotations

import numba as nb
import numpy as np

_FAST = {"nsz", "contract", "reassoc"}


@nb.njit(cache=True, nogil=True, error_model="numpy", fastmath=_FAST)
def data_precision(V, p):
    """``V' diag(p) V`` (real), by rank-one row updates of the lower triangle, then mirrored."""
    n = V.shape[0]
    Q = np.zeros((n, n))
    for t in range(n):
        pt = p[t]
        for i in range(n):
            s = V[t, i] * pt
            for j in range(i + 1):
                Q[i, j] += s * V[t, j]
    for i in range(n):
        for j in range(i):
            Q[j, i] = Q[i, j]
    return Q


@nb.njit(cache=True, nogil=True, error_model="numpy", fastmath=_FAST)
def cholesky(A):
    """Lower Cholesky factor ``L`` of a symmetric positive definite ``A = L L'`` (NaN if it is not)."""
    n = A.shape[0]
    L = np.zeros_like(A)
    for j in range(n):
        v = A[j, j]
        for k in range(j):
            v -= L[j, k] * L[j, k]
        L[j, j] = np.sqrt(v) if v > 0.0 else np.nan
        for i in range(j + 1, n):
            v = A[i, j]
            for k in range(j):
                v -= L[i, k] * L[j, k]
            L[i, j] = v / L[j, j]
    return L


@nb.njit(cache=True, nogil=True, error_model="numpy", fastmath=_FAST)
def lower_inverse(L):
    """``W = L^-1`` for lower-triangular ``L`` (lower triangular), row by row."""
    n = L.shape[0]
    W = np.zeros_like(L)
    for i in range(n):
        for k in range(i):
            c = L[i, k]
            for j in range(k + 1):
                W[i, j] -= c * W[k, j]
        d = 1.0 / L[i, i]
        for j in range(i):
            W[i, j] *= d
        W[i, i] = d
    return W


@nb.njit(cache=True, nogil=True, error_model="numpy", fastmath=_FAST)
def lower_times_vt(W, V):
    """``W V'`` for lower-triangular ``W``."""
    n = W.shape[0]
    VT = np.ascontiguousarray(V.T)
    U = np.zeros((n, V.shape[0]))
    for k in range(n):
        for j in range(k + 1):
            c = W[k, j]
            for t in range(V.shape[0]):
                U[k, t] += c * VT[j, t]
    return U


@nb.njit(cache=True, nogil=True, error_model="numpy", fastmath=_FAST)
def solve_lower(L, b):
    """``L^-1 b`` for lower-triangular ``L`` (real)."""
    n = L.shape[0]
    y = np.empty(n)
    for i in range(n):
        v = b[i]
        for k in range(i):
            v -= L[i, k] * y[k]
        y[i] = v / L[i, i]
    return y


@nb.njit(cache=True, nogil=True, error_model="numpy", fastmath=_FAST)
def solve_upper_t(L, b):
    """``L'^-1 b`` for lower-triangular ``L`` (real), by column updates."""
    n = L.shape[0]
    y = b.copy()
    for i in range(n - 1, -1, -1):
        y[i] /= L[i, i]
        yi = y[i]
        for k in range(i):
            y[k] -= L[i, k] * yi
    return y


@nb.njit(cache=True, nogil=True, error_model="numpy", fastmath=_FAST)
def _suffix_products(W, z):
    """``W_ij (sum_{k>i} W_kj z_k + W_ij z_i / 2)``: with it, ``Phi(W diag(e) W')' z = S e``."""
    n, m = W.shape
    S = np.empty((n, m))
    acc = np.zeros(m)
    for i in range(n - 1, -1, -1):
        zi = z[i]
        for j in range(m):
            wij = W[i, j]
            S[i, j] = wij * (acc[j] + 0.5 * wij * zi)
            acc[j] += wij * zi
    return S


@nb.njit(cache=True, nogil=True, error_model="numpy", fastmath=_FAST)
def _column_squares(W):
    """``sum_k W_kj^2`` for every column ``j``."""
    n, m = W.shape
    out = np.zeros(m)
    for k in range(n):
        for j in range(m):
            out[j] += W[k, j] * W[k, j]
    return out


@nb.njit(cache=True, nogil=True, error_model="numpy")
def factor_context(L, V, z, with_data):
    """What the complex steps need from the real factor ``L``, computed once per density.

    Returns ``diag(A^-1)``, ``diag(V A^-1 V')``, and the matrices ``S_e``, ``S_f`` with
    ``Phi(M)' z = S_e e + S_f f`` (see the module docstring). The ``f`` parts (the specimen spread's step)
    are empty unless ``with_data``.
    """
    W = lower_inverse(L)
    dinv = _column_squares(W)
    S_e = _suffix_products(W, z)
    if with_data:
        U = lower_times_vt(W, V)
        return dinv, _column_squares(U), S_e, _suffix_products(U, z)
    return dinv, np.zeros(0), S_e, np.zeros((0, 0))


@nb.njit(cache=True, nogil=True, error_model="numpy")
def _a_imag_times(V, e, f, x):
    """``A_i x = e x + V' (f (V x))`` (the second term only when ``f`` is non-zero)."""
    n = x.shape[0]
    out = e * x
    if np.any(f != 0.0):
        vx = np.zeros(V.shape[0])
        for t in range(V.shape[0]):
            for i in range(n):
                vx[t] += V[t, i] * x[i]
            vx[t] *= f[t]
        for t in range(V.shape[0]):
            for i in range(n):
                out[i] += V[t, i] * vx[t]
    return out


@nb.njit(cache=True, nogil=True, error_model="numpy")
def a_solve(L, V, e, f, v):
    """``A^-1 v`` for complex ``v`` and ``A = L L' + i (diag(e) + V' diag(f) V)``, to first order in ``i``."""
    xr = solve_upper_t(L, solve_lower(L, np.ascontiguousarray(v.real)))
    rhs = v.imag - _a_imag_times(V, e, f, xr)
    if not np.any(rhs != 0.0):  # a real point, or a step that moves neither A nor v
        return xr + 0.0j
    xi = solve_upper_t(L, solve_lower(L, rhs))
    return xr + 1j * xi


@nb.njit(cache=True, nogil=True, error_model="numpy")
def half_log_det(L, e, f, dinv, ddata):
    """``sum log L_ii = log det(A) / 2`` with its first-order imaginary part."""
    re = 0.0
    for i in range(L.shape[0]):
        re += np.log(L[i, i])
    im = 0.0
    if dinv.shape[0]:
        for i in range(e.shape[0]):
            im += e[i] * dinv[i]
    if ddata.shape[0]:
        for t in range(f.shape[0]):
            im += f[t] * ddata[t]
    return re + 0.5j * im


@nb.njit(cache=True, nogil=True, error_model="numpy")
def upper_t_solve_z(L, z, e, f, S_e, S_f):
    """``L'^-1 z`` for real ``z`` with its first-order imaginary part ``-L'^-1 Phi(M)' z``."""
    re = solve_upper_t(L, z)
    n = z.shape[0]
    phi = np.zeros(n)
    moved = False
    if S_e.shape[0] and np.any(e != 0.0):
        moved = True
        for i in range(n):
            for j in range(n):
                phi[i] += S_e[i, j] * e[j]
    if S_f.shape[0] and np.any(f != 0.0):
        moved = True
        for i in range(n):
            for t in range(f.shape[0]):
                phi[i] += S_f[i, t] * f[t]
    if not moved:
        return re + 0.0j
    return re - 1j * solve_upper_t(L, phi)
