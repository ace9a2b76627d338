"""Every config key dcrig reads: name, type, unit, default, rule and meaning, in one table.

Owns the key tables of machine and converter configs. host.config validates against them;
tools/gen_config_reference.py writes docs/config-reference.md from them and a test checks
the page is current, so the documentation cannot drift. Imports nothing of rtmodel.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

REQUIRED = object()  # marker: no default


@dataclass(frozen=True)
class Key:
    section: str  # dotted table name, e.g. "machine" or "machine.magnetization"
    name: str
    kind: str  # "float", "int", "bool", "str", "floats" (list of numbers)
    default: Any  # REQUIRED, None (optional, absent), or a value
    rule: str  # machine-readable rule: "gt0", "ge0", "range:a:b", "choice:a|b", "" ...
    doc: str  # one sentence, with unit and where the value comes from

    @property
    def path(self) -> str:
        return f"{self.section}.{self.name}"


_CONNECTIONS = "separate|shunt|series|compound_long|compound_short"
_LOADS = "none|constant|proportional|quadratic|overhauling|prime_mover"

MACHINE_KEYS = (
    Key("machine", "name", "str", REQUIRED, "", "Label shown in reports."),
    Key("machine", "connection", "str", REQUIRED, f"choice:{_CONNECTIONS}",
        "How the windings are connected: separate excitation, shunt, series, or compound with the shunt field outside (compound_long) or inside (compound_short) the series field."),
    Key("machine", "compound", "str", "cumulative", "choice:cumulative|differential",
        "Compound machines only: series ampere-turns add to (cumulative) or subtract from (differential) the shunt ampere-turns for positive (motoring) armature current. A generator's armature current is negative in this convention, so a machine that is cumulative as a generator is entered as differential."),
    Key("machine", "field_reversed", "bool", False, "",
        "The shunt/separate field winding is connected the other way round: its ampere-turns oppose the residual magnetism (a self-excited generator then fails to build up) and, in compound machines, swap cumulative and differential."),
    Key("machine", "duty", "str", "motor", "choice:motor|generator",
        "Rated duty; sets which side of the circuit the rated values describe (motor: Vt = E + Ia Ra + Vb; generator: Vt = E - Ia Ra - Vb). The model itself runs both ways."),
    Key("machine", "rated_power_kW", "float", None, "gt0", "Rated output (shaft power for a motor, electrical for a generator), kW. Optional: nothing in the model depends on it; without it the rating cross-check (power against voltage x current) is skipped and `check` says so."),
    Key("machine", "rated_voltage_V", "float", REQUIRED, "gt0", "Rated armature terminal voltage, V."),
    Key("machine", "rated_current_A", "float", REQUIRED, "gt0", "Rated armature current, A."),
    Key("machine", "rated_speed_rpm", "float", REQUIRED, "gt0", "Rated (base) speed, r/min."),
    Key("machine", "max_speed_rpm", "float", None, "gt0", "Highest permitted speed (field-weakening top speed or overspeed limit), r/min; default 1.2 x rated."),
    Key("machine", "rated_field_current_A", "float", None, "gt0",
        "Field current at rated duty (shunt/separate field), A. Required unless the connection is series."),
    Key("machine", "ra_ohm", "float", REQUIRED, "ge0",
        "Armature circuit resistance (armature, interpoles, compensating winding; not brushes, not series field) at resistance_ref_C, ohm. 0 is accepted (a book problem that neglects it): the armature inductance alone then limits the current's rate of rise."),
    Key("machine", "la_H", "float", REQUIRED, "gt0", "Armature circuit inductance, H."),
    Key("machine", "brush_drop_V", "float", 2.0, "ge0",
        "Total brush contact drop while current flows, V (about 2 V for carbon brushes: common practice)."),
    Key("machine", "brush_knee_A", "float", None, "gt0",
        "Below this armature current the brush drop falls linearly to zero (keeps the drop continuous through zero current), A; default 1 % of rated current."),
    Key("machine", "field_turns_per_pole", "float", None, "gt0",
        "Turns per pole of the winding the magnetization curve is measured in; needed only when the curve is given in ampere-turns (machine.magnetization.ampere_turns)."),
    Key("machine", "flux_constant_Vs", "float", None, "gt0",
        "A constant-flux machine given by its flux constant K phi (V s/rad = N m/A) at rated field current instead of a magnetization curve: the curve is then the straight line E = K phi w i / I_f,rated with no residual (no saturation). Not for series machines."),
    Key("machine", "field_resistance_ohm", "float", None, "gt0",
        "Shunt/separate field winding resistance at resistance_ref_C, ohm. Required unless series."),
    Key("machine", "field_rheostat_ohm", "float", 0.0, "ge0", "Field rheostat in series with the shunt/separate field, ohm."),
    Key("machine", "field_inductance_H", "float", None, "gt0",
        "Incremental inductance of the winding the magnetization curve is measured in, on the curve's straight part, H. Shunt/separate field current for every connection but series; series field for series machines. It scales with the curve slope."),
    Key("machine", "field_leakage_H", "float", 0.0, "ge0", "Shunt field leakage inductance that does not saturate, H."),
    Key("machine", "series_resistance_ohm", "float", None, "gt0",
        "Series field resistance at resistance_ref_C, ohm. Required for series and compound machines."),
    Key("machine", "series_leakage_H", "float", 0.0, "ge0", "Series field leakage inductance that does not saturate, H."),
    Key("machine", "series_turns_ratio", "float", None, "gt0",
        "Compound machines: series-field turns per shunt-field turn (converts series amperes into equivalent shunt amperes)."),
    Key("machine", "series_short_open_rpm", "float", None, "ge0",
        "Compound machines: a series-field shorting contactor, worked by a speed relay, shorts the series field at standstill and opens above this speed, r/min (how a differential compound motor is started: with its series field out, it cannot start backwards or stall on a collapsing field; common practice). The relay acts on the speed at the start of each frame; it does not look at the current, so a start that reaches the speed under heavy current puts the series field in under that current. Default (or 0): no such contactor, the series field is always in circuit."),
    Key("machine", "series_short_close_rpm", "float", None, "ge0",
        "Compound machines with series_short_open_rpm: the contactor closes again below this speed, r/min; below the open speed (the relay's hysteresis). Default: half of series_short_open_rpm."),
    Key("machine", "resistances_as_measured", "bool", False, "",
        "true: ra_ohm, field_resistance_ohm and series_resistance_ohm are used exactly as given in every run (a book problem or a test sheet at the running temperature): no IEC 60034-1 temperature correction, the armature temperature is held, resistance_ref_C, field_temp_C and the thermal table do not change any resistance."),
    Key("machine", "resistance_ref_C", "float", 20.0, "range:-40:200", "Temperature at which the resistances above were measured, degC."),
    Key("machine", "field_temp_C", "float", 75.0, "range:-40:250", "Field winding temperature held during runs (field resistances are corrected to it), degC."),
    Key("machine.magnetization", "speed_rpm", "float", None, "gt0", "Speed at which the open-circuit curve was measured, r/min (required with a curve; default rated speed with flux_constant_Vs)."),
    Key("machine.magnetization", "ampere_turns", "floats", (), "curve_x",
        "The curve abscissa in ampere-turns per pole instead of field_current_A (give one of the two); divided by machine.field_turns_per_pole."),
    Key("machine.magnetization", "field_current_A", "floats", (), "curve_x",
        "Open-circuit curve abscissa: field current in the curve winding, A; starts at 0, strictly increasing, at least 2 points (two points: a straight line, as a book problem gives it)."),
    Key("machine.magnetization", "emf_V", "floats", (), "curve_y",
        "Open-circuit curve ordinate: EMF at speed_rpm, V; first value is the residual EMF (>= 0), strictly increasing."),
    Key("machine.magnetization", "interpolation", "str", "monotone_cubic", "choice:monotone_cubic|piecewise_linear",
        "Between the curve points: a smooth monotone cubic (never overshoots), or straight lines as a hand calculation reads a curve (the slope, and with it the field inductance, then jumps at each point)."),
    Key("machine.armature_reaction", "armature_current_A", "floats", (), "reaction_x",
        "Optional: armature currents at which the demagnetizing effect was found, A; strictly increasing, positive."),
    Key("machine.armature_reaction", "field_equivalent_A", "floats", (), "reaction_y",
        "Optional: demagnetizing equivalent field current at each armature current, A (>= 0). Empty: no armature reaction."),
    Key("machine.thermal", "ambient_C", "float", 40.0, "range:-40:80", "Coolant (ambient) temperature, degC."),
    Key("machine.thermal", "initial_C", "float", None, "range:-40:250", "Armature temperature at the start of a run, degC; default the ambient."),
    Key("machine.thermal", "time_constant_s", "float", 1800.0, "gt0",
        "Armature thermal time constant R_th x C_th, s. A heat run at constant current shows a longer one, because the copper loss rises with the temperature."),
    Key("machine.thermal", "rated_rise_K", "float", 80.0, "gt0", "Steady armature temperature rise at rated current, K."),
    Key("machine.thermal", "insulation_class", "str", "F", "choice:B|F|H",
        "Insulation thermal class (IEC 60034-1: B 130, F 155, H 180 degC); used for warnings."),
    Key("machine.thermal", "frozen", "bool", False, "", "Hold the armature temperature at initial_C (no thermal model)."),
    Key("mechanics", "inertia_kgm2", "float", REQUIRED, "gt0", "Rotor inertia, kg m^2."),
    Key("mechanics", "load_inertia_kgm2", "float", 0.0, "ge0", "Inertia of the driven load referred to the motor shaft, kg m^2."),
    Key("mechanics", "viscous_Nm_per_rad_s", "float", 0.0, "ge0", "Viscous friction, N m per rad/s."),
    Key("mechanics", "coulomb_Nm", "float", 0.0, "ge0", "Coulomb (dry) friction torque, N m."),
    Key("mechanics", "load", "str", "constant", f"choice:{_LOADS}",
        "Load torque law: constant (passive like dry friction: opposes motion, holds the shaft at rest up to its value), proportional (to speed), quadratic (fan/pump), overhauling (hoist gravity torque of fixed sign), prime_mover (speed imposed, for generators), none."),
    Key("mechanics", "load_torque_Nm", "float", 0.0, "", "Load setting: the torque at rated speed (proportional, quadratic) or the constant torque, N m."),
    Key("mechanics", "prime_mover_speed_rpm", "float", None, "", "prime_mover load: shaft speed, r/min; default rated speed."),
    Key("sensors", "tacho_V_per_1000rpm", "float", 60.0, "gt0", "Tachogenerator constant, V per 1000 r/min."),
    Key("sensors", "encoder_ppr", "int", 1024, "range:1:1000000", "Encoder pulses per revolution (the count is 4 x PPR per revolution)."),
    Key("terminal", "voltage_V", "float", None, "", "DC source voltage when no converter is given; default rated voltage (motor) or 0 (generator)."),
    Key("terminal", "source_ohm", "float", 0.0, "ge0", "Internal resistance of that DC source, ohm (0: ideal)."),
    Key("terminal", "load_ohm", "float", 0.0, "ge0", "Resistor across the terminals (generator load), ohm; 0: none."),
    Key("terminal", "field_voltage_V", "float", None, "",
        "Separately excited machines fed from a DC field source: field voltage, V; default rated field current x field resistance at field_temp_C."),
    Key("sim", "dt_us", "float", 20.0, "range:0.5:1000", "Fixed model step, us."),
)

CONVERTER_KEYS = (
    Key("converter", "name", "str", REQUIRED, "", "Label shown in reports."),
    Key("converter", "kind", "str", REQUIRED, "choice:bridge|dual_bridge|averaged_bridge|current_source",
        "Armature supply: one switched 6-pulse bridge, two anti-parallel bridges (4-quadrant, circulating-current free), an averaged bridge, or an ideal current source."),
    Key("mains", "voltage_V", "float", REQUIRED, "gt0", "Line-to-line rms voltage at the bridge's supply terminals, V."),
    Key("mains", "frequency_Hz", "float", 50.0, "range:10:400", "Mains frequency, Hz."),
    Key("mains", "inductance_H", "float", REQUIRED, "gt0", "Commutating (source plus transformer leakage) inductance per phase, H."),
    Key("mains", "resistance_ohm", "float", 0.0, "ge0", "Source resistance per phase, ohm."),
    Key("bridge", "alpha_min_deg", "float", 5.0, "range:0:90", "Smallest firing angle the bridge accepts, deg."),
    Key("bridge", "alpha_max_deg", "float", 150.0, "range:90:180", "Largest firing angle (inversion end stop: keeps the commutation margin), deg."),
    Key("bridge", "gate_pulse_deg", "float", 20.0, "range:1:120", "Gate pulse length; each pulse also re-fires the previous thyristor (double pulsing), deg."),
    Key("bridge", "turn_off_us", "float", 100.0, "gt0", "Thyristor circuit-commutated turn-off time t_q: a device forward biased again sooner re-conducts, us."),
    Key("bridge", "deadtime_ms", "float", 2.0, "ge0", "Dual bridge: time the current must have been zero before the other bridge may fire, ms."),
    Key("current_source", "bandwidth_Hz", "float", 200.0, "gt0", "current_source: first-order bandwidth of the ideal current source, Hz."),
    Key("field", "kind", "str", "dc_source", "choice:dc_source|half_bridge|averaged_half_bridge",
        "Field supply of separately excited machines: ideal DC source, switched single-phase half-controlled bridge, or its average."),
    Key("field", "ac_voltage_V", "float", None, "gt0", "Field bridge ac supply (rms, taken from mains lines a-b through a transformer), V; default mains voltage."),
    Key("field", "alpha_min_deg", "float", 0.0, "range:0:180", "Field bridge smallest firing angle (field forcing limit), deg."),
    Key("frame", "period_us", "float", None, "gt0", "Frame (controller update) period, us, 50 us to 0.1 s; default one pulse: 1e6 / (6 x mains frequency)."),
)

KEYS_BY_KIND = {"machine": MACHINE_KEYS, "converter": CONVERTER_KEYS}
