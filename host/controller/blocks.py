"""Control blocks stepped once per frame: PI with anti-windup, ramp generator, first-order filter.

Owns: the arithmetic of these blocks, on plain floats (no numpy: a frame step must stay cheap).
Must never import serial, numba, rtmodel or host.link.
"""

from __future__ import annotations

import math


class PI:
    """PI controller u = ff + g*kp*(e + (1/ti) * integral e dt), clamped to [lo, hi].

    The integral is stored in output units, so a gain change (g: gain scheduling, adaptive
    DCM gain) never makes the output jump. Anti-windup by clamping: the integral stops
    growing while the output sits on a limit and the error pushes further into it, and it is
    bounded so that ff + integral stays inside [lo, hi]; the output leaves a limit on the first
    frame the error changes sign.
    """

    __slots__ = ("kp", "ti_s", "integral", "out", "saturated")

    def __init__(self, kp: float, ti_s: float):
        self.kp = kp
        self.ti_s = ti_s
        self.integral = 0.0
        self.out = 0.0
        self.saturated = 0  # +1 high limit, -1 low limit, 0 free

    def reset(self, integral: float = 0.0) -> None:
        self.integral = integral
        self.out = 0.0
        self.saturated = 0

    def step(self, err: float, dt_s: float, lo: float, hi: float, ff: float = 0.0,
             gain: float = 1.0, int_hi: float | None = None, hold: bool = False) -> float:
        """int_hi: a higher bound for ff + integral than hi, for a limit that moves up on its
        own (a soft-start ceiling): the integral is not dragged down by it.
        hold: freeze the integral this frame (the loop below cannot act, e.g. a changeover)."""
        kp = gain * self.kp
        integ = self.integral
        u = ff + kp * err + integ
        if u > hi:
            sat = 1
        elif u < lo:
            sat = -1
        else:
            sat = 0
        if not hold and not ((sat == 1 and err > 0.0) or (sat == -1 and err < 0.0)):
            integ += kp * err * dt_s / self.ti_s
        # keep ff + integral inside the limits: no stored windup when the limits move
        top = hi if int_hi is None else int_hi
        if integ > top - ff:
            integ = top - ff
        elif integ < lo - ff:
            integ = lo - ff
        self.integral = integ
        u = ff + kp * err + integ
        if u > hi:
            u = hi
            self.saturated = 1
        elif u < lo:
            u = lo
            self.saturated = -1
        else:
            self.saturated = 0
        self.out = u
        return u


class Ramp:
    """Ramp generator: the output moves to the target at the accel rate while |output| grows
    and at the decel rate while it falls towards zero (a reversal decelerates to zero first)."""

    __slots__ = ("out",)

    def __init__(self):
        self.out = 0.0

    def reset(self, value: float = 0.0) -> None:
        self.out = value

    def step(self, target: float, dt_s: float, accel: float, decel: float) -> float:
        y = self.out
        if target > y:
            if y < 0.0:  # moving towards zero from below: decelerating
                y += decel * dt_s
                if y > 0.0:
                    y = 0.0 if target >= 0.0 else y
                if y > target:
                    y = target
            else:
                y += accel * dt_s
                if y > target:
                    y = target
        elif target < y:
            if y > 0.0:
                y -= decel * dt_s
                if y < 0.0:
                    y = 0.0 if target <= 0.0 else y
                if y < target:
                    y = target
            else:
                y -= accel * dt_s
                if y < target:
                    y = target
        self.out = y
        return y


def lowpass_factor(dt_s: float, tau_s: float) -> float:
    """Exact discretisation of a first-order lag: y += k * (x - y) with k = 1 - exp(-dt/tau)."""
    if tau_s <= 0.0:
        return 1.0
    return 1.0 - math.exp(-dt_s / tau_s)


def interp(x: float, xs: tuple[float, ...], ys: tuple[float, ...]) -> float:
    """Piecewise-linear table look-up, held flat outside the table on the right, linear
    extrapolation never (a magnetisation curve must not be extrapolated)."""
    if x <= xs[0]:
        return ys[0]
    n = len(xs)
    for i in range(1, n):
        if x <= xs[i]:
            x0 = xs[i - 1]
            y0 = ys[i - 1]
            return y0 + (ys[i] - y0) * (x - x0) / (xs[i] - x0)
    return ys[n - 1]
