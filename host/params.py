"""Turn validated configs into the model's flat arrays, and derive what `dcrig check` prints.

Owns: packing (Config -> p, initial x, default u), the derived quantities of a machine (rated
EMF, flux constant, time constants, critical field resistance, step limits). Runs once per
run, in Python; nothing here is on the per-frame path. Imports rtmodel.layout and the
magnetization helpers only at load time (the step kernel only inside Plant.kernel(), so
packing never triggers a compile).
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field

import numpy as np

from rtmodel import layout as L
from rtmodel.magnetization import curve_emf_py, pack_curve

from .config import Config
from .controller import firing
from .errors import ConfigError

RPM = math.pi / 30.0  # rad/s per r/min


@dataclass
class Plant:
    """Everything the kernel needs for one run, plus the configs it came from."""

    machine: Config
    converter: Config | None
    p: np.ndarray
    x0: np.ndarray
    u0: np.ndarray
    derived: dict = field(default_factory=dict)
    warnings: list = field(default_factory=list)

    def new_state(self) -> np.ndarray:
        return self.x0.copy()

    def new_inputs(self) -> np.ndarray:
        return self.u0.copy()

    @property
    def dt_s(self) -> float:
        return float(self.p[L.P_DT_S])

    def kernel(self):
        """The frame kernel for this plant: f(x, p, u, y, n_sub), as rtmodel.kernel.step_frame.

        By default the build specialised for this plant's connection, supply, field supply and
        load (rtmodel.kernel.kernel_for: faster, compiled on first use for these codes and then
        cached). DCRIG_KERNEL=generic in the environment selects the generic build instead
        (one compile for every plant; the test suite uses it to keep its compiles few).
        Fetch it once per run; only this plant's p (or a copy with the same codes) may be
        passed to it.
        """
        import rtmodel.kernel as K

        if os.environ.get(KERNEL_ENV, "specialised") == "generic":
            return K.step_frame
        return K.kernel_for(self.p)


KERNEL_ENV = "DCRIG_KERNEL"  # "generic" or "specialised" (the default): see Plant.kernel


def _copper(r_ref, temp_c, ref_c):
    # IEC 60034-1: R2/R1 = (235 + theta2)/(235 + theta1) for copper
    return r_ref * (235.0 + temp_c) / (235.0 + ref_c)


def pack(machine: Config, converter: Config | None = None) -> Plant:
    """Pack configs into arrays. Raises ConfigError if the step is too large for the plant, or
    if values that pass their own rules together give a parameter the model cannot run with
    (an overflow or a division by a vanishing value: never a numpy warning on the terminal)."""
    import warnings

    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        plant = _pack(machine, converter)
    names = {getattr(L, n): n for n in dir(L) if n.startswith("P_") and isinstance(getattr(L, n), int)}
    for arr, what in ((plant.p, "parameter"), (plant.x0, "initial state"), (plant.u0, "input")):
        bad = np.nonzero(~np.isfinite(arr))[0]
        if len(bad):
            label = names.get(int(bad[0]), f"#{int(bad[0])}") if what == "parameter" else f"#{int(bad[0])}"
            raise ConfigError(f"{machine.source}: machine: the values together give a non-finite model "
                              f"{what} ({label}); one value is far too small or too large, got {arr[bad[0]]!r}")
    return plant


def _pack(machine: Config, converter: Config | None = None) -> Plant:
    v = machine.values
    p = np.zeros(L.N_PARAM)
    conn_name = v["machine.connection"]
    conn = L.CONNECTION_NAMES[conn_name]
    series = conn == L.CONN_SERIES
    p[L.P_CONNECTION] = conn
    p[L.P_COMPOUND_SIGN] = 1.0 if v["machine.compound"] == "cumulative" else -1.0
    p[L.P_FIELD_SIGN] = -1.0 if v["machine.field_reversed"] else 1.0
    if series:
        p[L.P_COMPOUND_SIGN] = 1.0
        p[L.P_SE_TURNS_RATIO] = 1.0  # the curve is in series-field amperes
    else:
        p[L.P_SE_TURNS_RATIO] = v["machine.series_turns_ratio"] or 0.0
    ir = v["machine.rated_current_A"]
    p[L.P_RA_OHM] = v["machine.ra_ohm"]
    p[L.P_LA_H] = v["machine.la_H"]
    p[L.P_BRUSH_DROP_V] = v["machine.brush_drop_V"]
    p[L.P_BRUSH_KNEE_A] = v["machine.brush_knee_A"] or 0.01 * ir
    p[L.P_BRUSH_INV_KNEE] = 1.0 / p[L.P_BRUSH_KNEE_A]
    p[L.P_RF_OHM] = v["machine.field_resistance_ohm"] or 0.0
    p[L.P_RHEO_OHM] = v["machine.field_rheostat_ohm"]
    p[L.P_LF_LEAK_H] = v["machine.field_leakage_H"]
    p[L.P_RSE_OHM] = v["machine.series_resistance_ohm"] or 0.0
    p[L.P_LSE_LEAK_H] = v["machine.series_leakage_H"]
    s_open = v["machine.series_short_open_rpm"]
    if conn in (L.CONN_LONG_SHUNT, L.CONN_SHORT_SHUNT) and s_open:
        s_close = v["machine.series_short_close_rpm"]
        p[L.P_SE_SHORT_OPEN_RAD_S] = s_open * RPM
        p[L.P_SE_SHORT_CLOSE_RAD_S] = (0.5 * s_open if s_close is None else s_close) * RPM
    p[L.P_LM0_H] = v["machine.field_inductance_H"]
    p[L.P_MAG_SPEED_RAD_S] = v["machine.magnetization.speed_rpm"] * RPM
    p[L.P_MAG_INV_SPEED] = 1.0 / p[L.P_MAG_SPEED_RAD_S]
    pack_curve(
        p,
        np.array(v["machine.magnetization.field_current_A"]),
        np.array(v["machine.magnetization.emf_V"]),
        v["machine.armature_reaction.armature_current_A"],
        v["machine.armature_reaction.field_equivalent_A"],
        linear=v["machine.magnetization.interpolation"] == "piecewise_linear",
    )
    p[L.P_TEMP_REF_C] = v["machine.resistance_ref_C"]
    p[L.P_TEMP_AMBIENT_C] = v["machine.thermal.ambient_C"]
    p[L.P_TEMP_FIELD_C] = v["machine.field_temp_C"]
    p[L.P_THERMAL_TAU_S] = v["machine.thermal.time_constant_s"]
    p[L.P_THERMAL_RISE_K] = v["machine.thermal.rated_rise_K"]
    p[L.P_THERMAL_FROZEN] = 1.0 if v["machine.thermal.frozen"] else 0.0
    as_measured = v["machine.resistances_as_measured"]
    if as_measured:
        # every winding held at the reference temperature: the copper relation then returns
        # each resistance unchanged, in the kernel and in every host calculation alike
        p[L.P_TEMP_FIELD_C] = p[L.P_TEMP_REF_C]
        p[L.P_THERMAL_FROZEN] = 1.0
    p[L.P_RATED_IA_A] = ir
    p[L.P_RATED_SPEED_RAD_S] = v["machine.rated_speed_rpm"] * RPM
    p[L.P_J_KGM2] = v["mechanics.inertia_kgm2"]
    p[L.P_J_LOAD_KGM2] = v["mechanics.load_inertia_kgm2"]
    p[L.P_VISCOUS_NM_S] = v["mechanics.viscous_Nm_per_rad_s"]
    p[L.P_COULOMB_NM] = v["mechanics.coulomb_Nm"]
    p[L.P_LOAD_KIND] = L.LOAD_NAMES[v["mechanics.load"]]
    p[L.P_DC_SOURCE_OHM] = v["terminal.source_ohm"]
    p[L.P_DT_S] = v["sim.dt_us"] * 1e-6
    p[L.P_ENCODER_PPR] = v["sensors.encoder_ppr"]
    p[L.P_TACHO_V_PER_RPM] = v["sensors.tacho_V_per_1000rpm"] / 1000.0
    # converter (defaults keep the mains block harmless when a DC source feeds the machine)
    p[L.P_SUPPLY_KIND] = L.SUPPLY_DC
    p[L.P_MAINS_VLL_V] = 400.0
    p[L.P_MAINS_HZ] = 50.0
    p[L.P_LS_H] = 1e-4
    p[L.P_ALPHA_MIN_RAD] = 0.0
    p[L.P_ALPHA_MAX_RAD] = math.pi
    p[L.P_GATE_PULSE_RAD] = math.radians(20.0)
    p[L.P_TURN_OFF_S] = 100e-6
    p[L.P_DEADTIME_S] = 2e-3
    p[L.P_ISRC_TAU_S] = 1.0 / (2 * math.pi * 200.0)
    p[L.P_FIELD_SUPPLY_KIND] = L.FIELD_SUPPLY_DC
    p[L.P_FIELD_VAC_V] = 400.0
    if converter is not None:
        c = converter.values
        p[L.P_SUPPLY_KIND] = L.SUPPLY_NAMES[c["converter.kind"]]
        p[L.P_MAINS_VLL_V] = c["mains.voltage_V"]
        p[L.P_MAINS_HZ] = c["mains.frequency_Hz"]
        p[L.P_LS_H] = c["mains.inductance_H"]
        p[L.P_RS_OHM] = c["mains.resistance_ohm"]
        p[L.P_ALPHA_MIN_RAD] = math.radians(c["bridge.alpha_min_deg"])
        p[L.P_ALPHA_MAX_RAD] = math.radians(c["bridge.alpha_max_deg"])
        p[L.P_GATE_PULSE_RAD] = math.radians(c["bridge.gate_pulse_deg"])
        p[L.P_TURN_OFF_S] = c["bridge.turn_off_us"] * 1e-6
        p[L.P_DEADTIME_S] = c["bridge.deadtime_ms"] * 1e-3
        p[L.P_ISRC_TAU_S] = 1.0 / (2 * math.pi * c["current_source.bandwidth_Hz"])
        p[L.P_FIELD_SUPPLY_KIND] = L.FIELD_SUPPLY_NAMES[c["field.kind"]]
        p[L.P_FIELD_VAC_V] = c["field.ac_voltage_V"] or c["mains.voltage_V"]
        p[L.P_FIELD_ALPHA_MIN_RAD] = math.radians(c["field.alpha_min_deg"])
        if conn != L.CONN_SEPARATE and c["field.kind"] != "dc_source":
            raise ConfigError(
                f"{converter.source}: field.kind: a field bridge feeds separately excited machines "
                f"only; '{machine.source}' is '{conn_name}', got {c['field.kind']!r}"
            )

    x0 = np.zeros(L.N_STATE)
    initial = v["machine.thermal.initial_C"]
    x0[L.X_TEMP_ARM_C] = v["machine.thermal.ambient_C"] if initial is None else initial
    if as_measured:
        x0[L.X_TEMP_ARM_C] = p[L.P_TEMP_REF_C]
    x0[L.X_THY_FIRE_AT0 : L.X_THY_FIRE_AT0 + L.N_THY] = -1.0
    x0[L.X_THY_OFF_S0 : L.X_THY_OFF_S0 + L.N_THY] = -1.0  # went off long ago: recovered
    x0[L.X_THY_GATE0 : L.X_THY_GATE0 + L.N_THY] = -1.0  # no gate pulse
    x0[L.X_LAST_FIRED_UP] = -1.0
    x0[L.X_LAST_FIRED_LOW] = -1.0
    x0[L.X_FIELD_FIRE_AT] = -1.0
    x0[L.X_LATCHED_ALPHA_RAD] = math.pi / 2

    u0 = np.zeros(L.N_INPUT)
    u0[L.U_MAINS_PU] = 1.0
    u0[L.U_CONTACTOR] = 1.0
    u0[L.U_ALPHA_DEG] = 90.0
    u0[L.U_BRIDGE_SELECT] = 1.0
    u0[L.U_FIELD_ALPHA_DEG] = 180.0
    u0[L.U_LOAD_TORQUE_NM] = v["mechanics.load_torque_Nm"]
    prime = v["mechanics.prime_mover_speed_rpm"]
    u0[L.U_PRIME_SPEED_RAD_S] = (prime if prime is not None else v["machine.rated_speed_rpm"]) * RPM
    generator = v["machine.duty"] == "generator"
    vt = v["terminal.voltage_V"]
    u0[L.U_VT_V] = vt if vt is not None else (0.0 if generator else v["machine.rated_voltage_V"])
    u0[L.U_LOAD_OHM] = v["terminal.load_ohm"]
    if generator and v["terminal.voltage_V"] is None:
        u0[L.U_CONTACTOR] = 0.0  # no source: the generator feeds its load resistor only
    rf_hot = _copper(p[L.P_RF_OHM], p[L.P_TEMP_FIELD_C], p[L.P_TEMP_REF_C])
    vf = v["terminal.field_voltage_V"]
    if vf is None and conn == L.CONN_SEPARATE:
        vf = rf_hot * v["machine.rated_field_current_A"]
    u0[L.U_FIELD_V] = vf or 0.0
    if conn == L.CONN_SEPARATE and int(p[L.P_FIELD_SUPPLY_KIND]) != L.FIELD_SUPPLY_DC and vf:
        # a field bridge starts at the angle that gives the rated field voltage
        u0[L.U_FIELD_ALPHA_DEG] = firing.half_bridge_alpha_deg(
            vf, p[L.P_FIELD_VAC_V], math.degrees(p[L.P_FIELD_ALPHA_MIN_RAD]))
    plant = Plant(machine=machine, converter=converter, p=p, x0=x0, u0=u0)
    plant.derived = derive(plant)
    limit = plant.derived["stable_step_us"]
    if v["sim.dt_us"] > limit:
        raise ConfigError(
            f"{machine.source}: sim.dt_us: must be below the stability limit 2 x tau_min = "
            f"{limit:.1f} us for this plant, got {v['sim.dt_us']!r}"
        )
    return plant


def emf_at(p: np.ndarray, i_excitation_A: float, speed_rad_s: float) -> float:
    e, _ = curve_emf_py(p, i_excitation_A)
    return e * speed_rad_s / p[L.P_MAG_SPEED_RAD_S]


def critical_field_ohm(p: np.ndarray, speed_rad_s: float) -> float:
    """Critical field resistance at speed w: the one definition dcrig uses (check and op).

    The slope of the tangent drawn from the origin to the open-circuit curve with its
    residual EMF taken off (the tangent construction of the machines textbooks):

        R_c = max over i > 0 of (E(i) - E_res) / i, scaled by w / w_c.

    On a curve that is straight at its foot this is the air-gap slope; where the foot bends
    upwards first (an S-shaped start) the tangent touches the curve above the foot.
    """
    n = int(p[L.P_MAG_N])
    e_res = float(p[L.P_MAG_E0])
    i_max = float(p[L.P_MAG_I0 + n - 1])

    def ratio(i):
        return (curve_emf_py(p, i)[0] - e_res) / i

    grid = np.linspace(0.0, i_max, 2001)[1:]
    vals = np.array([ratio(x) for x in grid])
    k = int(np.argmax(vals))
    lo = grid[max(k - 1, 0)] if k > 0 else grid[0] * 1e-6
    hi = grid[min(k + 1, len(grid) - 1)]
    # golden-section refinement of the maximum between the grid neighbours
    g = (math.sqrt(5.0) - 1.0) / 2.0
    a, b = lo, hi
    for _ in range(80):
        c1 = b - g * (b - a)
        c2 = a + g * (b - a)
        if ratio(c1) >= ratio(c2):
            b = c2
        else:
            a = c1
    best = max(ratio(0.5 * (a + b)), float(vals[k]))
    return best * abs(speed_rad_s) / float(p[L.P_MAG_SPEED_RAD_S])


def derive(plant: Plant) -> dict:
    """Rated EMF, flux constant, time constants, critical field resistance, step limits."""
    p = plant.p
    v = plant.machine.values
    conn = int(p[L.P_CONNECTION])
    ir = v["machine.rated_current_A"]
    vr = v["machine.rated_voltage_V"]
    wr = p[L.P_RATED_SPEED_RAD_S]
    t_hot = v["machine.thermal.ambient_C"] + v["machine.thermal.rated_rise_K"]
    if v["machine.resistances_as_measured"]:
        t_hot = p[L.P_TEMP_REF_C]
    ra_hot = _copper(p[L.P_RA_OHM], t_hot, p[L.P_TEMP_REF_C])
    rse = _copper(p[L.P_RSE_OHM], p[L.P_TEMP_FIELD_C], p[L.P_TEMP_REF_C])
    rf = _copper(p[L.P_RF_OHM], p[L.P_TEMP_FIELD_C], p[L.P_TEMP_REF_C]) + p[L.P_RHEO_OHM]
    sign = 1.0 if v["machine.duty"] == "motor" else -1.0
    r_arm = ra_hot + (rse if conn in (L.CONN_SERIES, L.CONN_LONG_SHUNT, L.CONN_SHORT_SHUNT) else 0.0)
    e_rated = vr - sign * (ir * r_arm + p[L.P_BRUSH_DROP_V])
    kphi_rated = e_rated / wr
    d = {
        "rated_emf_V": e_rated,
        "flux_constant_Vs": kphi_rated,
        "rated_torque_Nm": kphi_rated * ir,
        "ra_hot_ohm": ra_hot,
        "field_circuit_ohm": rf,
    }
    j = p[L.P_J_KGM2] + p[L.P_J_LOAD_KGM2]
    la = p[L.P_LA_H]
    taus = {}
    taus["armature_s"] = la / r_arm if r_arm > 0 else math.inf  # Ra = 0: no decay, no step limit from it
    if kphi_rated > 0:
        taus["mechanical_s"] = j * r_arm / kphi_rated**2
    slope0 = p[L.P_MAG_SLOPE0]
    if conn != L.CONN_SERIES:
        i_f = v["machine.rated_field_current_A"]
        _, de = curve_emf_py(p, i_f)
        lf_rated = p[L.P_LM0_H] * de / slope0 + p[L.P_LF_LEAK_H]
        taus["field_unsaturated_s"] = (p[L.P_LM0_H] + p[L.P_LF_LEAK_H]) / rf
        taus["field_at_rated_s"] = lf_rated / rf
        d["emf_curve_at_rated_field_V"] = emf_at(p, i_f, wr)
        # critical field resistance: the tangent from the origin (one definition, shared with op)
        d["critical_field_ohm_at_rated_speed"] = critical_field_ohm(p, wr)
        d["field_voltage_rated_V"] = rf * i_f
    # no-load speed at rated voltage (motor, flux at rated field current or at rated current)
    if conn == L.CONN_SERIES:
        d["no_load_speed_rpm"] = math.inf  # a series motor runs away unloaded
    else:
        kphi_nl = emf_at(p, v["machine.rated_field_current_A"], 1.0)
        if kphi_nl > 0:
            d["no_load_speed_rpm"] = (vr / kphi_nl) / RPM
    # the fastest mode the fixed step must resolve: armature loop with the supply, the field
    # circuit (its inductance falls with saturation, so the rated point counts as well as the
    # straight part), the electromechanical oscillation 1/w0 = sqrt(tau_a tau_m) of armature
    # and shaft (complex eigenvalues when tau_m < 4 tau_a; their magnitude sets the step), or
    # the friction regulariser
    tau_fast = [taus["armature_s"]]
    for name in ("field_unsaturated_s", "field_at_rated_s"):
        if name in taus:
            tau_fast.append(taus[name])
    if "mechanical_s" in taus:
        tau_fast.append(math.sqrt(taus["armature_s"] * taus["mechanical_s"]))
    load_ohm = v["terminal.load_ohm"]
    if load_ohm > 0:
        tau_fast.append((la + p[L.P_LSE_LEAK_H]) / (load_ohm + r_arm))
    if plant.converter is not None and int(p[L.P_SUPPLY_KIND]) == L.SUPPLY_CURRENT:
        tau_fast.append(p[L.P_ISRC_TAU_S])
    tau_min = min(tau_fast)
    if not (math.isfinite(tau_min) and tau_min > 0.0):
        raise ConfigError(f"{plant.machine.source}: machine: the values together give no finite positive "
                          f"time constant (fastest {tau_min!r} s); check la_H, ra_ohm and the field keys")
    d["time_constants_s"] = taus
    d["tau_min_s"] = tau_min
    d["stable_step_us"] = 2.0 * tau_min * 1e6  # Heun: real eigenvalue limit h < 2 tau
    d["accurate_step_us"] = 0.05 * tau_min * 1e6  # <0.1 % local error per time constant
    if plant.converter is not None:
        c = plant.converter.values
        f = c["mains.frequency_Hz"]
        d["pulse_period_us"] = 1e6 / (6 * f)
        d["vdo_V"] = 3 * math.sqrt(2) / math.pi * c["mains.voltage_V"]
        d["frame_period_us"] = c["frame.period_us"] or d["pulse_period_us"]
        # firing angle at rated duty, overlap drop included (Mohan et al.)
        ls = c["mains.inductance_H"]
        cos_a = (vr + 3 / math.pi * 2 * math.pi * f * ls * ir) / d["vdo_V"]
        d["rated_alpha_deg"] = math.degrees(math.acos(cos_a)) if abs(cos_a) <= 1 else math.nan
    else:
        d["frame_period_us"] = 1000.0
    return d
