"""Magnetization curve: open-circuit EMF against net field excitation, and its slope.

Owns the curve lookup used inside the step kernel and the one-time preparation of the table.
Must never import host or do I/O.

The table is (i_k, E_k), k = 0..n-1, measured at speed w_c: i_0 = 0 and E_0 = E_res >= 0 is the
residual EMF; i and E strictly increase. Between points a monotone piecewise cubic Hermite
curve (Fritsch & Carlson 1980 slopes, as in scipy's PchipInterpolator) is used, so the curve
never overshoots between measured points. The end slopes are the secant slopes of the end
segments, so past the last point the curve continues as a straight line with the slope of the
last measured segment (deep saturation: small but positive incremental permeability). With P_MAG_LINEAR set
the curve is instead straight between the points (its slope jumps at each point), as hand
calculations read a curve.

For negative excitation the curve is point-mirrored, with the residual EMF fading out over the
first table segment:  E(i) = -E_tab(-i) + 2 E_res max(0, 1 + i/i_1).  The model has no
hysteresis; this keeps E(i) monotone and continuous, so a field connected the wrong way round
drives the EMF down from the residual instead of building up.

At speed w the EMF is E(i) * w / w_c; the flux constant is K*phi = E(i) / w_c (V s/rad), and the
torque is K*phi * ia. The incremental inductance of the curve winding follows the slope:
L_m(i) = L_m0 * E'(i) / E'_max, where E'_max is the steepest segment (the air-gap line).
"""

import numpy as np
from numba import njit

from .layout import (
    AR_MAX_POINTS,
    MAG_MAX_POINTS,
    P_AR_IA0,
    P_AR_IF0,
    P_AR_N,
    P_MAG_D0,
    P_MAG_E0,
    P_MAG_I0,
    P_MAG_INV_SLOPE0,
    P_MAG_INVH0,
    P_MAG_LINEAR,
    P_MAG_N,
    P_MAG_SLOPE0,
)


def pchip_slopes(i_A, e_V):
    """Monotone cubic Hermite slopes at the knots (Fritsch-Carlson, harmonic mean).

    Parameters
    ----------
    i_A, e_V : 1-D arrays of equal length n >= 2, strictly increasing.

    Returns
    -------
    d : ndarray (n,), dE/di at each knot (V/A). Interior slopes are the weighted harmonic
        means used by scipy.interpolate.PchipInterpolator; end slopes are the end secants.
    """
    i_A = np.asarray(i_A, dtype=float)
    e_V = np.asarray(e_V, dtype=float)
    h = np.diff(i_A)
    delta = np.diff(e_V) / h
    n = len(i_A)
    d = np.empty(n)
    d[0] = delta[0]
    d[-1] = delta[-1]
    for k in range(1, n - 1):
        if delta[k - 1] * delta[k] <= 0.0:
            d[k] = 0.0
        else:
            w1 = 2.0 * h[k] + h[k - 1]
            w2 = h[k] + 2.0 * h[k - 1]
            d[k] = (w1 + w2) / (w1 / delta[k - 1] + w2 / delta[k])
    return d


def pack_curve(p, i_A, e_V, ar_ia_A=(), ar_if_A=(), linear=False):
    """Write the magnetization and armature-reaction tables into the parameter array p.

    linear: straight lines between the points (the last segment's slope past the ends, as
    for the cubic) instead of the monotone cubic."""
    p[P_MAG_LINEAR] = 1.0 if linear else 0.0
    n = len(i_A)
    if not 2 <= n <= MAG_MAX_POINTS:
        raise ValueError(f"magnetization table needs 2..{MAG_MAX_POINTS} points, got {n}")
    d = pchip_slopes(i_A, e_V)
    p[P_MAG_N] = n
    p[P_MAG_I0 : P_MAG_I0 + n] = i_A
    p[P_MAG_E0 : P_MAG_E0 + n] = e_V
    p[P_MAG_D0 : P_MAG_D0 + n] = d
    p[P_MAG_SLOPE0] = float(np.max(np.diff(e_V) / np.diff(i_A)))
    p[P_MAG_INV_SLOPE0] = 1.0 / p[P_MAG_SLOPE0]
    p[P_MAG_INVH0 : P_MAG_INVH0 + n - 1] = 1.0 / np.diff(np.asarray(i_A, dtype=float))
    m = len(ar_ia_A)
    if m > AR_MAX_POINTS:
        raise ValueError(f"armature reaction table allows {AR_MAX_POINTS} points, got {m}")
    p[P_AR_N] = m
    if m:
        p[P_AR_IA0 : P_AR_IA0 + m] = ar_ia_A
        p[P_AR_IF0 : P_AR_IF0 + m] = ar_if_A


_U = np.uint64  # an index type numba does not wrap around


@njit(cache=True, inline="always")
def _curve_pos(p, i, seg):
    """E_tab(i), dE/di and the segment used, for i >= 0.

    seg is the segment to try first (0 <= seg < n - 1): the one the previous evaluation
    used, since the excitation moves far less than a segment per step; a miss searches.
    Table indices go through _U (unsigned): numba then leaves out its negative-index
    wraparound, three instructions per load.
    """
    n = int(p[P_MAG_N])
    last = n - 1
    i_last = p[_U(P_MAG_I0 + last)]
    if i >= i_last:
        slope = p[_U(P_MAG_D0 + last)]
        return p[_U(P_MAG_E0 + last)] + slope * (i - i_last), slope, seg
    lo = seg
    hi = seg + 1
    if not (p[_U(P_MAG_I0 + lo)] <= i and i < p[_U(P_MAG_I0 + hi)]):
        # binary search for segment k with i_k <= i < i_{k+1}
        lo = 0
        hi = last
        while hi - lo > 1:
            mid = (lo + hi) >> 1
            if p[_U(P_MAG_I0 + mid)] <= i:
                lo = mid
            else:
                hi = mid
    x0 = p[_U(P_MAG_I0 + lo)]
    h = p[_U(P_MAG_I0 + hi)] - x0
    inv_h = p[_U(P_MAG_INVH0 + lo)]
    y0 = p[_U(P_MAG_E0 + lo)]
    y1 = p[_U(P_MAG_E0 + hi)]
    if p[P_MAG_LINEAR] > 0.5:
        # straight lines between the points, as a hand calculation reads a curve
        slope_seg = (y1 - y0) * inv_h
        return y0 + slope_seg * (i - x0), slope_seg, lo
    d0 = p[_U(P_MAG_D0 + lo)]
    d1 = p[_U(P_MAG_D0 + hi)]
    t = (i - x0) * inv_h
    t2 = t * t
    t3 = t2 * t
    h00 = 2.0 * t3 - 3.0 * t2 + 1.0
    h10 = t3 - 2.0 * t2 + t
    h01 = -2.0 * t3 + 3.0 * t2
    h11 = t3 - t2
    e = h00 * y0 + h10 * h * d0 + h01 * y1 + h11 * h * d1
    # derivative of the Hermite form
    g00 = (6.0 * t2 - 6.0 * t) * inv_h
    g10 = 3.0 * t2 - 4.0 * t + 1.0
    g01 = (-6.0 * t2 + 6.0 * t) * inv_h
    g11 = 3.0 * t2 - 2.0 * t
    de = g00 * y0 + g10 * d0 + g01 * y1 + g11 * d1
    return e, de, lo


@njit(cache=True, inline="always")
def curve_emf(p, i, seg):
    """Open-circuit EMF at the curve speed for net excitation i (curve-winding amperes).

    seg: the table segment to try first (see _curve_pos; 0 when unknown).
    Returns (E_V, dE_di_V_per_A, segment used). Monotone in i for every i; see the module
    docstring.
    """
    # one lookup for both signs: each inlined copy of the lookup costs compile time, and the
    # kernel inlines this function at every machine evaluation
    e, de, seg = _curve_pos(p, abs(i), seg)
    if i >= 0.0:
        return e, de, seg
    e_res = p[P_MAG_E0]
    i1 = p[P_MAG_I0 + 1]
    fade = 1.0 + i / i1
    if fade > 0.0:
        return -e + 2.0 * e_res * fade, de + 2.0 * e_res / i1, seg
    return -e, de, seg


@njit(cache=True, inline="always")
def reaction_field_A(p, ia):
    """Demagnetizing equivalent field current of armature reaction at armature current ia.

    Piecewise linear in |ia| through (0, 0) and the table; linear extrapolation past the end.
    Zero when the table is empty (the default).
    """
    m = int(p[P_AR_N])
    if m == 0:
        return 0.0
    a = abs(ia)
    x0 = 0.0
    y0 = 0.0
    for k in range(m):
        x1 = p[P_AR_IA0 + k]
        y1 = p[P_AR_IF0 + k]
        if a <= x1 or k == m - 1:
            return y0 + (y1 - y0) * (a - x0) / (x1 - x0)
        x0 = x1
        y0 = y1
    return 0.0


def curve_emf_py(p, i):
    """Python-callable wrapper (for op-point solvers and tests)."""
    e, de, _ = curve_emf(p, float(i), 0)
    return e, de
