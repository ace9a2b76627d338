"""The signals exchanged between the drive controller and the host, by name and unit.

Owns: the field lists of the command frame (controller -> host) and the feedback frame
(host -> controller), and the enumerations carried in them. The wire encoding (scaling,
byte layout) lives in host.link.frames; the controller logic and the host loop use these
names. Must never import rtmodel, serial or numba.
"""

from __future__ import annotations

import operator
from dataclasses import dataclass, field, fields

# Armature command mode (what `armature_cmd` means)
MODE_FIRING_ANGLE = 0  # armature_cmd is the firing angle in degrees
MODE_VOLTAGE = 1  # armature_cmd is the armature voltage reference in volts
MODE_CURRENT = 2  # armature_cmd is the armature current reference in amperes
ARMATURE_MODES = {"firing_angle": MODE_FIRING_ANGLE, "voltage": MODE_VOLTAGE, "current": MODE_CURRENT}

# Field command mode (what `field_cmd` means)
FIELD_MODE_FIRING_ANGLE = 0  # field_cmd is the field bridge firing angle in degrees
FIELD_MODE_VOLTAGE = 1  # field_cmd is the field voltage in volts

# Bridge select
BRIDGE_BLOCKED = 0  # no firing pulses
BRIDGE_FORWARD = 1  # bridge 1: positive armature current
BRIDGE_REVERSE = 2  # bridge 2 of a dual converter: negative armature current

# Host status bits in the feedback frame (besides model status bits, which are forwarded)
HOST_RUNNING = 1 << 0  # a scenario is running
HOST_WATCHDOG_TRIPPED = 1 << 1  # host saw no valid command for the watchdog period
HOST_FAULT_ACTIVE = 1 << 2  # an injected fault is active (never tells which)
HOST_LOCKSTEP = 1 << 3  # host runs lockstep (1) or paced real time (0)
HOST_MODEL_ALARM = 1 << 4  # model reported an abnormal condition (see event stream)
HOST_OVERSPEED = 1 << 5  # model speed above the machine's limit (machine.max_speed_rpm, default 1.2 x rated)
HOST_COMMAND_REFUSED = 1 << 6  # the last command received was refused (out of range or inapplicable)

ACK_NONE = 0xFFFF  # Feedback.ack_seq before the host applied any command of this session


@dataclass(slots=True)
class Command:
    """Controller -> host, once per frame."""

    seq: int = 0  # 0..65535, wraps
    mode: int = MODE_FIRING_ANGLE
    bridge_select: int = BRIDGE_BLOCKED
    armature_cmd: float = 150.0  # deg, V or A according to mode
    field_mode: int = FIELD_MODE_VOLTAGE
    field_cmd: float = 0.0  # deg or V according to field_mode
    contactor: int = 0  # 1 = close main contactor
    trip: int = 0  # 1 = controller has tripped
    trip_code: int = 0  # controller's trip code (see host.controller.protection)


@dataclass(slots=True)
class Feedback:
    """Host -> controller, once per frame: what the controller's sensors would read."""

    seq: int = 0  # host's own counter, wraps at 65536
    ack_seq: int = ACK_NONE  # seq of the last valid command the host applied; ACK_NONE before any
    model_time_us: int = 0  # host model time (wraps at 2**32 us)
    armature_current_A: float = 0.0
    field_current_A: float = 0.0
    armature_voltage_V: float = 0.0
    tacho_voltage_V: float = 0.0
    encoder_count: int = 0  # quadrature counts, wraps as int32
    mains_angle_deg: float = 0.0  # phase a voltage angle, 0..360 (synchronisation)
    mains_voltage_V: float = 0.0  # line-to-line rms as a voltage sensor would read it
    contactor_closed: int = 0
    host_status: int = 0  # HOST_* bits | (model ST_* bits << 8)
    op_run: int = 0  # operator inputs as a PLC would send them
    op_stop: int = 0
    op_speed_ref_rpm: float = 0.0


_FEEDBACK_FIELDS = operator.attrgetter(*(f.name for f in fields(Feedback)))


def copy_feedback(fb: Feedback) -> Feedback:
    """A copy of fb, six times faster than copy.copy (which goes through __reduce_ex__)."""
    return Feedback(*_FEEDBACK_FIELDS(fb))


@dataclass(slots=True)
class TripReport:
    """Controller -> host when a protection trips (also flagged in every Command)."""

    trip_code: int = 0
    controller_time_us: int = 0
    detail: float = 0.0  # the measured value that tripped (A, rpm, V ...)


@dataclass(slots=True)
class ControlMessage:
    """Either direction: reset, scenario start/stop, operator input changes."""

    op: int = 0  # CTRL_* below
    value: float = 0.0
    text: str = field(default="")


# CONTROL operations (docs/protocol.md section 6.4 gives meaning and direction of each)
CTRL_RESET = 1  # controller -> host: clear the latched watchdog reaction; host -> controller: reset trips
CTRL_SCENARIO_START = 2  # host -> controller: a scenario (test sequence) starts, text = its name
CTRL_SCENARIO_STOP = 3  # host -> controller: the scenario ended, text = its name
CTRL_SET_RUN = 4  # host -> controller: operator run input, value 0/1
CTRL_SET_STOP = 5  # host -> controller: operator stop input, value 0/1
CTRL_SET_SPEED_REF_RPM = 6  # host -> controller: operator speed reference, value rpm
CTRL_BYE = 7  # either direction: orderly end of session
CTRL_SET_FIELD_ECONOMY = 8  # host -> controller: operator field economy input, value 0/1
CTRL_SET_QUICK_STOP = 9  # host -> controller: operator quick-stop input, value 0/1
