"""Bridge changeover of a circulating-current-free dual converter (4-quadrant armature supply).

Owns: which bridge may fire. When the current reference asks for the other sign, the active
bridge is phased back to the inversion end (current driven to zero), then all pulses block
while |Ia| stays below the zero-current threshold for the dead time, and only then the other
bridge is selected. Whoever starts the new bridge must start it from the inversion end (the
controller does: firing-angle floor at alpha_max, released at a set rate).
Must never import serial, numba, rtmodel or host.link.
"""

from __future__ import annotations

from host.signals import BRIDGE_BLOCKED, BRIDGE_FORWARD, BRIDGE_REVERSE

CONDUCT = 0  # active bridge fires under current control
ZEROING = 1  # active bridge held at the inversion end until |Ia| < zero current
DEAD = 2  # all pulses blocked; counting the dead time with |Ia| below the threshold

PHASE_NAMES = {CONDUCT: "conduct", ZEROING: "zeroing", DEAD: "dead_time"}


class Changeover:
    __slots__ = ("dual", "zero_current_A", "dead_time_s", "hysteresis_A", "dwell_s", "bridge", "phase",
                 "timer_s", "switched", "_want_s")

    def __init__(self, dual: bool, zero_current_A: float, dead_time_s: float, hysteresis_A: float,
                 dwell_s: float = 0.0):
        self.dual = dual
        self.zero_current_A = zero_current_A
        self.dead_time_s = dead_time_s
        self.hysteresis_A = hysteresis_A
        # the reference must ask for the other bridge this long before a changeover starts: at
        # light load the speed loop's output wanders around zero, and without a dwell the bridges
        # trade places every few frames (a limit cycle between rectifier and inversion end)
        self.dwell_s = dwell_s
        self.reset()

    def reset(self) -> None:
        self.bridge = BRIDGE_FORWARD  # the bridge that fires (or fired last)
        self.phase = CONDUCT
        self.timer_s = 0.0
        self.switched = False  # true for the frame a (new) bridge starts: soft start it
        self._want_s = -1.0  # how long the reference has asked for the other bridge (-1: it does not)

    def start(self, i_ref: float) -> None:
        """Pulses are about to be released: pick the bridge for the sign of the reference."""
        self.bridge = BRIDGE_REVERSE if (self.dual and i_ref < -self.hysteresis_A) else BRIDGE_FORWARD
        self.phase = CONDUCT
        self.timer_s = 0.0
        self.switched = True

    @property
    def select(self) -> int:
        """bridge_select for the command: BLOCKED during the dead time."""
        return BRIDGE_BLOCKED if self.phase == DEAD else self.bridge

    def step(self, i_ref: float, ia: float, dt_s: float) -> int:
        """Advance one frame; returns the phase. The caller forces the inversion end in
        ZEROING and sends BLOCKED in DEAD."""
        self.switched = False
        if not self.dual:
            return CONDUCT
        h = self.hysteresis_A
        want_other = (i_ref < -h) if self.bridge == BRIDGE_FORWARD else (i_ref > h)
        phase = self.phase
        if phase == CONDUCT:
            if want_other:
                # the first frame that asks counts as time 0 (as the protections' timers do)
                self._want_s = 0.0 if self._want_s < 0.0 else self._want_s + dt_s
                if self._want_s + 1e-9 >= self.dwell_s:
                    phase = ZEROING
            else:
                self._want_s = -1.0
        if phase == ZEROING:
            if not want_other and not (-h <= i_ref <= h):
                phase = CONDUCT  # reference came back before the current reached zero
            elif -self.zero_current_A < ia < self.zero_current_A:
                phase = DEAD
                self.timer_s = 0.0
        elif phase == DEAD:
            # the first frame that reads zero current counts as time 0 (as when DEAD began)
            if -self.zero_current_A < ia < self.zero_current_A:
                self.timer_s = 0.0 if self.timer_s < 0.0 else self.timer_s + dt_s
            else:
                self.timer_s = -1.0  # current seen again: the dead time starts over
            if self.timer_s >= 0.0 and self.timer_s + 1e-9 >= self.dead_time_s:
                if want_other:
                    self.bridge = BRIDGE_REVERSE if self.bridge == BRIDGE_FORWARD else BRIDGE_FORWARD
                phase = CONDUCT
                self.switched = True
                self._want_s = -1.0
        self.phase = phase
        return phase
