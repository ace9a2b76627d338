"""Firing-angle linearisation of the armature and field bridges, and the armature bridge's
discontinuous-conduction boundary.

Owns: the bridge voltage formulas the controller inverts,
  three-phase fully controlled 6-pulse bridge:  Vd = Vdo * cos(alpha), Vdo = 3*sqrt(2)/pi * V_LL
  single-phase half-controlled bridge:         Vd = 0.45 * Vac * (1 + cos(alpha))
(both from Mohan, Undeland, Robbins, "Power Electronics: Converters, Applications and Design",
the chapters on line-frequency phase-controlled rectifiers; the half-controlled form recalled
from memory), and the critical (boundary) mean current of the 6-pulse bridge.
Must never import serial, numba, rtmodel or host.link.
"""

from __future__ import annotations

import math

SQRT2 = math.sqrt(2.0)
VDO_PER_VLL = 3.0 * SQRT2 / math.pi  # 1.3505
HALF_BRIDGE_K = SQRT2 / math.pi  # 0.4502: Vd = K * Vac * (1 + cos alpha)


def vdo(v_ll_rms: float) -> float:
    """Ideal no-load DC voltage of a 6-pulse bridge at alpha = 0."""
    return VDO_PER_VLL * v_ll_rms


def _acos_deg(c: float, alpha_min_deg: float, alpha_max_deg: float) -> float:
    """arccos in degrees with c clipped to [-1, 1], then the angle clamped to the limits."""
    if c >= 1.0:
        a = 0.0
    elif c <= -1.0:
        a = 180.0
    else:
        a = math.degrees(math.acos(c))
    if a < alpha_min_deg:
        return alpha_min_deg
    if a > alpha_max_deg:
        return alpha_max_deg
    return a


def bridge_alpha_deg(v_ref: float, v_do: float, alpha_min_deg: float = 0.0,
                     alpha_max_deg: float = 180.0) -> float:
    """Firing angle for a mean voltage v_ref: alpha = arccos(v_ref / Vdo), clamped."""
    return _acos_deg(v_ref / v_do, alpha_min_deg, alpha_max_deg)


def half_bridge_alpha_deg(v_ref: float, v_ac_rms: float, alpha_min_deg: float = 0.0,
                          alpha_max_deg: float = 180.0) -> float:
    """Firing angle of the half-controlled field bridge for a mean voltage v_ref."""
    return _acos_deg(v_ref / (HALF_BRIDGE_K * v_ac_rms) - 1.0, alpha_min_deg, alpha_max_deg)


def half_bridge_voltage(alpha_deg: float, v_ac_rms: float) -> float:
    return HALF_BRIDGE_K * v_ac_rms * (1.0 + math.cos(math.radians(alpha_deg)))


def critical_current_A(alpha_deg: float, v_ll_rms: float, f_hz: float, l_h: float,
                       points: int = 240) -> float:
    """Mean armature current at the edge of continuous conduction of an ideal 6-pulse bridge.

    Over one pulse the bridge output is v = sqrt(2)*V_LL*cos(phi + alpha), phi in
    [-30 deg, +30 deg]; in continuous conduction the load sees the mean Vd = Vdo cos(alpha)
    plus this ripple, and L di/dt = v - Vd (resistance neglected: the boundary is set by the
    inductance). The current ripple i(phi) is the integral of the ripple voltage; the current
    just touches zero when its mean equals mean(i) - min(i). That mean is the boundary:
    below it conduction is discontinuous.
    """
    vm = SQRT2 * v_ll_rms
    a = math.radians(alpha_deg)
    vd = VDO_PER_VLL * v_ll_rms * math.cos(a)
    w = 2.0 * math.pi * f_hz
    h = (math.pi / 3.0) / points
    i = 0.0
    i_min = 0.0
    total = 0.0
    # closed-form integral of the ripple voltage from -30 deg to phi (exact, no step error)
    s0 = math.sin(-math.pi / 6.0 + a)
    for k in range(1, points + 1):
        phi = -math.pi / 6.0 + k * h
        i = (vm * (math.sin(phi + a) - s0) - vd * (phi + math.pi / 6.0)) / (w * l_h)
        if i < i_min:
            i_min = i
        total += i
    mean = total / points
    return mean - i_min


def critical_current_table(v_ll_rms: float, f_hz: float, l_h: float,
                           step_deg: float = 5.0) -> tuple[tuple[float, ...], tuple[float, ...]]:
    """(alpha_deg points, boundary current points) for a per-frame table look-up."""
    n = int(round(180.0 / step_deg))
    alphas = tuple(k * step_deg for k in range(n + 1))
    return alphas, tuple(critical_current_A(a, v_ll_rms, f_hz, l_h) for a in alphas)
