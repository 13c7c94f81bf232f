"""Stacked linear algebra of the solver and the sweeps: least-norm steps from the normal
equations (a Cholesky factorisation vectorised over a stack), the scale-free singular
certificate, and the orientation and contraction tests that keep a continuation on its
assembly branch.

Pure numpy; nothing here knows a mechanism.  Scaled (dimensionless) Jacobians come in,
numbers and flags go out.
"""
from __future__ import annotations

import math

import numpy as np

from .units import CONTRACTION, NOISE_STEP, NORMAL_CERT, ORIENT_RATIO

__all__ = ["chol_factor", "chol_apply", "chol_quad", "chol_solve", "least_norm", "least_norm_factor",
           "least_norm_apply", "tmul", "det_stack", "det_small", "det_rows", "lstsq_small", "normal_factor",
           "normal_solve", "lstsq_svd", "orientation_frame",
           "orientation_agrees", "branch_step_certified"]


#: Component-first stacked algebra (entries as rows over the stack) pays one Python step per
#: entry; it is used where that stays small (and the stack long), the stacked numpy form
#: (one step per row or per product) elsewhere.
SOA_MAX_ORDER = 6
SOA_MAX_TERMS = 200
SOA_MIN_STACK = 64


def chol_factor(G):
    """Cholesky factors of stacks of symmetric positive (semi)definite ``G`` (B, g, g), scaled
    to unit Frobenius norm: ``(L, scale, cert)`` with ``scale`` (B,) the norms and ``cert =
    det(G) / |G|_F^g`` (B,), the scale-free certificate used for singular flags.  A tiny
    shift (1e-13) keeps singular stacks finite.  ``L`` is held component-first (``L[i][k]``
    rows (B,)) for small orders on long stacks, else as one stacked array (B, g, g)."""
    B, g, _ = G.shape
    fro = np.sqrt((G * G).sum(axis=(1, 2)))
    scale = np.maximum(fro, 1e-300)
    mu = 1e-13
    if B == 1:  # one matrix (an anchor's corrector): the same steps in plain floats
        Gs = (G[0] / scale[0]).tolist()
        L = [[0.0] * g for _ in range(g)]
        cert = 1.0
        for i in range(g):
            Li = L[i]
            for k in range(i + 1):
                Lk = L[k]
                acc = 0.0
                for j in range(k):
                    acc += Li[j] * Lk[j]
                acc = Gs[i][k] - acc
                if i == k:
                    Li[i] = math.sqrt(max(acc + mu, mu))
                    cert *= Li[i] * Li[i]
                else:
                    Li[k] = acc / Lk[k]
        return np.array(L).reshape(1, g, g), scale, np.array([cert])
    if g > SOA_MAX_ORDER or B < SOA_MIN_STACK:
        Gs = G / scale[:, None, None]
        L = np.zeros_like(Gs)
        for i in range(g):
            for k in range(i + 1):
                acc = Gs[:, i, k] - (L[:, i, :k] * L[:, k, :k]).sum(axis=1)
                if i == k:
                    L[:, i, i] = np.sqrt(np.maximum(acc + mu, mu))
                else:
                    L[:, i, k] = acc / L[:, k, k]
        diag = np.stack([L[:, i, i] for i in range(g)], axis=1) if g else np.ones((B, 0))
        return L, scale, np.prod(diag * diag, axis=1)
    Gs = np.moveaxis(G, 0, -1) / scale  # (g, g, B)
    L = [[None] * g for _ in range(g)]
    cert = np.ones(B)
    for i in range(g):
        for k in range(i + 1):
            acc = Gs[i, k]
            for j in range(k):
                acc = acc - L[i][j] * L[k][j]
            if i == k:
                L[i][i] = np.sqrt(np.maximum(acc + mu, mu))
                cert = cert * (L[i][i] * L[i][i])
            else:
                L[i][k] = acc / L[k][k]
    return L, scale, cert


def chol_apply(factor, b):
    """Solve ``G x = b`` (b (B, g, k)) with the factors of :func:`chol_factor`; x (B, g, k)."""
    L, scale, _ = factor
    if isinstance(L, np.ndarray) and L.shape[0] == 1:  # one matrix: plain floats
        g = L.shape[1]
        Ll = L[0].tolist()
        s = float(scale[0])
        cols = (b[0] / s).T.tolist()  # per right-hand side
        out = []
        for bs in cols:
            y = [0.0] * g
            for i in range(g):
                acc = 0.0
                for j in range(i):
                    acc += Ll[i][j] * y[j]
                y[i] = (bs[i] - acc) / Ll[i][i]
            x = [0.0] * g
            for i in reversed(range(g)):
                acc = 0.0
                for j in range(i + 1, g):
                    acc += Ll[j][i] * x[j]
                x[i] = (y[i] - acc) / Ll[i][i]
            out.append(x)
        return np.array(out, dtype=float).T.reshape(b.shape)
    if isinstance(L, np.ndarray):  # stacked factors
        g = L.shape[1]
        y = np.zeros_like(b)
        bs = b / scale[:, None, None]
        for i in range(g):
            y[:, i] = (bs[:, i] - (L[:, i, :i, None] * y[:, :i]).sum(axis=1)) / L[:, i, i, None]
        x = np.zeros_like(b)
        for i in reversed(range(g)):
            x[:, i] = (y[:, i] - (L[:, i + 1:, i, None] * x[:, i + 1:]).sum(axis=1)) / L[:, i, i, None]
        return x
    g = len(L)
    bs = np.moveaxis(b, 0, -1) / scale  # (g, k, B)
    y = [None] * g
    for i in range(g):
        acc = bs[i]
        for j in range(i):
            acc = acc - L[i][j] * y[j]
        y[i] = acc / L[i][i]
    x = [None] * g
    for i in reversed(range(g)):
        acc = y[i]
        for j in range(i + 1, g):
            acc = acc - L[j][i] * x[j]
        x[i] = acc / L[i][i]
    return np.moveaxis(np.stack(x), -1, 0) if g else np.zeros_like(b)


def chol_quad(factor, b):
    """``sum_c b_c^T G^-1 b_c`` over the columns of ``b`` (B, g, k) with the factors of
    :func:`chol_factor`, (B,): ``|y|^2 scale`` with ``y`` the forward substitution of each
    column (no back substitution, one column at a time: no stacked temporaries)."""
    L, scale, _ = factor
    B, g, k = b.shape
    out = np.zeros(B)
    stacked = isinstance(L, np.ndarray)
    for c in range(k):
        y = []
        for i in range(g):
            acc = b[:, i, c] / scale
            for j in range(i):
                acc = acc - (L[:, i, j] if stacked else L[i][j]) * y[j]
            y.append(acc / (L[:, i, i] if stacked else L[i][i]))
            out += y[i] * y[i]
    return out * scale


def chol_solve(G, b):
    """Solve G x = b for stacks of symmetric positive (semi)definite G (B, g, g), b (B, g, k).

    Vectorised Cholesky over the stack (:func:`chol_factor`); returns (x, det(G) / |G|_F^g)
    where the second is the scale-free certificate used for singular flags."""
    fac = chol_factor(G)
    return chol_apply(fac, b), fac[2]


def least_norm_factor(Js):
    """The factorisation :func:`least_norm` uses for ``Js`` (B, m, k): reuse it for several
    right-hand sides (:func:`least_norm_apply`)."""
    B, mrow, ncol = Js.shape
    if ncol <= mrow:
        return Js, True, chol_factor(tmul(Js, Js))
    Jt = np.swapaxes(Js, 1, 2)
    return Js, False, chol_factor(tmul(Jt, Jt))


def least_norm_apply(factor, rhs):
    """Least-norm / least-squares solutions for ``rhs`` (B, m, k) from :func:`least_norm_factor`."""
    Js, tall, fac = factor
    if tall:
        return chol_apply(fac, tmul(Js, rhs))
    return tmul(Js, chol_apply(fac, rhs))


def least_norm(Js, rhs):
    """Least-norm / least-squares solutions x of Js x = rhs, stacked (rhs (B, m, k)).

    Normal equations on the smaller side: (J^T J) x = J^T rhs when J has no more columns
    than rows, else x = J^T (J J^T)^-1 rhs.  Returns (x, certificate)."""
    fac = least_norm_factor(Js)
    return least_norm_apply(fac, rhs), fac[2][2]


def tmul(A, Bm):
    """``A^T Bm`` of stacks A (B, m, k), Bm (B, m, c) -> (B, k, c).  Small products on long
    stacks go component-first (rows over the stack, made contiguous once; a Gram matrix,
    ``Bm is A``, fills one half and mirrors it) instead of many tiny matrix products;
    larger ones (or short stacks) as one stacked matrix product."""
    same = Bm is A
    B, m, k = A.shape
    c = Bm.shape[2]
    terms = m * (k * (k + 1) // 2 if same else k * c)
    if B < SOA_MIN_STACK or terms > SOA_MAX_TERMS:
        return np.swapaxes(A, 1, 2) @ Bm
    Ac = np.ascontiguousarray(np.moveaxis(A, 0, -1))  # (m, k, B)
    Bc = Ac if same else np.ascontiguousarray(np.moveaxis(Bm, 0, -1))
    # rows that are zero over the whole stack add nothing (a planar loop's three
    # out-of-plane rows): skipped, which leaves every sum as it was
    live = [r for r in range(m) if Ac[r].any() and (same or Bc[r].any())]
    out = np.zeros((k, c, B))
    tmp = np.empty(B)
    for i in range(k):
        for j in range(i + 1 if same else c):
            acc = out[i, j]
            for r in live:
                np.multiply(Ac[r, i], Bc[r, j], out=tmp)
                acc += tmp
            if same:
                out[j, i] = acc
    return np.moveaxis(out, -1, 0)


def det_stack(M):
    """Determinants of stacked square matrices (B, k, k); closed forms, elementwise, up to 3 x 3."""
    k = M.shape[-1]
    if k == 1:
        return M[:, 0, 0].copy()
    if k == 2:
        return M[:, 0, 0] * M[:, 1, 1] - M[:, 0, 1] * M[:, 1, 0]
    if k == 3:
        a, b, c = M[:, 0, 0], M[:, 0, 1], M[:, 0, 2]
        d, e, f = M[:, 1, 0], M[:, 1, 1], M[:, 1, 2]
        g, h, i = M[:, 2, 0], M[:, 2, 1], M[:, 2, 2]
        return a * (e * i - f * h) - b * (d * i - f * g) + c * (d * h - e * g)
    return np.linalg.det(M)


def lstsq_small(a, b, rcond):
    """``np.linalg.lstsq(a, b, rcond)[0]`` for one small, tall matrix ``a`` (m, k), k <= m.

    Where the certificate ``det(G) / |G|_F^k >= NORMAL_CERT`` (``G = a^T a``) proves
    ``s_min / s_max >= 1e-3 > rcond`` the SVD would cut no singular value, so the least-
    squares solution is that of the normal equations, solved here in plain floats for one
    to three columns (the common four-bar and slider blocks, :func:`normal_factor`) or by
    ``np.linalg.solve``; otherwise (wide, rank-deficient or ill-conditioned ``a``) the SVD
    solve itself."""
    m, k = a.shape
    if 0 < m < k and rcond < 1e-3:  # wide: least norm a^T (a a^T)^-1 b, certified the same way
        g = a @ a.T
        fro = math.sqrt(float((g * g).sum()))
        if fro > 0 and det_small(g / fro) >= NORMAL_CERT:
            return a.T @ np.linalg.solve(g, b)
    if 0 < k <= m and rcond < 1e-3:
        if k <= 3:
            fac = normal_factor(a)
            if fac is not None:
                return normal_solve(fac, a, b)
        else:
            g = a.T @ a
            fro = math.sqrt(float((g * g).sum()))
            if fro > 0 and np.linalg.det(g / fro) >= NORMAL_CERT:
                return np.linalg.solve(g, b @ a)
    return np.linalg.lstsq(a, b, rcond=rcond)[0]


def normal_factor(a, g=None):
    """The normal equations of one tall matrix ``a`` (m, k), 1 <= k <= 3, solved once for
    many right-hand sides: ``(k, adjugate rows of G, det G, det G / |G|_F^k)``, ``G = a^T a``
    (``g`` if the caller has it), where ``det(G) >= NORMAL_CERT |G|_F^k`` (:func:`lstsq_small`'s
    certificate; for one column ``G > 0``), else None."""
    k = a.shape[1]
    if k == 1:
        g00 = float(a[:, 0] @ a[:, 0])
        return (1, None, g00, 1.0) if g00 > 0 else None
    if g is None:
        g = a.T @ a
    if k == 2:
        (g00, g01), (_, g11) = g.tolist()
        det = g00 * g11 - g01 * g01
        fro2 = g00 * g00 + 2 * g01 * g01 + g11 * g11
        if det >= NORMAL_CERT * fro2:
            return 2, (g00, g01, g11), det, det / fro2
        return None
    (g00, g01, g02), (_, g11, g12), (_, _, g22) = g.tolist()
    c00, c01, c02 = g11 * g22 - g12 * g12, g02 * g12 - g01 * g22, g01 * g12 - g02 * g11
    det = g00 * c00 + g01 * c01 + g02 * c02
    fro = math.sqrt(g00 * g00 + g11 * g11 + g22 * g22 + 2 * (g01 * g01 + g02 * g02 + g12 * g12))
    if det >= NORMAL_CERT * fro * fro * fro:
        c11, c12, c22 = g00 * g22 - g02 * g02, g01 * g02 - g00 * g12, g00 * g11 - g01 * g01
        return 3, (c00, c01, c02, c11, c12, c22), det, det / (fro * fro * fro)
    return None


def normal_solve(fac, a, b):
    """The least-squares solution of ``a x = b`` from ``a``'s :func:`normal_factor`."""
    k, c, det, _ = fac
    if k == 1:
        return np.array([float(a[:, 0] @ b) / det])
    if k == 2:
        g00, g01, g11 = c
        h0, h1 = (b @ a).tolist()
        return np.array([(g11 * h0 - g01 * h1) / det, (g00 * h1 - g01 * h0) / det])
    c00, c01, c02, c11, c12, c22 = c
    h0, h1, h2 = (b @ a).tolist()
    return np.array([c00 * h0 + c01 * h1 + c02 * h2, c01 * h0 + c11 * h1 + c12 * h2,
                     c02 * h0 + c12 * h1 + c22 * h2]) / det


def det_small(m):
    """Determinant of one square matrix; plain floats up to 3 x 3 (:func:`det_rows`)."""
    if 0 < m.shape[0] <= 3:
        return det_rows(m.tolist())
    return float(np.linalg.det(m))


def det_rows(rows):
    """Determinant of a 1 x 1 to 3 x 3 matrix given as nested lists of floats."""
    k = len(rows)
    if k == 1:
        return float(rows[0][0])
    if k == 2:
        (a, b), (c, d) = rows
        return a * d - b * c
    (a, b, c), (d, e, f), (g, h, i) = rows
    return a * (e * i - f * h) - b * (d * i - f * g) + c * (d * h - e * g)


def lstsq_svd(svd, b, rcond):
    """``np.linalg.lstsq(a, b, rcond)[0]`` from ``a``'s thin SVD ``(u, s, vt)``: singular
    values at most ``rcond`` times the largest count as zero (numpy's rule)."""
    u, s, vt = svd
    if not s.size or s[0] <= 0:
        return np.zeros(vt.shape[-1])
    keep = s > rcond * s[0]
    return vt[keep].T @ ((u[:, keep].T @ b) / s[keep])


# -- branch continuity ---------------------------------------------------------------------------
#
# Why a continuation step stays on its assembly branch (the argument the corrector and
# the sweep's per-step check implement; Allgower & Georg, *Introduction to Numerical
# Continuation Methods*, 1990/2003, ch. 2 (orientation of the solution curve) and ch. 6
# (step control from the corrector's contraction); Kantorovich's theorem as in Deuflhard,
# *Newton Methods for Nonlinear Problems*, 2004, sec. 1.2 and 2.1):
#
# 1. Uniqueness near the predictor.  Let x0 be the predictor (the previous state with the
#    new held values), d0 the least-norm Newton increment there and d1 the next chord
#    increment.  With omega the (affine-covariant) Lipschitz constant of the dimensionless
#    Jacobian, Newton-Kantorovich gives: if h = omega |d0| <= 1/2, Newton from x0
#    converges to a solution within r- = |d0| (1 - sqrt(1 - 2h)) / h and that solution is
#    the only one within r+ = |d0| (1 + sqrt(1 - 2h)) / h >= 2 |d0|.  The first contraction
#    theta = |d1| / |d0| estimates h / 2, so ``theta <= CONTRACTION`` (1/4) asks for
#    h <= 1/2 with the estimate's factor-two margin.  A new state that closes the loops and
#    lies within 2 |d0| of x0 (row-space part: idle freedoms such as a coupler's spin
#    between two balls are not part of the branch) is therefore *the* Newton limit from
#    x0.  That it also continues the previous state does not follow from the theorem
#    alone (the unique zero near x0 need not be joined to the previous state as the held
#    value moves); it follows where the orientation (point 2) agrees, and a certified
#    step whose orientation turns is decided by point 4.
# 2. Orientation.  The solved block J_u of the dimensionless Jacobian (generic rank r) is
#    regular along a branch between singular points, so the sign of det(U_r^T J_u V_r),
#    with U_r, V_r the leading singular vectors at the previous state (where the
#    determinant is the product of the r largest singular values, > 0), stays positive
#    from one state to the next.  A sign change means the step crossed J_u = 0: it either
#    jumped to the mirrored branch (four-bar open <-> crossed, slider above <-> below) or
#    passed a singular point.
#
# 3. The chord test (sweeps; cheaper, the same conclusion).  Where the Jacobians J_a, J_b
#    at both states are at hand (the orientation test needs them), the step can be
#    certified with the chord (simplified Newton) map G(x) = x - J_a^+ F(x) at the
#    predictor x0 instead of Newton's: by the contraction mapping theorem (Ortega &
#    Rheinboldt, *Iterative Solution of Nonlinear Equations in Several Variables*, 1970,
#    12.1 and 12.6; Deuflhard 2004, sec. 2.1 on the simplified Newton method), if
#    kappa = sup |J_a^+ (J(y) - J_a)| <= 1/2 over the ball of radius 2 |d0| about x0
#    (d0 = -J_a^+ F(x0)), G maps that ball into itself and has there exactly one fixed
#    point, the chord limit from x0: a closed state within 2 |d0| of x0 is that limit.
#    The points of the ball lie within |dh| + 2 |d0| of the previous state (dh the held
#    step), and the Lipschitz constant of J_a^+ J is estimated from the two ends,
#    |J_a^+ (J_b - J_a)| / |dh| (|dh| is at most the step's length), so kappa is estimated
#    by |J_a^+ (J_b - J_a)|_F (|dh| + 2 |d0|) / |dh|; the sweep asks for 1/8 (a margin of
#    four) and measures the distance by an upper bound.  An orientation change cannot
#    pass: det(J_a^+ J_b) < 0 gives J_a^+ J_b a negative eigenvalue, so |J_a^+ J_b - I| > 1.
#    Steps the chord test does not pass get the Newton test of point 1.
# 4. What the tests are.  theta estimates h from below (Deuflhard's a-posteriori
#    estimate) and the Lipschitz constant of point 3 is a secant through two points, a
#    lower bound of the true one; both tests are therefore well-founded estimates with
#    margins (factor two, factor four), not proofs.  What keeps a sweep from a silent
#    switch where an estimate is wrong is the orientation: a certified step whose
#    orientation turns (a coarse step of a crank-rocker can land near its mirrored
#    assembly, where the Newton test passes) is solved again from the row before by the
#    single-pose continuation, which halves its sub-steps before it accepts a turn; the
#    batched row is kept (and flagged singular) only where that path passes a singular
#    point or a state as near one as the singular flag reads, else it is replaced.
#
# A step failing either test is halved.  Where halving reaches the smallest step and the
# orientation still changes, the path truly passes a singular point (a change point or
# bifurcation): the step is taken and the state is flagged singular.

def loop_groups(used):
    """Loops joined where they read a common column: ``used`` (loops, columns) bool; returns
    lists of loop indices, each in order, the lists ordered by their first loop."""
    nl = used.shape[0]
    parent = list(range(nl))

    def find(x):
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    for c in range(used.shape[1]):
        loops = np.flatnonzero(used[:, c])
        for li in loops[1:]:
            parent[find(int(li))] = find(int(loops[0]))
    groups = {}
    for li in range(nl):
        groups.setdefault(find(li), []).append(li)
    return list(groups.values())


def independent_parts(used):
    """The parts of a loop system that share no unknown: ``used`` (loops, columns) says which
    loop reads which column; returns (rows, columns) index arrays per part (6 rows a loop),
    the loops of :func:`loop_groups`.  With the held values fixed, the Jacobian is
    block-diagonal in these parts and its orientation is the product of theirs, so a branch
    test reads each part (two parts flipping together keep the product's sign)."""
    parts = []
    for lis in loop_groups(used):
        cols = np.flatnonzero(used[lis].any(axis=0))
        if len(cols):
            parts.append((np.concatenate([np.arange(6 * li, 6 * li + 6) for li in lis]), cols))
    return parts


def orientation_frame(Js, rank):
    """Leading singular vectors (U_r, V_r) of scaled Jacobians ``Js`` (..., m, k), and the
    relative r-th singular value (how well the orientation is defined there)."""
    u, sv, vt = np.linalg.svd(Js, full_matrices=False)
    r = max(1, min(rank, sv.shape[-1]))
    top = np.maximum(sv[..., :1], 1e-300)
    return u[..., :, :r], np.swapaxes(vt[..., :r, :], -1, -2), sv[..., r - 1] / top[..., 0]


def orientation_agrees(frame, Js):
    """True where det(U_r^T Js V_r) > 0 for the frames of :func:`orientation_frame`."""
    u, v, defined = frame
    m = np.swapaxes(u, -1, -2) @ Js @ v
    if m.ndim == 2:  # one state
        return bool(det_small(m) > 0 or defined < ORIENT_RATIO)
    return (np.linalg.det(m) > 0) | (defined < ORIENT_RATIO)


def branch_step_certified(d0, d1, dist):
    """The Kantorovich-style test of the module notes: first contraction
    ``|d1| / |d0| <= CONTRACTION`` and the new state within ``2 |d0|`` of the predictor
    (arrays of norms, dimensionless)."""
    d0 = np.asarray(d0, float)
    theta = np.where(d0 > NOISE_STEP, np.asarray(d1, float) / np.maximum(d0, 1e-300), 0.0)
    return (theta <= CONTRACTION) & (np.asarray(dist, float) <= 2.0 * d0 + 1e4 * NOISE_STEP)
