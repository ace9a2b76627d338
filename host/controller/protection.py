"""Trip codes of the emulated drive controller, and the persistence timer every protection uses.

Owns: the one list of trip codes (number, name, unit of the value reported with the trip) that
Command.trip_code and TripReport.trip_code carry. Codes are part of the wire contract: never
renumber, only append. Must never import serial, numba, rtmodel or host.link.
"""

from __future__ import annotations

from enum import IntEnum


class TripCode(IntEnum):
    NONE = 0
    OVERCURRENT = 1  # instantaneous |Ia| above threshold
    OVERLOAD = 2  # I^2t thermal image of the armature above its trip level
    OVERSPEED = 3  # |n_tacho| above threshold
    FIELD_LOSS = 4  # field current below a fraction of its reference while energised
    TACHO_LOSS = 5  # tacho speed implausible against EMF / (K*phi)
    OVERVOLTAGE = 6  # |Va| above threshold
    MAINS_LOSS = 7  # measured mains voltage below threshold
    MAINS_SYNC = 8  # mains angle not advancing (lost synchronisation signal)
    CONTACTOR = 9  # contactor feedback did not follow the command in time
    COMMS_LOSS = 10  # feedback stopped for longer than its timeout, or the host's watchdog latched


# unit of TripReport.detail for each code
TRIP_DETAIL_UNIT = {
    TripCode.OVERCURRENT: "A",
    TripCode.OVERLOAD: "pu",
    TripCode.OVERSPEED: "rpm",
    TripCode.FIELD_LOSS: "A",
    TripCode.TACHO_LOSS: "rpm",
    TripCode.OVERVOLTAGE: "V",
    TripCode.MAINS_LOSS: "V",
    TripCode.MAINS_SYNC: "deg",
    TripCode.CONTACTOR: "s",
    TripCode.COMMS_LOSS: "ms",
}


def trip_name(code: int) -> str:
    try:
        return TripCode(code).name.lower()
    except ValueError:
        return f"unknown_{code}"


def trip_label(code: int) -> str:
    """How a person reads a trip code: the number with its name, e.g. '4 (field_loss)'.
    A bare number means nothing on a screen or in a log; the number stays for the wire."""
    return f"{int(code)} ({trip_name(code)})"


def trip_detail(code: int, detail: float) -> str:
    """The value reported with a trip, with its unit: '1712.5 A'."""
    try:
        unit = TRIP_DETAIL_UNIT.get(TripCode(code), "")
    except ValueError:
        unit = ""
    return f"{detail:g} {unit}".rstrip()


class Persist:
    """Condition timer: true once the condition has held continuously for delay_s.

    The frame the condition is first seen counts as time 0; each further frame adds its dt.
    So with delay 0 the trip comes in the first frame, with delay d at dt per frame it comes
    ceil(d/dt) frames later (and never earlier).
    """

    __slots__ = ("delay_s", "elapsed_s", "active")

    # absorbs float rounding of a sum of frame periods (30 x 1/300 s is 0.09999... s)
    EPS_S = 1e-9

    def __init__(self, delay_s: float):
        self.delay_s = delay_s
        self.elapsed_s = 0.0
        self.active = False

    def reset(self) -> None:
        self.elapsed_s = 0.0
        self.active = False

    def update(self, cond: bool, dt_s: float) -> bool:
        if not cond:
            self.active = False
            self.elapsed_s = 0.0
            return False
        if self.active:
            self.elapsed_s += dt_s
        else:
            self.active = True
            self.elapsed_s = 0.0
        return self.elapsed_s + self.EPS_S >= self.delay_s
