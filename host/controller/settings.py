"""Settings of the emulated drive controller: the schema, the TOML loader and its rules.

Owns: every settings key (name, type, unit, default, range rule, one-line meaning), loading a
TOML file, refusing unknown keys (with a did-you-mean) and broken values with one line
`FILE: KEY: rule` raised as host.errors.ConfigError. docs/controller.md documents every key
listed here, and a test keeps the two in step.
Must never import serial, numba, rtmodel or host.link: settings are checked before any port opens.
"""

from __future__ import annotations

import difflib
import math
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Iterable, Mapping

from host.errors import ConfigError

REQUIRED = object()  # marks a key without a default: the file must give it


@dataclass(frozen=True, slots=True)
class Key:
    name: str  # dotted: "section.key" or "section.sub.key"
    kind: str  # "float", "int", "bool", "str", "floats" (list of numbers)
    default: Any
    rule: str  # the rule text shown when a value breaks it ("" = no range rule)
    check: Callable[[Any], bool] | None
    doc: str
    choices: tuple[str, ...] = ()


def _pos(v):
    return v > 0


def _nonneg(v):
    return v >= 0


def _between(lo, hi):
    return lambda v: lo <= v <= hi


def _open_between(lo, hi):
    return lambda v: lo < v < hi


_KEYS: list[Key] = []


def _k(name, kind, default, rule, check, doc, choices=()):
    _KEYS.append(Key(name, kind, default, rule, check, doc, tuple(choices)))


# --- drive: what the controller drives and how it talks to the bridge ------------------------
_k("drive.name", "str", REQUIRED, "", None, "Name of this settings set, shown in logs.")
_k("drive.armature_mode", "str", "firing_angle", "", None,
   "What the armature command carries: firing angle (switched or averaged bridge), voltage "
   "reference (DC source model) or current reference (current-source model).",
   ("firing_angle", "voltage", "current"))
_k("drive.dual_bridge", "bool", False, "", None,
   "Two anti-parallel bridges (4-quadrant, circulating-current free); false = one bridge, "
   "armature current never negative.")
_k("drive.mains_voltage_V", "float", REQUIRED, "must be > 0", _pos,
   "Nominal line-to-line rms voltage of the armature bridge supply.")
_k("drive.mains_frequency_Hz", "float", 50.0, "must be in 40..70", _between(40, 70),
   "Nominal mains frequency; used by the mains-angle check.")
_k("drive.use_measured_mains", "bool", True, "", None,
   "Linearise the firing angle with the measured mains voltage (falls back to nominal while "
   "the measurement is below half of nominal).")

# --- motor ------------------------------------------------------------------------------------
_k("motor.connection", "str", "separate", "", None,
   "Field connection: separately excited (field loop active); series (flux follows the "
   "armature current; field loop and field-loss protection off); shunt or compound (the shunt "
   "field hangs across the armature: no field loop, pulses released without waiting for "
   "field current, field loss judged against the field the armature voltage should drive).",
   ("separate", "series", "shunt", "compound"))
_k("motor.rated_voltage_V", "float", REQUIRED, "must be > 0", _pos, "Rated armature voltage.")
_k("motor.rated_current_A", "float", REQUIRED, "must be > 0", _pos, "Rated armature current.")
_k("motor.base_speed_rpm", "float", REQUIRED, "must be > 0", _pos,
   "Base speed: highest speed at full field and rated voltage.")
_k("motor.top_speed_rpm", "float", REQUIRED, "must be > 0", _pos,
   "Top speed (end of field weakening); the speed reference is clamped to it.")
_k("motor.ra_ohm", "float", REQUIRED, "must be >= 0", _nonneg,
   "Armature circuit resistance used by the EMF estimate and the current feedforward.")
_k("motor.la_H", "float", REQUIRED, "must be > 0", _pos,
   "Armature circuit inductance used for the discontinuous-conduction boundary.")
_k("motor.magnetisation_if_pu", "floats", [0.0, 1.0], "must be increasing, start at 0", None,
   "Field current points (per unit of field.rated_current_A; series motor: of "
   "motor.rated_current_A) of the magnetisation curve.")
_k("motor.magnetisation_phi_pu", "floats", [0.0, 1.0], "must be increasing, start at >= 0", None,
   "Flux points (per unit of rated flux) matching motor.magnetisation_if_pu.")

# --- tacho ------------------------------------------------------------------------------------
_k("tacho.volts_per_rpm", "float", REQUIRED, "must be > 0", _pos,
   "Tachogenerator constant: tacho voltage per rpm (signed speed = voltage / constant).")
_k("tacho.filter_s", "float", 0.005, "must be in 0..1", _between(0, 1),
   "Time constant of the first-order filter on the tacho speed.")

# --- ramp -------------------------------------------------------------------------------------
_k("ramp.accel_rpm_per_s", "float", REQUIRED, "must be > 0", _pos,
   "Ramp rate while the reference moves away from zero.")
_k("ramp.decel_rpm_per_s", "float", REQUIRED, "must be > 0", _pos,
   "Ramp rate while the reference moves towards zero.")
_k("ramp.stop_decel_rpm_per_s", "float", REQUIRED, "must be > 0", _pos,
   "Ramp rate to zero after a stop command (op_stop, or run released).")
_k("ramp.quick_stop_decel_rpm_per_s", "float", 0.0, "must be >= 0", lambda v: v >= 0,
   "Ramp rate to zero while the operator's quick-stop input is on (CONTROL op 9); 0 = the "
   "stop ramp.")
_k("ramp.rounding_s", "float", 0.0, "must be in 0..10", _between(0, 10),
   "S-curve: the ramp's rate builds up and dies away over this time (jerk = rate / "
   "rounding_s), so the acceleration current rises and falls smoothly and the speed lands on "
   "its reference, and at zero, without a current step; each ramp takes this much longer. "
   "0 = linear ramps. The quick stop stays linear.")

# --- speed loop -------------------------------------------------------------------------------
_k("speed_loop.kp_A_per_rpm", "float", REQUIRED, "must be > 0", _pos,
   "Proportional gain at full flux: armature current per rpm of speed error.")
_k("speed_loop.ti_s", "float", REQUIRED, "must be > 0", _pos, "Integral time.")
_k("speed_loop.accel_feedforward_kgm2", "float", 0.0, "must be >= 0", _nonneg,
   "Inertia (motor and load) for the acceleration feedforward: the current J dw/dt / (k phi) the "
   "ramp needs is added to the speed loop's output, so its integrator holds only the load and "
   "the speed does not overshoot at the end of a ramp; 0 = off.")
_k("speed_loop.reverse_allowed", "bool", False, "", None,
   "Accept negative speed references (otherwise clamped at zero).")
_k("speed_loop.current_limit_motoring_A", "float", REQUIRED, "must be > 0", _pos,
   "Current limit while the torque is in the direction of rotation.")
_k("speed_loop.current_limit_regenerating_A", "float", REQUIRED, "must be >= 0", _nonneg,
   "Current limit while the torque opposes rotation.")
_k("speed_loop.taper_start_rpm", "float", 0.0, "must be >= 0", _nonneg,
   "Speed above which the current limits fall linearly (commutation limit); 0 = no taper.")
_k("speed_loop.taper_end_pu", "float", 1.0, "must be in 0.05..1", _between(0.05, 1),
   "Fraction of the current limits left at top speed when the taper is on.")
_k("speed_loop.min_flux_pu", "float", 0.2, "must be in 0.05..1", _between(0.05, 1),
   "Lowest flux estimate the speed-loop gain is divided by (gain scheduling in weakening).")

# --- current loop -----------------------------------------------------------------------------
_k("current_loop.kp_V_per_A", "float", REQUIRED, "must be > 0", _pos,
   "Proportional gain in continuous conduction.")
_k("current_loop.ti_s", "float", REQUIRED, "must be > 0", _pos,
   "Integral time in continuous conduction.")
_k("current_loop.emf_feedforward", "bool", True, "", None,
   "Add the EMF estimate plus Ra times the current reference to the voltage reference.")
_k("current_loop.alpha_min_deg", "float", 15.0, "must be in 0..90", _between(0, 90),
   "Smallest firing angle (rectifier end).")
_k("current_loop.alpha_max_deg", "float", 150.0, "must be in 90..175", _between(90, 175),
   "Largest firing angle (inversion end; 180 minus the commutation margin).")
_k("current_loop.dcm_adaptive", "bool", True, "", None,
   "Raise the current-loop gain in discontinuous conduction.")
_k("current_loop.dcm_gain_factor", "float", 4.0, "must be in 1..50", _between(1, 50),
   "Gain multiplier reached at zero current in discontinuous conduction.")
_k("current_loop.release_rate_deg_per_s", "float", 3000.0, "must be > 0", _pos,
   "Rate at which the firing-angle floor moves down from the inversion end after pulses are "
   "released or a bridge changeover (soft start, no surge).")
_k("current_loop.reference_rise_A_per_s", "float", 0.0, "must be >= 0", _nonneg,
   "Largest rate of rise of the current reference's magnitude on the conducting bridge (a "
   "di/dt limit on the reference, common practice); a falling reference is not limited. It "
   "starts from zero at every pulse release and changeover, so a bridge taking over from the "
   "other under a large speed error brings its current in over a few frames instead of at "
   "once (the current loop's gain is raised in discontinuous conduction and overshot). "
   "0 = no limit.")

# --- changeover (dual bridge) ------------------------------------------------------------------
_k("changeover.zero_current_A", "float", REQUIRED, "must be > 0", _pos,
   "Armature current below which the current counts as zero.")
_k("changeover.dead_time_s", "float", 0.002, "must be in 0..0.1", _between(0, 0.1),
   "Time the current must stay below zero_current_A, pulses blocked, before the other bridge "
   "fires.")
_k("changeover.hysteresis_A", "float", REQUIRED, "must be >= 0", _nonneg,
   "Current reference of the opposite sign that starts a changeover.")
_k("changeover.dwell_s", "float", 0.0, "must be in 0..1", _between(0, 1),
   "Time the current reference must ask for the other bridge before the changeover starts "
   "(zero-current dwell against a changeover limit cycle at light load); 0 = at once.")

# --- emf estimate ------------------------------------------------------------------------------
_k("emf.filter_s", "float", 0.01, "must be in 0..1", _between(0, 1),
   "Time constant of the filter on the EMF estimate Va - Ra*Ia.")

# --- field ------------------------------------------------------------------------------------
_k("field.mode", "str", "voltage", "", None,
   "What the field command carries: field voltage, or firing angle of a single-phase "
   "half-controlled bridge.", ("voltage", "firing_angle"))
_k("field.rated_current_A", "float", REQUIRED, "must be > 0", _pos,
   "Rated (full) field current.")
_k("field.rated_voltage_V", "float", REQUIRED, "must be > 0", _pos,
   "Field voltage at rated current (gives the field resistance for the feedforward).")
_k("field.supply_voltage_V", "float", 415.0, "must be > 0", _pos,
   "Rms ac voltage feeding the half-controlled field bridge.")
_k("field.voltage_max_V", "float", REQUIRED, "must be > 0", _pos,
   "Highest field voltage command (forcing).")
_k("field.kp_V_per_A", "float", REQUIRED, "must be > 0", _pos, "Field current loop gain.")
_k("field.ti_s", "float", REQUIRED, "must be > 0", _pos, "Field current loop integral time.")
_k("field.min_current_A", "float", REQUIRED, "must be > 0", _pos,
   "Lowest field current reference in field weakening.")
_k("field.economy_fraction", "float", 0.3, "must be in 0..1", _between(0, 1),
   "Field reference while stopped (economy field), as a fraction of rated.")
_k("field.alpha_min_deg", "float", 5.0, "must be in 0..90", _between(0, 90),
   "Smallest field bridge firing angle.")
_k("field.alpha_max_deg", "float", 175.0, "must be in 90..180", _between(90, 180),
   "Largest field bridge firing angle (output near zero).")
_k("field.weakening", "bool", True, "", None,
   "Weaken the field above base speed with the EMF controller.")
_k("field.emf_setpoint_V", "float", REQUIRED, "must be > 0", _pos,
   "EMF held by field weakening above base speed.")
_k("field.emf_kp_A_per_V", "float", REQUIRED, "must be > 0", _pos,
   "EMF controller gain (field current per volt of EMF error).")
_k("field.emf_ti_s", "float", REQUIRED, "must be > 0", _pos, "EMF controller integral time.")

# --- start_stop --------------------------------------------------------------------------------
_k("start_stop.run_input", "str", "maintained", "", None,
   "op_run is a maintained run signal (drop = stop) or a start pulse latched until op_stop.",
   ("maintained", "pulse"))
_k("start_stop.pulse_release_delay_s", "float", 0.05, "must be in 0..5", _between(0, 5),
   "Wait after the contactor reports closed before pulses are released.")
_k("start_stop.zero_speed_rpm", "float", REQUIRED, "must be > 0", _pos,
   "Speed below which a stopping drive counts as at rest.")
_k("start_stop.zero_current_A", "float", REQUIRED, "must be > 0", _pos,
   "Current below which pulses are blocked and the contactor opens at the end of a stop.")
_k("start_stop.field_establish_timeout_s", "float", 5.0, "must be in 0..60", _between(0, 60),
   "Time allowed after the contactor command for the field to reach the establish fraction; "
   "longer trips with field_loss.")
_k("start_stop.field_establish_fraction", "float", 0.8, "must be in 0..1", _between(0, 1),
   "Field current (fraction of rated) needed before pulses are released.")

# --- protections ------------------------------------------------------------------------------
_k("protection.overcurrent.threshold_A", "float", REQUIRED, "must be > 0", _pos,
   "Instantaneous overcurrent: abs(Ia) above this trips.")
_k("protection.overcurrent.delay_s", "float", 0.0, "must be in 0..1", _between(0, 1),
   "Time the overcurrent must persist (0 = same frame).")
_k("protection.overload.rated_current_A", "float", REQUIRED, "must be > 0", _pos,
   "Current of the thermal image's 1.0 pu steady state.")
_k("protection.overload.time_constant_s", "float", REQUIRED, "must be > 0", _pos,
   "Heating time constant of the thermal image.")
_k("protection.overload.trip_level_pu", "float", 1.1025, "must be in 0.5..4", _between(0.5, 4),
   "Thermal image level that trips (1.1025 = steady 1.05 x rated current).")
_k("protection.overload.delay_s", "float", 0.0, "must be in 0..60", _between(0, 60),
   "Time the thermal image must stay above the trip level.")
_k("protection.overspeed.threshold_rpm", "float", REQUIRED, "must be > 0", _pos,
   "abs(tacho speed) above this trips.")
_k("protection.overspeed.delay_s", "float", 0.02, "must be in 0..5", _between(0, 5),
   "Time the overspeed must persist.")
_k("protection.field_loss.fraction", "float", 0.5, "must be in 0.05..1", _between(0.05, 1),
   "Field current below this fraction of its reference, while energised, counts as lost.")
_k("protection.field_loss.delay_s", "float", 0.5, "must be in 0..30", _between(0, 30),
   "Time the field loss must persist (the start is guarded by start_stop.field_establish_timeout_s).")
_k("protection.tacho_loss.threshold_rpm", "float", REQUIRED, "must be > 0", _pos,
   "abs(EMF/(K*phi) - n_tacho) above this counts as implausible tacho.")
_k("protection.tacho_loss.delay_s", "float", 0.2, "must be in 0..10", _between(0, 10),
   "Time the tacho implausibility must persist.")
_k("protection.tacho_loss.min_flux_pu", "float", 0.3, "must be in 0.05..1", _between(0.05, 1),
   "The tacho check runs only while the flux estimate is above this.")
_k("protection.overvoltage.threshold_V", "float", REQUIRED, "must be > 0", _pos,
   "abs(Va) above this trips.")
_k("protection.overvoltage.delay_s", "float", 0.01, "must be in 0..5", _between(0, 5),
   "Time the overvoltage must persist.")
_k("protection.mains_loss.threshold_V", "float", REQUIRED, "must be > 0", _pos,
   "Measured mains voltage below this (while the contactor is commanded closed) trips.")
_k("protection.mains_loss.delay_s", "float", 0.02, "must be in 0..5", _between(0, 5),
   "Time the undervoltage must persist.")
_k("protection.mains_sync.min_advance_deg", "float", 1.0, "must be in 0..30", _between(0, 30),
   "A mains angle that moves less than this in a frame counts as not advancing.")
_k("protection.mains_sync.delay_s", "float", 0.02, "must be in 0..5", _between(0, 5),
   "Time the mains angle may stand still before a trip.")
_k("protection.contactor.timeout_s", "float", 0.5, "must be in 0..10", _between(0, 10),
   "Time allowed for the contactor feedback to follow the command.")
_k("protection.comms_loss.timeout_s", "float", 0.05, "must be in 0..10", _between(0, 10),
   "Model time between two feedback frames above this trips (detail: the silence in ms); 0 turns "
   "the time check off. The host's watchdog bit coming on (HOST_WATCHDOG_TRIPPED: the host "
   "refuses this controller's commands) trips as well. In lockstep the controller's time moves "
   "only with the feedback, so it hears of a silence when the link returns.")

# --- trip -------------------------------------------------------------------------------------
_k("trip.suppress_timeout_s", "float", 0.02, "must be in 0..1", _between(0, 1),
   "After a trip, pulses stay at the inversion end until abs(Ia) < start_stop.zero_current_A or "
   "this time has passed; then pulses block and the contactor opens.")

# --- voltage_start: run by armature voltage (a machine whose field hangs across the armature) ---
_k("voltage_start.enabled", "bool", False, "", None,
   "Run on an armature voltage ramp instead of the speed loop: the voltage reference moves at "
   "ramp_V_per_s to rated voltage x (speed reference / base speed), held back while the "
   "current is above current_limit_A; stop ramps it to zero. For shunt and compound machines "
   "(a differential compound started fast can reverse).")
_k("voltage_start.ramp_V_per_s", "float", 40.0, "must be > 0", _pos,
   "Rate of the armature voltage reference, up and down.")
_k("voltage_start.current_limit_A", "float", 0.0, "must be >= 0", _nonneg,
   "Armature current above which the voltage reference stops rising (and falls back above "
   "1.1 x this); 0 = speed_loop.current_limit_motoring_A.")

# --- trip_classes: this controller's trip codes by fault class (scenario expectations use the
# classes, so they never depend on one firmware's numbering) ----------------------------------
_TRIP_CLASS_DEFAULTS = (("overcurrent", 1), ("overload", 2), ("overspeed", 3), ("field_loss", 4),
                        ("tacho_loss", 5), ("overvoltage", 6), ("mains_loss", 7), ("mains_sync", 8),
                        ("contactor", 9), ("comms_loss", 10))


def _codes(v):
    return all(float(c).is_integer() and 0 < c < 256 for c in v)


for _cls, _code in _TRIP_CLASS_DEFAULTS:
    _k(f"trip_classes.{_cls}", "floats", [float(_code)], "must be whole trip codes in 1..255", _codes,
       f"Trip codes of this controller that mean a {_cls.replace('_', ' ')} trip (the emulated "
       f"controller's own code is {_code}); a real controller's profile lists its own.")

KEYS: dict[str, Key] = {k.name: k for k in _KEYS}
del _KEYS

# Old spellings of renamed keys and sections: a file that still uses one gets a one-line
# "renamed to ..." error rather than silence or a vague "unknown key".
RENAMED_SECTIONS: dict[str, str] = {"sequencing": "start_stop"}
RENAMED_KEYS: dict[str, str] = {"field.standby_fraction": "field.economy_fraction"}


def _renamed(name: str) -> str | None:
    """The new name of an old key spelling, or None."""
    if name in RENAMED_KEYS:
        return RENAMED_KEYS[name]
    section, _, rest = name.partition(".")
    if section in RENAMED_SECTIONS and rest:
        return f"{RENAMED_SECTIONS[section]}.{rest}"
    return None


def _flatten(d: Mapping[str, Any], prefix: str = "") -> Iterable[tuple[str, Any]]:
    for name, value in d.items():
        full = prefix + name
        if isinstance(value, dict):
            yield from _flatten(value, full + ".")
        else:
            yield full, value


def _coerce(source: str, key: Key, value: Any) -> Any:
    where = f"{source}: {key.name}"
    if key.kind == "float":
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise ConfigError(f"{where}: must be a number, got {value!r}")
        try:
            value = float(value)
        except OverflowError:
            raise ConfigError(f"{where}: must be a finite number (too large for a float), "
                              f"got a {len(str(abs(value)))}-digit integer") from None
        if not math.isfinite(value):
            raise ConfigError(f"{where}: must be finite")
        if abs(value) > 1e9 or 0.0 < abs(value) < 1e-9:
            raise ConfigError(f"{where}: magnitude must be 0 or from 1e-09 to 1e+09 (a plausible value "
                              f"in this key's unit), got {value!r}")
    elif key.kind == "int":
        if isinstance(value, bool) or not isinstance(value, int):
            raise ConfigError(f"{where}: must be an integer, got {value!r}")
        if abs(value) > 2**31 - 1:
            raise ConfigError(f"{where}: must be an integer within +-2147483647, got a "
                              f"{len(str(abs(value)))}-digit integer")
    elif key.kind == "bool":
        if not isinstance(value, bool):
            raise ConfigError(f"{where}: must be true or false, got {value!r}")
    elif key.kind == "str":
        if not isinstance(value, str):
            raise ConfigError(f"{where}: must be a string, got {value!r}")
        if key.choices and value not in key.choices:
            hint = difflib.get_close_matches(value, key.choices, n=1)
            more = f" (did you mean {hint[0]!r}?)" if hint else ""
            raise ConfigError(f"{where}: must be one of {', '.join(key.choices)}{more}")
    elif key.kind == "floats":
        if not isinstance(value, list) or not all(
            isinstance(v, (int, float)) and not isinstance(v, bool) for v in value
        ):
            raise ConfigError(f"{where}: must be a list of numbers")
        try:
            value = [float(v) for v in value]
        except OverflowError:
            raise ConfigError(f"{where}: must hold finite numbers (one is too large for a float)") from None
        if not all(math.isfinite(v) for v in value):
            raise ConfigError(f"{where}: must be finite")
    if key.check is not None and not key.check(value):
        raise ConfigError(f"{where}: {key.rule}, got {value!r}")
    return value


class Settings:
    """Validated controller settings: read-only mapping of dotted key -> value."""

    __slots__ = ("_values", "source")

    def __init__(self, values: dict[str, Any], source: str):
        self._values = values
        self.source = source

    def __getitem__(self, key: str) -> Any:
        return self._values[key]

    def __contains__(self, key: str) -> bool:
        return key in self._values

    def as_dict(self) -> dict[str, Any]:
        return dict(self._values)

    def replace(self, changes: Mapping[str, Any]) -> "Settings":
        """A new validated Settings with some keys changed (tests and tuning tools)."""
        merged = dict(self._values)
        merged.update(changes)
        return from_flat(merged, self.source + " (modified)")

    def __repr__(self) -> str:
        return f"Settings({self._values.get('drive.name')!r} from {self.source})"


def from_flat(flat: Mapping[str, Any], source: str) -> Settings:
    """Validate a mapping of dotted keys (no nesting) and fill in defaults."""
    values: dict[str, Any] = {}
    for name, value in flat.items():
        key = KEYS.get(name)
        if key is None:
            new = _renamed(name)
            if new is not None:
                section = name.partition(".")[0]
                why = (f" ([{section}] is now [{RENAMED_SECTIONS[section]}])"
                       if section in RENAMED_SECTIONS else "")
                raise ConfigError(f"{source}: {name}: renamed to {new}{why}, got {value!r}")
            hint = difflib.get_close_matches(name, KEYS, n=1, cutoff=0.6)
            more = f" (did you mean {hint[0]!r}?)" if hint else ""
            raise ConfigError(f"{source}: {name}: unknown key{more}")
        values[name] = _coerce(source, key, value)
    series = values.get("motor.connection", KEYS["motor.connection"].default) == "series"
    for name, key in KEYS.items():
        if name not in values:
            if key.default is REQUIRED:
                if series and name.startswith("field."):
                    # a series motor has no field loop; its field keys are never read
                    values[name] = 1.0
                    continue
                raise ConfigError(f"{source}: {name}: required key is missing")
            values[name] = list(key.default) if isinstance(key.default, list) else key.default
    _cross_checks(source, values)
    return Settings(values, source)


def from_dict(nested: Mapping[str, Any], source: str = "<dict>") -> Settings:
    """Validate a nested mapping as TOML parsing gives it."""
    return from_flat(dict(_flatten(nested)), source)


def load_settings(path: str | Path) -> Settings:
    """Load and validate one TOML settings file; every problem is one ConfigError line."""
    path = Path(path)
    try:
        with open(path, "rb") as f:
            nested = tomllib.load(f)
    except FileNotFoundError as err:
        raise ConfigError(f"{path}: (file): not found") from err
    except OSError as err:
        raise ConfigError(f"{path}: (file): cannot read ({err.strerror})") from err
    except tomllib.TOMLDecodeError as err:
        raise ConfigError(f"{path}: (file): not valid TOML ({err})") from err
    except UnicodeDecodeError as err:
        raise ConfigError(f"{path}: (file): must be UTF-8 text (TOML), got byte 0x{err.object[err.start]:02x} "
                          f"at offset {err.start}") from err
    except RecursionError as err:
        raise ConfigError(f"{path}: (file): arrays or tables nested too deeply to be a settings file") from err
    return from_dict(nested, str(path))


def _cross_checks(source: str, v: dict[str, Any]) -> None:
    def fail(key, rule):
        raise ConfigError(f"{source}: {key}: {rule}")

    if v["motor.top_speed_rpm"] < v["motor.base_speed_rpm"]:
        fail("motor.top_speed_rpm", "must be >= motor.base_speed_rpm")
    if v["current_loop.alpha_max_deg"] <= v["current_loop.alpha_min_deg"]:
        fail("current_loop.alpha_max_deg", "must be > current_loop.alpha_min_deg")
    if v["field.alpha_max_deg"] <= v["field.alpha_min_deg"]:
        fail("field.alpha_max_deg", "must be > field.alpha_min_deg")
    xs, ys = v["motor.magnetisation_if_pu"], v["motor.magnetisation_phi_pu"]
    if len(xs) < 2 or len(xs) > 32:
        fail("motor.magnetisation_if_pu", "must have 2..32 points")
    if len(ys) != len(xs):
        fail("motor.magnetisation_phi_pu", "must have as many points as motor.magnetisation_if_pu")
    if xs[0] != 0.0 or any(b <= a for a, b in zip(xs, xs[1:])):
        fail("motor.magnetisation_if_pu", "must be increasing, start at 0")
    if ys[0] < 0.0 or any(b <= a for a, b in zip(ys, ys[1:])):
        fail("motor.magnetisation_phi_pu", "must be increasing, start at >= 0 (remanence)")
    if v["motor.connection"] == "separate":
        # the curve must reach rated flux, or the weakening feedforward cannot invert it
        if ys[-1] < 1.0:
            fail("motor.magnetisation_phi_pu", "must reach 1.0 (rated flux)")
    if v["motor.connection"] == "separate":
        _field_checks(fail, v)
    lim = max(v["speed_loop.current_limit_motoring_A"], v["speed_loop.current_limit_regenerating_A"])
    if v["protection.overcurrent.threshold_A"] <= lim:
        fail("protection.overcurrent.threshold_A", "must be above both speed-loop current limits")
    if v["protection.overspeed.threshold_rpm"] <= v["motor.top_speed_rpm"]:
        fail("protection.overspeed.threshold_rpm", "must be above motor.top_speed_rpm")
    ts = v["speed_loop.taper_start_rpm"]
    if ts > 0 and ts >= v["motor.top_speed_rpm"]:
        fail("speed_loop.taper_start_rpm", "must be below motor.top_speed_rpm (or 0 = off)")
    if v["protection.mains_loss.threshold_V"] >= v["drive.mains_voltage_V"]:
        fail("protection.mains_loss.threshold_V", "must be below drive.mains_voltage_V")
    if v["protection.overvoltage.threshold_V"] <= v["motor.rated_voltage_V"]:
        fail("protection.overvoltage.threshold_V", "must be above motor.rated_voltage_V")
    if v["changeover.hysteresis_A"] >= v["speed_loop.current_limit_motoring_A"]:
        fail("changeover.hysteresis_A", "must be below speed_loop.current_limit_motoring_A")


def _field_checks(fail, v: dict[str, Any]) -> None:
    if v["field.min_current_A"] > v["field.rated_current_A"]:
        fail("field.min_current_A", "must be <= field.rated_current_A")
    if v["field.mode"] == "firing_angle":
        vmax = 0.9 * v["field.supply_voltage_V"]
        if v["field.rated_voltage_V"] > vmax:
            fail("field.rated_voltage_V", f"must be <= 0.9 x field.supply_voltage_V ({vmax:g} V)")
    if v["field.voltage_max_V"] < v["field.rated_voltage_V"]:
        fail("field.voltage_max_V", "must be >= field.rated_voltage_V")
    vdo = 3.0 * math.sqrt(2.0) / math.pi * v["drive.mains_voltage_V"]
    vtop = vdo * math.cos(math.radians(v["current_loop.alpha_min_deg"]))
    if v["field.emf_setpoint_V"] >= vtop:
        fail("field.emf_setpoint_V",
             f"must be below the bridge's highest voltage Vdo*cos(alpha_min) = {vtop:.0f} V")
