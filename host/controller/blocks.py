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
    and at the decel rate while it falls towards zero (a reversal decelerates to zero first).

    With rounding_s > 0 the rate itself is ramped (an S-curve, jerk = rate / rounding_s): it
    builds up over rounding_s and dies away so that the output lands on the target with zero
    rate. A drive's acceleration feedforward then rises and falls smoothly instead of
    stepping, so the speed loop has no current step to absorb where a linear ramp ends
    (common practice, no source: "ramp rounding" or jerk limitation)."""

    __slots__ = ("out", "rate")

    def __init__(self):
        self.out = 0.0
        self.rate = 0.0  # d out / dt of the last step

    def reset(self, value: float = 0.0) -> None:
        self.out = value
        self.rate = 0.0

    def step(self, target: float, dt_s: float, accel: float, decel: float, rounding_s: float = 0.0) -> float:
        y = self.out
        if rounding_s > 0.0 and dt_s > 0.0:
            return self._rounded(target, dt_s, accel, decel, rounding_s)
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
        self.rate = (y - self.out) / dt_s if dt_s > 0.0 else 0.0
        self.out = y
        return y

    def _rounded(self, target: float, dt_s: float, accel: float, decel: float, rounding_s: float) -> float:
        y = self.out
        d = target - y
        r = self.rate
        if d == 0.0 and r == 0.0:
            return y
        s = 1.0 if d > 0.0 or (d == 0.0 and r < 0.0) else -1.0
        growing = (y >= 0.0) if s > 0.0 else (y <= 0.0)  # moving away from zero: accel rate
        a = accel if growing else decel
        j = a / rounding_s
        rs = r * s  # rate towards the target
        dist = d * s
        rs_new = rs + j * dt_s
        if rs_new > a:
            rs_new = a
        # the rate from which the jerk limit just stops the output on the target: the rate
        # follows sqrt(2 j distance) in, which brings it down at the jerk rate
        land = math.sqrt(2.0 * j * dist) if dist > 0.0 else 0.0
        if rs_new > land:
            rs_new = land
        if rs_new * dt_s >= dist:
            self.out, self.rate = target, 0.0  # landed (within one step's rate change)
            return target
        y_new = y + s * rs_new * dt_s
        if (y_new - target) * s >= 0.0:
            self.out, self.rate = target, 0.0
            return target
        self.out, self.rate = y_new, s * rs_new
        return y_new


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
