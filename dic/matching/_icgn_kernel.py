"""Compiled IC-GN subset matching (numba); the batch kernels release the GIL and handle a
range of points, so :func:`dic.images.parallel.run_chunks` runs them in threads.

Private: call it through :func:`dic.matching._icgn.match_points`, which checks the input.

Parameter vectors
-----------------
first order (6):  u, ux, uy, v, vx, vy
second order (12): u, ux, uy, uxx, uxy, uyy, v, vx, vy, vxx, vxy, vyy

so that, for a pixel at offset (dx, dy) from the subset centre, the matched position is
x' = x0 + dx + u + ux dx + uy dy + uxx dx^2 / 2 + uxy dx dy + uyy dy^2 / 2 (and likewise y').

Status codes follow :class:`dic.field.Reason`.
"""

import numpy as np
from numba import njit

MEASURED = 0
OUTSIDE_IMAGE = 2
FLAT = 3
NO_CONVERGENCE = 4
DEGENERATE = 7
#: an update smaller than this (px, the convergence norm) counts as an iteration near the
#: solution: their number measures how slowly a match converged, whatever its start
NEAR_STEP = 0.1
_NEAR2 = NEAR_STEP * NEAR_STEP


@njit(cache=True, fastmath=True)
def _eval_cubic(c, pad, x, y):
    ix = int(np.floor(x))
    iy = int(np.floor(y))
    t = x - ix
    s = y - iy
    t2 = t * t
    s2 = s * s
    omt = 1.0 - t
    oms = 1.0 - s
    wx0 = omt * omt * omt / 6.0
    wx1 = (3.0 * t2 * t - 6.0 * t2 + 4.0) / 6.0
    wx2 = (-3.0 * t2 * t + 3.0 * t2 + 3.0 * t + 1.0) / 6.0
    wx3 = t2 * t / 6.0
    wy0 = oms * oms * oms / 6.0
    wy1 = (3.0 * s2 * s - 6.0 * s2 + 4.0) / 6.0
    wy2 = (-3.0 * s2 * s + 3.0 * s2 + 3.0 * s + 1.0) / 6.0
    wy3 = s2 * s / 6.0
    r = np.uint64(iy + pad - 1)
    q = np.uint64(ix + pad - 1)
    acc = wy0 * (wx0 * c[r, q] + wx1 * c[r, q + 1] + wx2 * c[r, q + 2] + wx3 * c[r, q + 3])
    acc += wy1 * (wx0 * c[r + 1, q] + wx1 * c[r + 1, q + 1] + wx2 * c[r + 1, q + 2]
                  + wx3 * c[r + 1, q + 3])
    acc += wy2 * (wx0 * c[r + 2, q] + wx1 * c[r + 2, q + 1] + wx2 * c[r + 2, q + 2]
                  + wx3 * c[r + 2, q + 3])
    acc += wy3 * (wx0 * c[r + 3, q] + wx1 * c[r + 3, q + 1] + wx2 * c[r + 3, q + 2]
                  + wx3 * c[r + 3, q + 3])
    return acc


@njit(cache=True, fastmath=True)
def _w5(t):
    """120 x the quintic B-spline weights of the samples at offsets -2..3, fraction t in [0, 1).

    (The common factor 1/120 of both directions is applied once per sample.)"""
    s = 1.0 - t
    t2 = t * t
    s2 = s * s
    w0 = s2 * s2 * s
    w5 = t2 * t2 * t
    w1 = 1.0 + s * (5.0 + s * (10.0 + s * (10.0 + s * (5.0 - 5.0 * s))))
    w4 = 1.0 + t * (5.0 + t * (10.0 + t * (10.0 + t * (5.0 - 5.0 * t))))
    w2 = 66.0 + t2 * (-60.0 + t2 * (30.0 - 10.0 * t))
    w3 = 120.0 - w0 - w1 - w2 - w4 - w5
    return w0, w1, w2, w3, w4, w5


@njit(cache=True, fastmath=True)
def _row6(c, r, q, x0, x1, x2, x3, x4, x5):
    return (x0 * c[r, q] + x1 * c[r, q + 1] + x2 * c[r, q + 2] + x3 * c[r, q + 3]
            + x4 * c[r, q + 4] + x5 * c[r, q + 5])


@njit(cache=True, fastmath=True)
def _eval_quintic(c, pad, x, y):
    ix = int(np.floor(x))
    iy = int(np.floor(y))
    x0, x1, x2, x3, x4, x5 = _w5(x - ix)
    y0, y1, y2, y3, y4, y5 = _w5(y - iy)
    # indices are non-negative by construction (padded coefficients)
    r = np.uint64(iy + pad - 2)
    q = np.uint64(ix + pad - 2)
    return (y0 * _row6(c, r, q, x0, x1, x2, x3, x4, x5)
            + y1 * _row6(c, r + np.uint64(1), q, x0, x1, x2, x3, x4, x5)
            + y2 * _row6(c, r + np.uint64(2), q, x0, x1, x2, x3, x4, x5)
            + y3 * _row6(c, r + np.uint64(3), q, x0, x1, x2, x3, x4, x5)
            + y4 * _row6(c, r + np.uint64(4), q, x0, x1, x2, x3, x4, x5)
            + y5 * _row6(c, r + np.uint64(5), q, x0, x1, x2, x3, x4, x5)) * (1.0 / 14400.0)


@njit(cache=True, fastmath=True)
def _weights5(pos, idx, w, n):
    """Integer parts of ``pos[:n]`` into ``idx`` and 120 x the quintic weights of their
    fractions (as :func:`_w5`) into ``w[:, :n]``: a plain loop over the samples, which the
    compiler turns into vector instructions."""
    for m in range(n):
        f = np.floor(pos[m])
        idx[m] = int(f)
        t = pos[m] - f
        s = 1.0 - t
        t2 = t * t
        s2 = s * s
        w0 = s2 * s2 * s
        w5 = t2 * t2 * t
        w1 = 1.0 + s * (5.0 + s * (10.0 + s * (10.0 + s * (5.0 - 5.0 * s))))
        w4 = 1.0 + t * (5.0 + t * (10.0 + t * (10.0 + t * (5.0 - 5.0 * t))))
        w2 = 66.0 + t2 * (-60.0 + t2 * (30.0 - 10.0 * t))
        w[0, m] = w0
        w[1, m] = w1
        w[2, m] = w2
        w[3, m] = 120.0 - w0 - w1 - w2 - w4 - w5
        w[4, m] = w4
        w[5, m] = w5


@njit(cache=True, fastmath=True)
def _col6(c, r, q, y0, y1, y2, y3, y4, y5):
    return (y0 * c[r, q] + y1 * c[r + np.uint64(1), q] + y2 * c[r + np.uint64(2), q]
            + y3 * c[r + np.uint64(3), q] + y4 * c[r + np.uint64(4), q]
            + y5 * c[r + np.uint64(5), q])


@njit(cache=True, fastmath=True)
def _quintic_at(c, pad, pos, idx, w, g, n):
    """Quintic spline values at ``n`` positions into ``g``: ``pos[m]``, ``pos[n + m]`` are
    the x and y of position m. In two passes: the integer parts and weights of all 2n
    coordinates first (:func:`_weights5`, vectorised; into ``idx`` and ``w``, of at least
    2n columns), then the 6 x 6 sums. The same values as :func:`_eval_quintic` up to
    rounding."""
    _weights5(pos, idx, w, 2 * n)
    for m in range(n):
        r = np.uint64(idx[n + m] + pad - 2)
        q = np.uint64(idx[m] + pad - 2)
        y0 = w[0, n + m]
        y1 = w[1, n + m]
        y2 = w[2, n + m]
        y3 = w[3, n + m]
        y4 = w[4, n + m]
        y5 = w[5, n + m]
        g[m] = (w[0, m] * _col6(c, r, q, y0, y1, y2, y3, y4, y5)
                + w[1, m] * _col6(c, r, q + np.uint64(1), y0, y1, y2, y3, y4, y5)
                + w[2, m] * _col6(c, r, q + np.uint64(2), y0, y1, y2, y3, y4, y5)
                + w[3, m] * _col6(c, r, q + np.uint64(3), y0, y1, y2, y3, y4, y5)
                + w[4, m] * _col6(c, r, q + np.uint64(4), y0, y1, y2, y3, y4, y5)
                + w[5, m] * _col6(c, r, q + np.uint64(5), y0, y1, y2, y3, y4, y5)) \
            * (1.0 / 14400.0)


@njit(cache=True, fastmath=True)
def _eval(c, pad, order, x, y):
    if order == 3:
        return _eval_cubic(c, pad, x, y)
    return _eval_quintic(c, pad, x, y)


@njit(cache=True, fastmath=True)
def evaluate(coef, pad, order, xs, ys):
    """Spline values at arbitrary positions (no bounds check; for tests and tools)."""
    out = np.empty(xs.shape[0])
    for i in range(xs.shape[0]):
        out[i] = _eval(coef, pad, order, xs[i], ys[i])
    return out


@njit(cache=True, fastmath=True)
def _to_matrix(p, second):
    """6x6 warp matrix acting on (dx^2, dx dy, dy^2, dx, dy, 1) (second order), or the affine
    3x3 embedded in its lower-right block (first order)."""
    m = np.zeros((6, 6))
    if second:
        a, b, c = p[0], 1.0 + p[1], p[2]
        d, e, f = 0.5 * p[3], p[4], 0.5 * p[5]
        g, h, i = p[6], p[7], 1.0 + p[8]
        j, k, l = 0.5 * p[9], p[10], 0.5 * p[11]
    else:
        a, b, c = p[0], 1.0 + p[1], p[2]
        d, e, f = 0.0, 0.0, 0.0
        g, h, i = p[3], p[4], 1.0 + p[5]
        j, k, l = 0.0, 0.0, 0.0
    m[0, 0] = b * b + 2 * a * d
    m[0, 1] = 2 * b * c + 2 * a * e
    m[0, 2] = c * c + 2 * a * f
    m[0, 3] = 2 * a * b
    m[0, 4] = 2 * a * c
    m[0, 5] = a * a
    m[1, 0] = b * h + a * j + d * g
    m[1, 1] = b * i + c * h + a * k + e * g
    m[1, 2] = c * i + a * l + f * g
    m[1, 3] = a * h + b * g
    m[1, 4] = a * i + c * g
    m[1, 5] = a * g
    m[2, 0] = h * h + 2 * g * j
    m[2, 1] = 2 * h * i + 2 * g * k
    m[2, 2] = i * i + 2 * g * l
    m[2, 3] = 2 * g * h
    m[2, 4] = 2 * g * i
    m[2, 5] = g * g
    m[3, 0] = d
    m[3, 1] = e
    m[3, 2] = f
    m[3, 3] = b
    m[3, 4] = c
    m[3, 5] = a
    m[4, 0] = j
    m[4, 1] = k
    m[4, 2] = l
    m[4, 3] = h
    m[4, 4] = i
    m[4, 5] = g
    m[5, 5] = 1.0
    return m


@njit(cache=True, fastmath=True)
def _compose_affine(p, dp):
    """p <- W(p) o W(dp)^-1 for the first-order warp. Returns False if W(dp) is singular."""
    a11 = 1.0 + dp[1]
    a12 = dp[2]
    a21 = dp[4]
    a22 = 1.0 + dp[5]
    det = a11 * a22 - a12 * a21
    if abs(det) < 1e-12:
        return False
    i11 = a22 / det
    i12 = -a12 / det
    i21 = -a21 / det
    i22 = a11 / det
    it1 = -(i11 * dp[0] + i12 * dp[3])
    it2 = -(i21 * dp[0] + i22 * dp[3])
    b11 = 1.0 + p[1]
    b12 = p[2]
    b21 = p[4]
    b22 = 1.0 + p[5]
    n11 = b11 * i11 + b12 * i21
    n12 = b11 * i12 + b12 * i22
    n21 = b21 * i11 + b22 * i21
    n22 = b21 * i12 + b22 * i22
    nt1 = b11 * it1 + b12 * it2 + p[0]
    nt2 = b21 * it1 + b22 * it2 + p[3]
    p[0] = nt1
    p[1] = n11 - 1.0
    p[2] = n12
    p[3] = nt2
    p[4] = n21
    p[5] = n22 - 1.0
    return True


@njit(cache=True, fastmath=True)
def _compose_second(p, dp):
    """p <- W(p) o W(dp)^-1 for the second-order warp, in the 6x6 matrix form."""
    md = _to_matrix(dp, True)
    if abs(np.linalg.det(md)) < 1e-18:
        return False
    m = _to_matrix(p, True) @ np.linalg.inv(md)
    p[0] = m[3, 5]
    p[1] = m[3, 3] - 1.0
    p[2] = m[3, 4]
    p[3] = 2.0 * m[3, 0]
    p[4] = m[3, 1]
    p[5] = 2.0 * m[3, 2]
    p[6] = m[4, 5]
    p[7] = m[4, 3]
    p[8] = m[4, 4] - 1.0
    p[9] = 2.0 * m[4, 0]
    p[10] = m[4, 1]
    p[11] = 2.0 * m[4, 2]
    return True


@njit(cache=True, fastmath=True)
def _sample_general(coef, pad, order, x0, y0, half, second, u, ux, uy, uxx, uxy, uyy, v, vx,
                    vy, vxx, vxy, vyy, xmin, xmax, ymax, fn, jac, jg, sc, idx, w):
    """Sample the warped subset; any spline order and shape function.

    Returns (inside, sum g, sum g^2, sum fn*g) and fills jg = sum J^T g. The positions of all
    samples come first, into the scratch array ``sc`` (3 x samples: all x, all y, then the
    values), then the values (the quintic spline in passes over the whole subset,
    :func:`_quintic_at`, with its integer positions and weights in ``idx`` and ``w``, 2 x
    samples), then the sums."""
    npar = jac.shape[1]
    ns = 2 * half + 1
    npix = ns * ns
    sg = 0.0
    sg2 = 0.0
    sfg = 0.0
    for a in range(npar):
        jg[a] = 0.0
    n = 0
    for j in range(ns):
        dy = float(j - half)
        for i in range(ns):
            dx = float(i - half)
            xw = x0 + dx + u + ux * dx + uy * dy
            yw = y0 + dy + v + vx * dx + vy * dy
            if second:
                xw += 0.5 * uxx * dx * dx + uxy * dx * dy + 0.5 * uyy * dy * dy
                yw += 0.5 * vxx * dx * dx + vxy * dx * dy + 0.5 * vyy * dy * dy
            if not (xw >= xmin and xw <= xmax and yw >= xmin and yw <= ymax):
                return False, sg, sg2, sfg
            sc[n] = xw
            sc[npix + n] = yw
            n += 1
    if order == 3:
        for m in range(n):
            sc[2 * npix + m] = _eval_cubic(coef, pad, sc[m], sc[npix + m])
    else:
        _quintic_at(coef, pad, sc, idx, w, sc[2 * npix:], n)
    for m in range(n):
        g = sc[2 * npix + m]
        sg += g
        sg2 += g * g
        sfg += fn[m] * g
        for a in range(npar):
            jg[a] += jac[m, a] * g
    return True, sg, sg2, sfg


@njit(cache=True, fastmath=True)
def _spd_inverse(a, out):
    """Inverse of a symmetric positive-definite matrix by Cholesky factorisation.

    Returns False when a pivot falls below 1e-10 of the largest diagonal entry (the matrix is
    numerically singular, i.e. the subset lacks texture in some direction)."""
    n = a.shape[0]
    lo = np.zeros((n, n))
    dmax = 0.0
    for i in range(n):
        dmax = max(dmax, a[i, i])
    if dmax <= 0.0:
        return False
    for j in range(n):
        s = a[j, j]
        for k in range(j):
            s -= lo[j, k] * lo[j, k]
        if s <= 1e-10 * dmax:
            return False
        d = np.sqrt(s)
        lo[j, j] = d
        for i in range(j + 1, n):
            t = a[i, j]
            for k in range(j):
                t -= lo[i, k] * lo[j, k]
            lo[i, j] = t / d
    # inverse of the lower factor, then out = L^-T L^-1
    li = np.zeros((n, n))
    for i in range(n):
        li[i, i] = 1.0 / lo[i, i]
        for j in range(i):
            t = 0.0
            for k in range(j, i):
                t -= lo[i, k] * li[k, j]
            li[i, j] = t / lo[i, i]
    for i in range(n):
        for j in range(i, n):
            t = 0.0
            for k in range(j, n):
                t += li[k, i] * li[k, j]
            out[i, j] = t
            out[j, i] = t
    return True


@njit(cache=True, fastmath=True)
def _uncertainty_terms(hinv, smat, k, unc):
    """Per-point terms of the predicted displacement variance (dic.metrology.point_sigma).

    With ``h = H^-1 e`` (``e`` selecting u at index 0 or v at index k), ``H`` the Gauss-Newton
    Hessian and ``M = diag(S, S)``, ``S = smat`` the subset sum of the outer products of the
    shape-function vectors (k x k): ``unc = (h_u.e_u, h_v.e_v, h_u.M.h_u, h_v.M.h_v,
    (M h_u).H^-1.(M h_u), (M h_v).H^-1.(M h_v))``, i.e. the diagonal entries of ``H^-1``,
    ``H^-1 M H^-1`` and ``H^-1 M H^-1 M H^-1`` for u and v."""
    n = 2 * k
    mh = np.empty(n)
    for which in range(2):
        i = which * k
        unc[which] = hinv[i, i]
        for blk in range(2):
            o = blk * k
            for a in range(k):
                acc = 0.0
                for b in range(k):
                    acc += smat[a, b] * hinv[o + b, i]
                mh[o + a] = acc
        b_term = 0.0
        for a in range(n):
            b_term += hinv[a, i] * mh[a]
        c_term = 0.0
        for a in range(n):
            row = 0.0
            for b in range(n):
                row += hinv[a, b] * mh[b]
            c_term += mh[a] * row
        unc[2 + which] = b_term
        unc[4 + which] = c_term


@njit(cache=True, fastmath=True)
def _too_flat(flat, sd, sxx, syy):
    """The texture rule before matching. ``flat = (min_std, std_floor, min_grad2)``: a
    subset is flat when its grey-level standard deviation ``sd`` is below ``min_std`` or at most
    ``std_floor`` (rounding level: a constant subset), or when the smaller of its sums of
    squared x and y gradients (``sxx``, ``syy``; SSSIG, Pan et al. 2008) is at most
    ``min_grad2``: the translation-only standard deviation ``sqrt(noise^2 / SSSIG)`` would then
    exceed the largest allowed (see :func:`dic.matching.translation_sigma`)."""
    return sd < flat[0] or sd <= flat[1] or min(sxx, syy) <= flat[2]


@njit(cache=True, fastmath=True)
def _match_one(ref, gx, gy, coef, pad, order, x0, y0, p, half, second, max_iter, tol,
               flat, border, fn, jac, smat, unc, near, sc, idx, w):
    """Match one subset in place of ``p``. Returns (status, zncc, iterations, sigma_factor,
    subset standard deviation); fills ``unc`` (see :func:`_uncertainty_terms`) once the
    Hessian is inverted, and counts in ``near[0]`` the updates below ``NEAR_STEP``.
    ``flat`` holds the texture thresholds of :func:`_too_flat`; ``fn``, ``jac``, ``sc``,
    ``idx`` and ``w`` are the caller's scratch arrays (see :func:`_sample_general`)."""
    rows, cols = ref.shape
    npar = 12 if second else 6
    ns = 2 * half + 1
    npix = ns * ns
    # --- reference subset, its gradient images and the Hessian (done once) ---
    mean = 0.0
    for j in range(ns):
        for i in range(ns):
            mean += ref[y0 - half + j, x0 - half + i]
    mean /= npix
    ss = 0.0
    n = 0
    for j in range(ns):
        dy = float(j - half)
        for i in range(ns):
            dx = float(i - half)
            f = ref[y0 - half + j, x0 - half + i] - mean
            fn[n] = f
            ss += f * f
            fx = gx[y0 - half + j, x0 - half + i]
            fy = gy[y0 - half + j, x0 - half + i]
            if second:
                hx2 = 0.5 * dx * dx
                hxy = dx * dy
                hy2 = 0.5 * dy * dy
                jac[n, 0] = fx
                jac[n, 1] = fx * dx
                jac[n, 2] = fx * dy
                jac[n, 3] = fx * hx2
                jac[n, 4] = fx * hxy
                jac[n, 5] = fx * hy2
                jac[n, 6] = fy
                jac[n, 7] = fy * dx
                jac[n, 8] = fy * dy
                jac[n, 9] = fy * hx2
                jac[n, 10] = fy * hxy
                jac[n, 11] = fy * hy2
            else:
                jac[n, 0] = fx
                jac[n, 1] = fx * dx
                jac[n, 2] = fx * dy
                jac[n, 3] = fy
                jac[n, 4] = fy * dx
                jac[n, 5] = fy * dy
            n += 1
    df = np.sqrt(ss)
    sd = np.sqrt(ss / npix)
    sxx = 0.0
    syy = 0.0
    for n in range(npix):
        sxx += jac[n, 0] * jac[n, 0]
        syy += jac[n, npar // 2] * jac[n, npar // 2]
    if _too_flat(flat, sd, sxx, syy):
        return FLAT, np.nan, 0, np.nan, sd
    hess = np.zeros((npar, npar))
    jsum = np.zeros(npar)
    jf = np.zeros(npar)
    for n in range(npix):
        for a in range(npar):
            ja = jac[n, a]
            jsum[a] += ja
            jf[a] += ja * fn[n]
            for b in range(a, npar):
                hess[a, b] += ja * jac[n, b]
    for a in range(npar):
        for b in range(a):
            hess[a, b] = hess[b, a]
    # reject near-singular Hessians (too little texture in some direction)
    hinv = np.empty((npar, npar))
    if not _spd_inverse(hess, hinv):
        return FLAT, np.nan, 0, np.nan, sd
    # sigma of u per unit image noise: sqrt(2 * (H^-1)_uu) is the usual first-order estimate
    sigma_factor = np.sqrt(hinv[0, 0])
    _uncertainty_terms(hinv, smat, 6 if second else 3, unc)

    jg = np.zeros(npar)
    dp = np.zeros(npar)
    zncc = np.nan
    it = 0
    status = NO_CONVERGENCE
    xmin = border
    xmax = cols - 1.0 - border
    ymax = rows - 1.0 - border
    while it < max_iter:
        it += 1
        # warp coefficients
        if second:
            u, ux, uy, uxx, uxy, uyy = p[0], p[1], p[2], p[3], p[4], p[5]
            v, vx, vy, vxx, vxy, vyy = p[6], p[7], p[8], p[9], p[10], p[11]
        else:
            u, ux, uy, v, vx, vy = p[0], p[1], p[2], p[3], p[4], p[5]
            uxx = uxy = uyy = vxx = vxy = vyy = 0.0
        inside, sg, sg2, sfg = _sample_general(coef, pad, order, x0, y0, half, second, u, ux,
                                               uy, uxx, uxy, uyy, v, vx, vy, vxx, vxy, vyy,
                                               xmin, xmax, ymax, fn, jac, jg, sc, idx, w)
        if not inside:
            return OUTSIDE_IMAGE, np.nan, it, sigma_factor, sd
        gm = sg / npix
        dg2 = sg2 - npix * gm * gm
        if dg2 <= 0.0:
            return FLAT, np.nan, it, sigma_factor, sd
        dgn = np.sqrt(dg2)
        zncc = sfg / (df * dgn)
        # b = sum J^T [(f - fm) - (df/dg)(g - gm)]
        ratio = df / dgn
        for a in range(npar):
            acc = 0.0
            for b in range(npar):
                acc += hinv[a, b] * (jf[b] - ratio * (jg[b] - gm * jsum[b]))
            dp[a] = -acc
        if second:
            h2 = 0.5 * half * half
            norm = (dp[0] ** 2 + dp[6] ** 2
                    + (half * dp[1]) ** 2 + (half * dp[2]) ** 2
                    + (half * dp[7]) ** 2 + (half * dp[8]) ** 2
                    + (h2 * dp[3]) ** 2 + (h2 * 2.0 * dp[4]) ** 2 + (h2 * dp[5]) ** 2
                    + (h2 * dp[9]) ** 2 + (h2 * 2.0 * dp[10]) ** 2 + (h2 * dp[11]) ** 2)
            ok = _compose_second(p, dp)
        else:
            norm = (dp[0] ** 2 + dp[3] ** 2 + (half * dp[1]) ** 2 + (half * dp[2]) ** 2
                    + (half * dp[4]) ** 2 + (half * dp[5]) ** 2)
            ok = _compose_affine(p, dp)
        if norm < _NEAR2:
            near[0] += 1
        if not ok:
            return DEGENERATE, np.nan, it, sigma_factor, sd
        for a in range(npar):
            if not np.isfinite(p[a]):
                return DEGENERATE, np.nan, it, sigma_factor, sd
        if second:
            det = (1.0 + p[1]) * (1.0 + p[8]) - p[2] * p[7]
        else:
            det = (1.0 + p[1]) * (1.0 + p[5]) - p[2] * p[4]
        if det < 0.05:
            return DEGENERATE, np.nan, it, sigma_factor, sd
        if np.sqrt(norm) < tol:
            status = MEASURED
            break
    return status, zncc, it, sigma_factor, sd


@njit(cache=True, fastmath=True)
def _match_affine(ref, gx, gy, coef, pad, order, x0, y0, p, half, max_iter, tol, flat,
                  border, smat, unc, near, sub, pos, idx, w):
    """First-order IC-GN for one subset.

    Same algorithm as :func:`_match_one`; the Hessian, J^T f and J^T g are accumulated as
    moment sums (of the gradients' products times 1, dx, dy, dx^2, dx dy, dy^2), which is
    several times cheaper than forming the steepest-descent images explicitly. The reference
    subset is copied into rows 0-2 of the caller's scratch array ``sub`` (f, df/dx, df/dy; one
    set of scratch arrays per chunk of points), whose rows 3-7 hold each sample's dx, dy,
    dx^2, dx dy, dy^2 (filled by the caller); the sums are then plain loops over the samples,
    which the compiler turns into vector instructions. Each iteration works the same way: the
    warped positions into ``pos`` (all x, then all y), the deformed image's values into row 8
    of ``sub`` (quintic: :func:`_quintic_at`, with the integer positions in ``idx`` and the
    weights in ``w``), then the sums: 35 % less time per iteration than sample by sample.
    """
    rows, cols = ref.shape
    ns = 2 * half + 1
    npix = ns * ns
    h = float(half)
    # --- reference subset: moments of f, its gradients and their products ---
    # the subset into contiguous rows of the scratch array, then the sums in plain loops over
    # its samples (vectorised by the compiler); sub rows 3-7 hold dx, dy, dx^2, dx dy, dy^2
    # (filled by the caller)
    for j in range(ns):
        r = np.uint64(y0 - half + j)
        q0 = np.uint64(x0 - half)
        for i in range(ns):
            m = j * ns + i
            q = q0 + np.uint64(i)
            sub[0, m] = ref[r, q]
            sub[1, m] = gx[r, q]
            sub[2, m] = gy[r, q]
    # one loop with every sum in its own scalar (three loops, one per gradient product,
    # took 7 % longer)
    A1 = Ax = Ay = Axx = Axy = Ayy = 0.0
    B1 = Bx = By = Bxx = Bxy = Byy = 0.0
    C1 = Cx = Cy = Cxx = Cxy = Cyy = 0.0
    for m in range(npix):
        fx = sub[1, m]
        fy = sub[2, m]
        dx = sub[3, m]
        dy = sub[4, m]
        dxx = sub[5, m]
        dxy = sub[6, m]
        dyy = sub[7, m]
        xx = fx * fx
        xy = fx * fy
        yy = fy * fy
        A1 += xx
        Ax += xx * dx
        Ay += xx * dy
        Axx += xx * dxx
        Axy += xx * dxy
        Ayy += xx * dyy
        B1 += xy
        Bx += xy * dx
        By += xy * dy
        Bxx += xy * dxx
        Bxy += xy * dxy
        Byy += xy * dyy
        C1 += yy
        Cx += yy * dx
        Cy += yy * dy
        Cxx += yy * dxx
        Cxy += yy * dxy
        Cyy += yy * dyy
    sf = 0.0
    sf2 = 0.0
    jf0 = jf1 = jf2 = jf3 = jf4 = jf5 = 0.0
    js0 = js1 = js2 = js3 = js4 = js5 = 0.0
    for m in range(npix):
        f = sub[0, m]
        fx = sub[1, m]
        fy = sub[2, m]
        dx = sub[3, m]
        dy = sub[4, m]
        sf += f
        sf2 += f * f
        fxf = fx * f
        fyf = fy * f
        jf0 += fxf
        jf1 += fxf * dx
        jf2 += fxf * dy
        jf3 += fyf
        jf4 += fyf * dx
        jf5 += fyf * dy
        js0 += fx
        js1 += fx * dx
        js2 += fx * dy
        js3 += fy
        js4 += fy * dx
        js5 += fy * dy
    fm = sf / npix
    ss = sf2 - npix * fm * fm
    if ss <= 0.0:
        return FLAT, np.nan, 0, np.nan, 0.0
    df = np.sqrt(ss)
    sd = np.sqrt(ss / npix)
    if _too_flat(flat, sd, A1, C1):
        return FLAT, np.nan, 0, np.nan, sd
    hess = np.empty((6, 6))
    hess[0, 0] = A1
    hess[0, 1] = Ax
    hess[0, 2] = Ay
    hess[1, 1] = Axx
    hess[1, 2] = Axy
    hess[2, 2] = Ayy
    hess[0, 3] = B1
    hess[0, 4] = Bx
    hess[0, 5] = By
    hess[1, 3] = Bx
    hess[1, 4] = Bxx
    hess[1, 5] = Bxy
    hess[2, 3] = By
    hess[2, 4] = Bxy
    hess[2, 5] = Byy
    hess[3, 3] = C1
    hess[3, 4] = Cx
    hess[3, 5] = Cy
    hess[4, 4] = Cxx
    hess[4, 5] = Cxy
    hess[5, 5] = Cyy
    for a in range(6):
        for b in range(a):
            hess[a, b] = hess[b, a]
    hinv = np.empty((6, 6))
    if not _spd_inverse(hess, hinv):
        return FLAT, np.nan, 0, np.nan, sd
    sigma_factor = np.sqrt(hinv[0, 0])
    _uncertainty_terms(hinv, smat, 3, unc)
    # J^T (f - fm) and J^T 1
    jfn = np.empty(6)
    jsum = np.empty(6)
    jsum[0] = js0
    jsum[1] = js1
    jsum[2] = js2
    jsum[3] = js3
    jsum[4] = js4
    jsum[5] = js5
    jfn[0] = jf0 - fm * js0
    jfn[1] = jf1 - fm * js1
    jfn[2] = jf2 - fm * js2
    jfn[3] = jf3 - fm * js3
    jfn[4] = jf4 - fm * js4
    jfn[5] = jf5 - fm * js5
    jg = np.empty(6)
    dp = np.empty(6)
    xmin = border
    xmax = cols - 1.0 - border
    ymax = rows - 1.0 - border
    zncc = np.nan
    it = 0
    while it < max_iter:
        it += 1
        u, ux, uy, v, vx, vy = p[0], p[1], p[2], p[3], p[4], p[5]
        # an affine image of a square stays inside a convex domain if its corners do
        for cy in (-h, h):
            for cx in (-h, h):
                xw = x0 + cx + u + ux * cx + uy * cy
                yw = y0 + cy + v + vx * cx + vy * cy
                if not (xw >= xmin and xw <= xmax and yw >= xmin and yw <= ymax):
                    return OUTSIDE_IMAGE, np.nan, it, sigma_factor, sd
        sg = 0.0
        sg2 = 0.0
        sfg = 0.0
        g0 = g1 = g2 = g3 = g4 = g5 = 0.0
        # the subset's warped positions, its values, then the sums over it, in plain loops
        # over its samples that the compiler turns into vector instructions
        m = 0
        for j in range(ns):
            dy = float(j - half)
            xr = x0 + u + uy * dy - (1.0 + ux) * h
            yr = y0 + dy + v + vy * dy - vx * h
            for i in range(ns):
                pos[m] = xr + (1.0 + ux) * i
                pos[npix + m] = yr + vx * i
                m += 1
        gs = sub[8]
        if order == 3:
            for m in range(npix):
                gs[m] = _eval_cubic(coef, pad, pos[m], pos[npix + m])
        else:
            _quintic_at(coef, pad, pos, idx, w, gs, npix)
        for m in range(npix):
            g = gs[m]
            sg += g
            sg2 += g * g
            sfg += sub[0, m] * g
            fxg = sub[1, m] * g
            fyg = sub[2, m] * g
            g0 += fxg
            g1 += fxg * sub[3, m]
            g2 += fxg * sub[4, m]
            g3 += fyg
            g4 += fyg * sub[3, m]
            g5 += fyg * sub[4, m]
        gm = sg / npix
        dg2 = sg2 - npix * gm * gm
        if dg2 <= 0.0:
            return FLAT, np.nan, it, sigma_factor, sd
        dgn = np.sqrt(dg2)
        zncc = (sfg - fm * sg) / (df * dgn)
        ratio = df / dgn
        jg[0] = g0
        jg[1] = g1
        jg[2] = g2
        jg[3] = g3
        jg[4] = g4
        jg[5] = g5
        for a in range(6):
            jg[a] = jfn[a] - ratio * (jg[a] - gm * jsum[a])
        for a in range(6):
            acc = 0.0
            for b in range(6):
                acc += hinv[a, b] * jg[b]
            dp[a] = -acc
        norm = (dp[0] ** 2 + dp[3] ** 2 + (h * dp[1]) ** 2 + (h * dp[2]) ** 2
                + (h * dp[4]) ** 2 + (h * dp[5]) ** 2)
        if norm < _NEAR2:
            near[0] += 1
        if not _compose_affine(p, dp):
            return DEGENERATE, np.nan, it, sigma_factor, sd
        for a in range(6):
            if not np.isfinite(p[a]):
                return DEGENERATE, np.nan, it, sigma_factor, sd
        if (1.0 + p[1]) * (1.0 + p[5]) - p[2] * p[4] < 0.05:
            return DEGENERATE, np.nan, it, sigma_factor, sd
        if np.sqrt(norm) < tol:
            return MEASURED, zncc, it, sigma_factor, sd
    return NO_CONVERGENCE, zncc, it, sigma_factor, sd


@njit(cache=True, nogil=True, fastmath=True)
def match_first(lo, hi, ref, gx, gy, coef, pad, order, xs, ys, p_init, half, max_iter, tol,
                flat, border, out_p, out_status, out_zncc, out_iter, out_sigma, smat,
                out_unc, out_std, out_near):
    """Match the subsets centred on integer pixels (xs[k], ys[k]), k = lo..hi-1, first order.

    The moment-sum solver :func:`_match_affine`. ``out_unc[k]`` receives the uncertainty terms
    of :func:`_uncertainty_terms` (NaN where the Hessian was not inverted); ``smat`` is the
    subset sum of the outer products of the shape-function vectors; ``out_near[k]`` the
    iterations whose update was below ``NEAR_STEP``. Kept apart from :func:`match_general` so
    that a run compiles only the solver it uses."""
    p = np.empty(6)
    near = np.zeros(1, np.int64)
    # scratch of the passes over the subset, once per chunk of points (see _match_affine)
    ns = 2 * half + 1
    sub = np.empty((9, ns * ns))
    for j in range(ns):
        for i in range(ns):
            dx = float(i - half)
            dy = float(j - half)
            sub[3, j * ns + i] = dx
            sub[4, j * ns + i] = dy
            sub[5, j * ns + i] = dx * dx
            sub[6, j * ns + i] = dx * dy
            sub[7, j * ns + i] = dy * dy
    pos = np.empty(2 * ns * ns)
    idx = np.empty(2 * ns * ns, np.int64)
    w = np.empty((6, 2 * ns * ns))
    for k in range(lo, hi):
        for a in range(6):
            p[a] = p_init[k, a]
        unc = out_unc[k]
        for a in range(6):
            unc[a] = np.nan
        near[0] = 0
        st, zn, it, sf, sd = _match_affine(ref, gx, gy, coef, pad, order, xs[k], ys[k], p,
                                           half, max_iter, tol, flat, border, smat, unc, near,
                                           sub, pos, idx, w)
        out_near[k] = near[0]
        for a in range(6):
            out_p[k, a] = p[a]
        out_status[k] = st
        out_zncc[k] = zn
        out_iter[k] = it
        out_sigma[k] = sf
        out_std[k] = sd


@njit(cache=True, nogil=True, fastmath=True)
def match_general(lo, hi, ref, gx, gy, coef, pad, order, xs, ys, p_init, half, second,
                  max_iter, tol, flat, border, out_p, out_status, out_zncc, out_iter,
                  out_sigma, smat, out_unc, out_std, out_near):
    """As :func:`match_first` with the general solver :func:`_match_one` (second order, or
    first order through the steepest-descent images, which the tests compare with the
    moment-sum solver)."""
    npar = 12 if second else 6
    ns = 2 * half + 1
    # scratch arrays are allocated once per chunk of points, not once per point
    fn = np.empty(ns * ns)
    jac = np.empty((ns * ns, npar))
    sc = np.empty(3 * ns * ns)
    idx = np.empty(2 * ns * ns, np.int64)
    w = np.empty((6, 2 * ns * ns))
    p = np.empty(npar)
    near = np.zeros(1, np.int64)
    for k in range(lo, hi):
        for a in range(npar):
            p[a] = p_init[k, a]
        unc = out_unc[k]
        for a in range(6):
            unc[a] = np.nan
        near[0] = 0
        st, zn, it, sf, sd = _match_one(ref, gx, gy, coef, pad, order, xs[k], ys[k], p,
                                        half, second, max_iter, tol, flat, border, fn, jac,
                                        smat, unc, near, sc, idx, w)
        out_near[k] = near[0]
        for a in range(npar):
            out_p[k, a] = p[a]
        out_status[k] = st
        out_zncc[k] = zn
        out_iter[k] = it
        out_sigma[k] = sf
        out_std[k] = sd


@njit(cache=True, nogil=True)
def flat_subsets(lo, hi, ref, gx, gy, xs, ys, half, flat, out_std, out_flat):
    """Per subset centred on (xs[k], ys[k]), k = lo..hi-1: grey-level standard deviation and
    whether the texture rule :func:`_too_flat` (thresholds ``flat``) finds it flat, from the
    sums of squared x and y gradients (SSSIG, Pan et al. 2008); the rule the solvers apply
    before they iterate."""
    ns = 2 * half + 1
    npix = ns * ns
    for k in range(lo, hi):
        s = 0.0
        s2 = 0.0
        sxx = 0.0
        syy = 0.0
        for j in range(ns):
            r = np.uint64(ys[k] - half + j)
            for i in range(ns):
                q = np.uint64(xs[k] - half + i)
                f = ref[r, q]
                s += f
                s2 += f * f
                sxx += gx[r, q] * gx[r, q]
                syy += gy[r, q] * gy[r, q]
        m = s / npix
        sd = np.sqrt(max(s2 / npix - m * m, 0.0))
        out_std[k] = sd
        out_flat[k] = _too_flat(flat, sd, sxx, syy)
