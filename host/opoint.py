"""Steady-state operating point of the machine model (the engine of `dcrig steady`).

Owns: the DC steady state of the same circuit equations the step kernel integrates (every
connection, motoring and generating, self-excited build-up), the power and loss balance, the
firing angle a converter needs for that point, and the continuity estimate of the bridge
current. Reads the packed parameter array of a host.params.Plant and evaluates the curve with
rtmodel.magnetization (the kernel's own functions), so the two cannot drift apart.
Must never import scipy (test-only) and imports rtmodel.kernel only inside the kernel runs of
the switched bridge (_run_at), lazily, so a plain operating point never compiles the step kernel.

Equations (motor convention: i1 = line current into the + terminal; rtmodel/kernel.py):

    armature      Varm = E + Ra ia + Vb clip(ia / knee, -1, 1)
    series field  Vse  = Rse ise
    shunt field   Vsh  = (Rf + Rrheo) ish
    E = E_curve(i_eff) w / w_curve,  K phi = E_curve(i_eff) / w_curve,  Te = K phi ia
    i_m = kh ish + ks ise,  i_eff = i_m -/+ i_reaction(ia) (not crossing zero)

    separate  ia = i1, ish = Vf / Rsh               Varm = Vt
    shunt     ish = Vt / Rsh, ia = i1 - ish          Varm = Vt
    series    ia = ise = i1                          Varm = Vt - Rse ia
    long      ish = Vt / Rsh, ia = ise = i1 - ish    Varm = Vt - Rse ia   (field sees Vt)
    short     ise = i1, Varm = Vt - Rse i1,          ish = Varm / Rsh, ia = i1 - ish
                                                      (field sees the voltage inside the series field)

Mechanics in steady state: Te = T_friction(w) + T_load, T_friction = b w + Tc sign(w) (the kernel holds a shaft at rest against torques up to Tc).
Ra is copper-corrected to the armature's initial temperature (or arm_temp_C), the fields to
field_temp_C, with the IEC 60034-1 copper relation, as in host.params.

Every mode reduces to one scalar equation: in the line current (motor, given Vt and speed), in
the armature current (motor, given load torque) or in the terminal voltage (generator, given
speed and load). Roots are bracketed on a dense grid (linear plus geometric near zero, so the
near-residual root of a self-excited generator is not stepped over) and refined by bisection.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from rtmodel import layout as L
from rtmodel.magnetization import curve_emf_py, reaction_field_A

from .errors import ConfigError
from .params import RPM, Plant

COPPER_K = 235.0  # IEC 60034-1 copper temperature constant, degC

MOTOR_MODES = ("load_torque", "line_current", "armature_current", "speed")
GENERATOR_MODES = ("load_ohm", "load_current", "open_circuit")


def _copper(r_ref, temp_c, ref_c):
    return r_ref * (COPPER_K + temp_c) / (COPPER_K + ref_c)


def _clip1(x):
    return 1.0 if x > 1.0 else (-1.0 if x < -1.0 else x)


@dataclass
class Circuit:
    """Resistances and constants of one plant, resolved for steady state."""

    conn: int
    ra: float
    rse: float
    rsh: float  # field winding (hot) plus rheostat
    rf_winding: float
    rheo: float
    kh: float
    ks: float
    vb: float
    knee: float
    wc: float
    visc: float
    coul: float
    p: np.ndarray
    arm_temp_C: float

    @property
    def has_shunt(self):
        return self.conn in (L.CONN_SEPARATE, L.CONN_SHUNT, L.CONN_LONG_SHUNT, L.CONN_SHORT_SHUNT)

    @property
    def has_series(self):
        return self.conn in (L.CONN_SERIES, L.CONN_LONG_SHUNT, L.CONN_SHORT_SHUNT)

    @property
    def self_excited(self):
        return self.conn != L.CONN_SEPARATE

    def brush(self, ia):
        return self.vb * _clip1(ia / self.knee)

    def friction(self, w):
        return self.visc * w + self.coul * (1.0 if w > 0 else (-1.0 if w < 0 else 0.0))

    def curve(self, ieff):
        e, _ = curve_emf_py(self.p, ieff)
        return float(e)

    def eff_excitation(self, immf, ia):
        iar = float(reaction_field_A(self.p, float(ia)))
        if immf >= 0.0:
            return max(immf - iar, 0.0)
        return min(immf + iar, 0.0)


def circuit(plant: Plant, arm_temp_C: float | None = None, field_reversed: bool = False) -> Circuit:
    """Resolve the plant's resistances at the temperatures the kernel starts a run with."""
    p = plant.p
    t_ref = p[L.P_TEMP_REF_C]
    t_f = p[L.P_TEMP_FIELD_C]
    t_a = float(plant.x0[L.X_TEMP_ARM_C]) if arm_temp_C is None else float(arm_temp_C)
    conn = int(p[L.P_CONNECTION])
    rfw = _copper(p[L.P_RF_OHM], t_f, t_ref)
    # the config's machine.field_reversed (packed as P_FIELD_SIGN), and the caller's reversal on top
    kh = 0.0 if conn == L.CONN_SERIES else float(p[L.P_FIELD_SIGN]) * (-1.0 if field_reversed else 1.0)
    ks = p[L.P_SE_TURNS_RATIO] * p[L.P_COMPOUND_SIGN]
    if conn == L.CONN_SERIES and field_reversed:
        ks = -ks
    if conn in (L.CONN_SEPARATE, L.CONN_SHUNT):
        ks = 0.0
    return Circuit(
        conn=conn,
        ra=_copper(p[L.P_RA_OHM], t_a, t_ref),
        rse=_copper(p[L.P_RSE_OHM], t_f, t_ref),
        rsh=rfw + p[L.P_RHEO_OHM],
        rf_winding=rfw,
        rheo=float(p[L.P_RHEO_OHM]),
        kh=kh,
        ks=ks,
        vb=float(p[L.P_BRUSH_DROP_V]),
        knee=float(p[L.P_BRUSH_KNEE_A]),
        wc=float(p[L.P_MAG_SPEED_RAD_S]),
        visc=float(p[L.P_VISCOUS_NM_S]),
        coul=float(p[L.P_COULOMB_NM]),
        p=p,
        arm_temp_C=t_a,
    )


@dataclass
class State:
    """One DC steady state, motor convention throughout."""

    vt: float
    i1: float
    ia: float
    ish: float
    ise: float
    varm: float
    immf: float
    ieff: float
    kphi: float
    w: float
    vf: float  # separate field source voltage (0 for other connections)

    @property
    def emf(self):
        return self.kphi * self.w

    @property
    def te(self):
        return self.kphi * self.ia


def _currents(c: Circuit, vt, i1, vf):
    """(ia, ish, ise, varm) from terminal voltage and line current (explicit for every connection)."""
    conn = c.conn
    if conn == L.CONN_SEPARATE:
        return i1, vf / c.rsh, 0.0, vt
    if conn == L.CONN_SHUNT:
        ish = vt / c.rsh
        return i1 - ish, ish, 0.0, vt
    if conn == L.CONN_SERIES:
        return i1, 0.0, i1, vt - c.rse * i1
    if conn == L.CONN_LONG_SHUNT:
        ish = vt / c.rsh
        ia = i1 - ish
        return ia, ish, ia, vt - c.rse * ia
    varm = vt - c.rse * i1  # short shunt
    ish = varm / c.rsh
    return i1 - ish, ish, i1, varm


def _line_from_armature(c: Circuit, vt, ia):
    conn = c.conn
    if conn in (L.CONN_SEPARATE, L.CONN_SERIES):
        return ia
    if conn in (L.CONN_SHUNT, L.CONN_LONG_SHUNT):
        return ia + vt / c.rsh
    # short shunt: ish = (Vt - Rse i1) / Rsh and i1 = ia + ish
    return (ia * c.rsh + vt) / (c.rsh + c.rse)


def _flux(c: Circuit, ia, ish, ise):
    immf = c.kh * ish + c.ks * ise
    ieff = c.eff_excitation(immf, ia)
    return immf, ieff, c.curve(ieff) / c.wc


def _state(c: Circuit, vt, i1, w, vf) -> State:
    ia, ish, ise, varm = _currents(c, vt, i1, vf)
    immf, ieff, kphi = _flux(c, ia, ish, ise)
    return State(vt, i1, ia, ish, ise, varm, immf, ieff, kphi, w, vf)


def _resid(c: Circuit, vt, i1, w, vf):
    """Armature KVL residual Varm - (E + Ra ia + Vb): zero in steady state."""
    ia, ish, ise, varm = _currents(c, vt, i1, vf)
    _, _, kphi = _flux(c, ia, ish, ise)
    return varm - (kphi * w + c.ra * ia + c.brush(ia))


# ---------------------------------------------------------------------------------------------
# scalar root finding
# ---------------------------------------------------------------------------------------------


def _grid(lo, hi, n_lin=801, n_geo=300):
    """Sorted grid on [lo, hi], linear plus geometric clustering at zero when 0 is inside."""
    pts = list(np.linspace(lo, hi, n_lin))
    span = max(abs(lo), abs(hi))
    if span > 0:
        geo = np.geomspace(span * 1e-8, span, n_geo)
        if hi > 0:
            pts += [g for g in geo if g <= hi]
        if lo < 0:
            pts += [-g for g in geo if -g >= lo]
        if lo <= 0.0 <= hi:
            pts.append(0.0)
    return np.unique(np.array(pts, dtype=float))


def _bisect(f, a, b, fa, fb, tol):
    for _ in range(200):
        m = 0.5 * (a + b)
        fm = f(m)
        if fm == 0.0 or (b - a) < tol:
            return m
        if (fa < 0.0) == (fm < 0.0):
            a, fa = m, fm
        else:
            b, fb = m, fm
    return 0.5 * (a + b)


def roots(f, grid, tol_rel=1e-13):
    """All sign changes of f on the grid, refined by bisection.

    Returns a list of (x, rising) with rising True where f goes from - to +. Points where f is
    not finite break the bracket (no root is claimed across them).
    """
    xs = np.asarray(grid, dtype=float)
    fs = [f(x) for x in xs]
    scale = max(abs(xs[0]), abs(xs[-1]), 1e-300)
    out = []
    for k in range(len(xs) - 1):
        fa, fb = fs[k], fs[k + 1]
        if not (math.isfinite(fa) and math.isfinite(fb)):
            continue
        if fa == 0.0:
            if k == 0 or not math.isfinite(fs[k - 1]) or fs[k - 1] != 0.0:
                rising = fb > 0.0 if fb != 0.0 else (k > 0 and fs[k - 1] < 0.0)
                out.append((float(xs[k]), bool(rising)))
            continue
        if fb == 0.0:
            if k + 1 == len(xs) - 1:
                out.append((float(xs[k + 1]), fa < 0.0))
            continue
        if (fa < 0.0) != (fb < 0.0):
            x = _bisect(f, xs[k], xs[k + 1], fa, fb, tol_rel * scale)
            out.append((float(x), fa < 0.0))
    return out, xs, np.array(fs)


# ---------------------------------------------------------------------------------------------
# results
# ---------------------------------------------------------------------------------------------


@dataclass
class OpPoint:
    """A solved operating point (or the statement that none exists), motor convention inside."""

    plant: Plant
    circuit: Circuit
    request: str  # "motor" or "generator"
    mode: str  # which quantity was given
    state: State | None
    found: bool = True
    reason: str = ""
    notes: list = field(default_factory=list)
    cautions: list = field(default_factory=list)
    self_excited: dict = field(default_factory=dict)
    stable: bool | None = None
    converter: dict | None = None
    residual_state: State | None = None

    # --- derived quantities (motor convention)
    @property
    def friction_Nm(self):
        return self.circuit.friction(self.state.w)

    def powers(self):
        """Power flows and losses in watts (motor convention signs for the flows)."""
        s, c = self.state, self.circuit
        p_term = s.vt * s.i1
        p_field_src = s.vf * s.ish if c.conn == L.CONN_SEPARATE else 0.0
        tf = c.friction(s.w)
        p_shaft = (s.te - tf) * s.w  # delivered to the load (motor convention)
        losses = {
            "armature_copper_W": c.ra * s.ia * s.ia,
            "field_copper_W": c.rf_winding * s.ish * s.ish,
            "field_rheostat_W": c.rheo * s.ish * s.ish,
            "series_field_copper_W": c.rse * s.ise * s.ise,
            "brush_W": c.brush(s.ia) * s.ia,
            "friction_W": tf * s.w,
        }
        losses["total_W"] = sum(losses.values())
        if p_shaft >= 0.0 and p_term > 0.0:
            duty, p_in, p_out = "motoring", p_term + p_field_src, p_shaft
        elif p_shaft < 0.0 and p_term < 0.0:
            duty, p_in, p_out = "generating", -p_shaft + p_field_src, -p_term
        elif p_shaft < 0.0 and p_term >= 0.0:
            # electrical and mechanical power both go in (plugging, or an open-circuit generator
            # whose only output is its own losses)
            duty, p_in, p_out = "braking" if p_term > 0.0 else "generating", p_term - p_shaft + p_field_src, 0.0
        else:
            duty, p_in, p_out = "idle", p_term + p_field_src, p_shaft
        eff = p_out / p_in if p_in > 0.0 else None
        return {
            "duty": duty,
            "terminal_power_W": p_term,
            "field_supply_power_W": p_field_src,
            "shaft_power_W": p_shaft,
            "input_power_W": p_in,
            "output_power_W": p_out,
            "efficiency": eff,
            "losses": losses,
        }

    def report(self) -> dict:
        """Flat JSON-ready dict. Sign convention: see REPORT_CONVENTIONS."""
        v = self.plant.machine.values
        out = {
            "machine": v["machine.name"],
            "connection": v["machine.connection"],
            "request": self.request,
            "given": self.mode,
            "operating_point_found": self.found,
        }
        if not self.found:
            out["reason"] = self.reason
        st = self.state if self.found else self.residual_state
        if st is not None:
            gen = self.request == "generator"
            sg = -1.0 if gen else 1.0
            c = self.circuit
            pw = self.powers() if self.found else None
            out.update(
                {
                    "convention": "generator" if gen else "motor",
                    "speed_rpm": st.w / RPM,
                    "terminal_voltage_V": st.vt,
                    "armature_voltage_V": st.varm,
                    "emf_V": st.emf,
                    "armature_current_A": sg * st.ia + 0.0,
                    "line_current_A": sg * st.i1 + 0.0,
                    "field_current_A": st.ish if c.has_shunt else None,
                    "series_field_current_A": sg * st.ise if c.has_series else None,
                    "field_voltage_V": (st.vf if c.conn == L.CONN_SEPARATE else
                                        (st.ish * c.rsh if c.has_shunt else None)),
                    "net_excitation_A": st.immf,
                    "flux_constant_Vs": st.kphi,
                    "torque_Nm": sg * st.te,
                    "friction_torque_Nm": c.friction(st.w),
                    "shaft_torque_Nm": sg * (st.te - c.friction(st.w)),
                    "armature_temp_C": c.arm_temp_C,
                    "ra_ohm": c.ra,
                    "field_circuit_ohm": c.rsh if c.has_shunt else None,
                    "series_field_ohm": c.rse if c.has_series else None,
                }
            )
            if pw is not None:
                out.update({k: pw[k] for k in ("duty", "input_power_W", "output_power_W", "efficiency")})
                out["losses_W"] = pw["losses"]
            if not self.found:
                out["state_shown"] = "the near-residual state the machine settles in instead"
        out["stable"] = self.stable
        if self.self_excited:
            out["self_excitation"] = self.self_excited
        if self.converter is not None:
            out["converter"] = self.converter
            for k in ("firing_angle_deg", "continuous"):
                out[k] = self.converter.get(k)
        out["cautions"] = list(self.cautions)
        out["notes"] = list(self.notes)
        return out


REPORT_CONVENTIONS = """\
Sign conventions of the report:
  convention "motor" (a --vt request): currents positive into the + terminal, torque_Nm
    positive in the direction of rotation, shaft_torque_Nm = torque delivered to the load;
    regeneration shows as negative armature/line current and torque (four-quadrant drive
    practice).
  convention "generator" (a --speed-only request): armature_current_A, line_current_A and
    series_field_current_A are positive out of the + terminal (delivered to the load),
    torque_Nm is the electromagnetic counter-torque (positive opposing rotation) and
    shaft_torque_Nm is the torque the prime mover applies.
  field_current_A is the shunt/separate field winding current, positive for a positive
    terminal (or field supply) voltage.
  input_power_W / output_power_W follow the actual power flow (electrical in and shaft out
  when motoring; shaft in and electrical out when generating); the power a separate field
  supply delivers counts as input. efficiency = output / input.
"""


# ---------------------------------------------------------------------------------------------
# solvers
# ---------------------------------------------------------------------------------------------


def _field_voltage(plant: Plant, c: Circuit, field_voltage_V):
    if field_voltage_V is not None and c.conn != L.CONN_SEPARATE:
        raise ConfigError(
            f"--field-voltage: only a separately excited machine has its own field supply; "
            f"'{plant.machine.source}' is '{plant.machine['machine.connection']}' (set "
            f"machine.field_rheostat_ohm instead)"
        )
    if c.conn != L.CONN_SEPARATE:
        return 0.0
    return float(plant.u0[L.U_FIELD_V] if field_voltage_V is None else field_voltage_V)


def _finite(x, what):
    if x is None or not math.isfinite(x):
        raise ConfigError(f"{what}: must be a finite number, got {x!r}")
    return float(x)


def solve_motor(
    plant: Plant,
    vt_V: float,
    *,
    load_torque_Nm: float | None = None,
    line_current_A: float | None = None,
    armature_current_A: float | None = None,
    speed_rpm: float | None = None,
    field_voltage_V: float | None = None,
    arm_temp_C: float | None = None,
) -> OpPoint:
    """Operating point at terminal voltage vt_V and exactly one of the four given quantities.

    load_torque_Nm is the torque the load takes from the shaft (friction comes on top).
    Currents in motor convention. Raises ConfigError on a bad combination.
    """
    given = {
        "load_torque": load_torque_Nm,
        "line_current": line_current_A,
        "armature_current": armature_current_A,
        "speed": speed_rpm,
    }
    chosen = [k for k, val in given.items() if val is not None]
    if len(chosen) != 1:
        raise ConfigError(
            "steady: a motor point needs --vt and exactly one of --load-torque, --line-current, "
            f"--armature-current, --speed; got {len(chosen)}"
            + (f" ({', '.join(chosen)})" if chosen else "")
        )
    mode = chosen[0]
    vt = _finite(vt_V, "--vt")
    value = _finite(given[mode], f"--{mode.replace('_', '-')}")
    c = circuit(plant, arm_temp_C)
    vf = _field_voltage(plant, c, field_voltage_V)
    op = OpPoint(plant, c, "motor", mode, None)
    if mode == "speed":
        w = value * RPM
        st = _solve_line_at_speed(c, vt, w, vf, plant)
        if st is None:
            return _none(op, "no steady armature current satisfies the armature equation at this speed")
        op.state = st
        op.stable = None
    elif mode in ("line_current", "armature_current"):
        i1 = value if mode == "line_current" else _line_from_armature(c, vt, value)
        st = _state(c, vt, i1, 0.0, vf)
        if st.kphi <= 0.0 or abs(st.kphi) < 1e-12:
            return _none(op, "the net excitation is zero or reversed at this current (no flux to turn the rotor)")
        st.w = (st.varm - c.ra * st.ia - c.brush(st.ia)) / st.kphi
        op.state = st
    else:
        st, stable, why = _solve_torque(c, vt, value, vf, plant)
        if st is None:
            return _none(op, why)
        op.state = st
        op.stable = stable
    _motor_cautions(op)
    return op


def _solve_line_at_speed(c, vt, w, vf, plant):
    f = lambda i1: _resid(c, vt, i1, w, vf)
    ir = plant.p[L.P_RATED_IA_A]
    span = 4.0 * ir + abs(vt) / max(c.ra + c.rse, 1e-3 * abs(vt) / ir if ir > 0 else 1e-6)
    for _ in range(40):
        if f(span) < 0.0 and f(-span) > 0.0:
            break
        span *= 2.0
    rts, _, _ = roots(f, _grid(-span, span))
    if not rts:
        return None
    i1 = min((r for r, _ in rts), key=abs)
    return _state(c, vt, i1, w, vf)


def _speed_at_armature(c, vt, ia, vf):
    i1 = _line_from_armature(c, vt, ia)
    st = _state(c, vt, i1, 0.0, vf)
    if not st.kphi > 1e-12:
        return None
    st.w = (st.varm - c.ra * st.ia - c.brush(st.ia)) / st.kphi
    return st


def _solve_torque(c, vt, t_load, vf, plant):
    def g(ia):
        st = _speed_at_armature(c, vt, ia, vf)
        if st is None:
            return math.nan
        return st.te - c.friction(st.w) - t_load

    ir = plant.p[L.P_RATED_IA_A]
    span = max(10.0 * ir, 2.0 * abs(vt) / max(c.ra + c.rse, 1e-3 * abs(vt) / ir if ir > 0 else 1e-6))
    rts, _, _ = roots(g, _grid(-span, span, n_lin=1601))
    if not rts:
        return None, None, (
            "no speed at which the motor's torque meets this load: the load exceeds what the "
            "motor develops at this voltage and field (or, for a series motor, the load is too "
            "light to hold a finite speed)"
        )
    # the operating point a start from rest reaches: the smallest armature current
    ia = min((r for r, _ in rts), key=abs)
    st = _speed_at_armature(c, vt, ia, vf)
    # mechanical stability: d(Te - Tf - TL)/dw < 0 along the torque-speed curve
    h = max(abs(ia) * 1e-5, 1e-6)
    sa, sb = _speed_at_armature(c, vt, ia - h, vf), _speed_at_armature(c, vt, ia + h, vf)
    stable = None
    if sa is not None and sb is not None and sb.w != sa.w:
        dg = (g(ia + h) - g(ia - h)) / (sb.w - sa.w)
        stable = bool(dg < 0.0)
    return st, stable, ""


def _none(op, reason, residual=None):
    op.found = False
    op.reason = reason
    op.residual_state = residual
    op.cautions.append(f"no operating point: {reason}")
    return op


def solve_generator(
    plant: Plant,
    speed_rpm: float,
    *,
    load_ohm: float | None = None,
    load_current_A: float | None = None,
    field_voltage_V: float | None = None,
    arm_temp_C: float | None = None,
    field_reversed: bool = False,
) -> OpPoint:
    """Generator at an imposed speed feeding a resistor, a given load current, or nothing.

    field_reversed: the shunt (or series) field connected against the residual magnetism.
    For self-excited machines the built-up point (field-resistance line meets the curve) is
    returned; when there is none, found is False and reason says why.
    """
    if load_ohm is not None and load_current_A is not None:
        raise ConfigError("steady: a generator point takes at most one of --load-ohm, --load-current")
    w = _finite(speed_rpm, "--speed") * RPM
    if load_ohm is not None:
        r_load = _finite(load_ohm, "--load-ohm")
        if r_load <= 0.0:
            raise ConfigError(f"--load-ohm: must be > 0, got {load_ohm!r}")
        mode = "load_ohm"
        line = lambda vt: -vt / r_load
    elif load_current_A is not None:
        i_load = _finite(load_current_A, "--load-current")
        mode = "load_current"
        line = lambda vt: -i_load
    else:
        mode = "open_circuit"
        line = lambda vt: 0.0
    c = circuit(plant, arm_temp_C, field_reversed=field_reversed)
    if field_reversed and c.conn == L.CONN_SEPARATE:
        raise ConfigError("--field-reversed: a separately excited field is reversed by a negative --field-voltage")
    vf = _field_voltage(plant, c, field_voltage_V)
    op = OpPoint(plant, c, "generator", mode, None)
    conn_name = plant.machine["machine.connection"]
    if conn_name.startswith("compound"):
        kind = plant.machine["machine.compound"]
        other = "differential" if kind == "cumulative" else "cumulative"
        op.notes.append(
            f"machine.compound = '{kind}' is defined for motoring current; generating reverses the "
            f"armature current, so as connected this machine generates as a {other} compound"
        )
    if conn_name == "series" and not field_reversed:
        op.notes.append(
            "series field as connected for motoring: generating in the same direction of rotation "
            "reverses its current (use --field-reversed for the braking connection)"
        )
    if w == 0.0:
        return _none(op, "a generator at standstill generates nothing")
    s = 1.0 if w > 0.0 else -1.0  # the residual EMF's sign sets the build-up direction
    if c.conn == L.CONN_SEPARATE and vf != 0.0:
        s = s * (1.0 if vf > 0.0 else -1.0)
    F = lambda x: s * _resid(c, s * x, line(s * x), w, vf)
    e_top = float(plant.p[L.P_MAG_E0 + int(plant.p[L.P_MAG_N]) - 1]) * abs(w) / c.wc
    xmax = max(2.0 * e_top, 2.0 * plant.machine["machine.rated_voltage_V"], 10.0)
    for _ in range(30):
        if F(xmax) > 0.0:
            break
        xmax *= 2.0
    else:
        return _none(op, "the field-resistance line never meets the curve (field circuit resistance below the curve's saturated slope)")
    rts, xs, fs = roots(F, _grid(0.0, xmax, n_lin=2001, n_geo=600))
    rising = [x for x, up in rts if up]
    if c.conn == L.CONN_SERIES and mode == "open_circuit":
        op.state = _state(c, s * 0.0, 0.0, w, vf)
        op.state.vt = op.state.varm = op.state.emf
        op.self_excited = {"built_up": False, "note": "a series generator builds up only with a load connected"}
        op.notes.append("open circuit: a series generator carries no current, so it shows its residual EMF only")
        op.stable = True
        _generator_cautions(op)
        return op
    if not rising:
        return _none(op, "no terminal voltage satisfies the armature equation with this load (load current above the generator's maximum)")
    if not c.self_excited:
        x = max(rising)
        op.state = _state(c, s * x, line(s * x), w, vf)
        op.stable = True
        _generator_cautions(op)
        return op
    # self-excited: the built-up point is the highest stable intersection reached after the
    # curve has risen faster than the field line somewhere (loop gain above one); without
    # such a region the only intersection is the near-residual one
    first = rising[0]
    x_top = max(rising)
    seg = (xs <= x_top)
    f_seg = fs[seg]
    drop = np.maximum.accumulate(f_seg) - f_seg
    gain_above_one = bool(np.nanmax(drop) > 1e-9 * max(1.0, abs(fs[0])))
    crit = _critical_field_ohm(plant, c, w)
    info = {
        "critical_field_ohm": crit,
        "field_circuit_ohm": c.rsh if c.has_shunt else None,
        "residual_emf_V": float(plant.p[L.P_MAG_E0]) * abs(w) / c.wc,
    }
    first_state = _state(c, s * first, line(s * first), w, vf)
    # the model's residual flux is positive: a field current that drives the net excitation
    # negative opposes it (field reversed, or rotation reversed with the field as connected)
    reversed_field = first_state.immf < 0.0
    if not gain_above_one:
        if reversed_field or field_reversed:
            why = ("the field is connected against the residual magnetism (field reversed, or the "
                   "rotation reversed): its current demagnetizes the machine instead of building up")
        elif c.has_shunt and c.rsh + c.ra >= crit:
            why = (f"the field circuit resistance {c.rsh:.4g} ohm (+ Ra {c.ra:.3g} ohm) is above the "
                   f"critical field resistance {crit:.4g} ohm at {w / RPM:.0f} r/min: the voltage "
                   f"stays near residual")
        elif mode == "open_circuit":
            why = "the field-resistance line lies above the curve everywhere: no build-up from residual"
        else:
            why = ("the load is too heavy for self-excitation: with this load the field line lies "
                   "above the curve everywhere (the voltage collapses to near residual)")
        info.update({"built_up": False, "builds_up_from_residual": False})
        op.self_excited = info
        return _none(op, why, residual=first_state)
    x = x_top
    op.state = _state(c, s * x, line(s * x), w, vf)
    op.stable = True
    from_residual = x == first
    info.update({"built_up": True, "builds_up_from_residual": from_residual})
    if not from_residual:
        info["stalls_near_V"] = s * first
        op.cautions.append(
            f"this built-up point is not reached from residual magnetism: build-up stalls near "
            f"{s * first:.3g} V; flash the field (or lower the field resistance) to reach it"
        )
    op.self_excited = info
    _generator_cautions(op)
    return op


def _critical_field_ohm(plant, c, w):
    """The critical field resistance at speed w, as `dcrig check` reports it
    (host.params.critical_field_ohm: the tangent from the origin to the curve, residual off)."""
    from .params import critical_field_ohm

    return critical_field_ohm(plant.p, w)


# ---------------------------------------------------------------------------------------------
# cautions
# ---------------------------------------------------------------------------------------------


def _common_cautions(op):
    v = op.plant.machine.values
    s = op.state
    ir = v["machine.rated_current_A"]
    n_max = v["machine.max_speed_rpm"] or 1.2 * v["machine.rated_speed_rpm"]
    n = abs(s.w) / RPM
    if n > n_max:
        op.cautions.append(f"speed {n:.0f} r/min is above the machine's maximum {n_max:.0f} r/min: overspeed")
    if abs(s.ia) > 2.0 * ir:
        op.cautions.append(
            f"armature current {abs(s.ia):.0f} A is {abs(s.ia) / ir * 100:.0f} % of rated: beyond the "
            f"commutation limit (flashover risk)"
        )
    elif abs(s.ia) > 1.05 * ir:
        op.cautions.append(f"armature current {abs(s.ia):.0f} A is {abs(s.ia) / ir * 100:.0f} % of rated: overload")
    if op.stable is False:
        op.cautions.append("unstable operating point: a small speed rise raises the torque further (runaway)")


def _motor_cautions(op):
    v = op.plant.machine.values
    s, c = op.state, op.circuit
    conn = v["machine.connection"]
    rated_t = op.plant.derived.get("rated_torque_Nm", 0.0)
    if c.conn == L.CONN_SERIES:
        shaft = s.te - c.friction(s.w)
        light = rated_t > 0 and abs(shaft) < 0.25 * rated_t
        op.cautions.append(
            "series motor: never run it unloaded or uncoupled - at light load the speed rises "
            "without bound (runaway)" + (f"; at this light load ({shaft:.0f} N m) it already runs "
                                         f"{s.w / RPM:.0f} r/min" if light else "")
        )
    if c.has_shunt:
        if_r = v["machine.rated_field_current_A"]
        weak = if_r and abs(s.ish) < 0.8 * if_r
        if weak:
            op.cautions.append(
                f"weak field (field current {s.ish:.3g} A, {abs(s.ish) / if_r * 100:.0f} % of rated): the "
                f"speed rises as the field falls - losing the field runs the motor away"
            )
    if conn.startswith("compound") and v["machine.compound"] == "differential":
        op.cautions.append(
            "differential compound: the flux falls as the load rises; at high current the speed "
            "rises with load (unstable) and direct-on-line starting can reverse the flux"
        )
    if s.w < 0.0 and op.mode == "load_torque" and s.te > 0.0:
        op.cautions.append("the load exceeds the motor's standstill torque: a passive load stalls it; an active one drives it backwards")
    _common_cautions(op)


def _generator_cautions(op):
    c = op.circuit
    info = op.self_excited
    crit = info.get("critical_field_ohm")
    if c.has_shunt and c.self_excited and crit and c.rsh > 0.85 * crit:
        op.cautions.append(
            f"field circuit {c.rsh:.4g} ohm within 15 % of the critical {crit:.4g} ohm: build-up is "
            f"marginal and the voltage unsteady"
        )
    _common_cautions(op)


# ---------------------------------------------------------------------------------------------
# converter: firing angle, overlap, continuity
# ---------------------------------------------------------------------------------------------


def loop_inductance_H(op: OpPoint, ls_H: float = 0.0) -> float:
    """Incremental inductance of the armature loop as the bridge sees it (field loop held)."""
    p = op.plant.p
    c, s = op.circuit, op.state
    lind = p[L.P_LA_H] + 2.0 * ls_H
    if c.has_series:
        _, de = curve_emf_py(p, s.ieff)
        lm = p[L.P_LM0_H] * float(de) / p[L.P_MAG_SLOPE0]
        lind += p[L.P_LSE_LEAK_H] + c.ks * c.ks * lm
    return float(lind)


def critical_current_A(v_ll_V: float, f_Hz: float, l_H: float, alpha_rad: float, n: int = 4001) -> float:
    """Mean current at the edge of continuous conduction of a 6-pulse bridge on an R-L-E load.

    Derived (R neglected, overlap neglected at the edge, since the current there is small):
    over one pulse the DC side sees the line voltage sqrt(2) V_LL sin(phi),
    phi in [pi/3 + alpha, 2 pi/3 + alpha], against E = (3 sqrt(2)/pi) V_LL cos(alpha), so
    w L di/dphi = v - E; at the edge the current just touches zero, and its mean is then
    (mean - min) of the integral of (v - E) divided by w L.
    """
    phi0 = math.pi / 3.0 + alpha_rad
    phi = np.linspace(phi0, phi0 + math.pi / 3.0, n)
    vpk = math.sqrt(2.0) * v_ll_V
    e = 3.0 * math.sqrt(2.0) / math.pi * v_ll_V * math.cos(alpha_rad)
    integral = vpk * (math.cos(phi0) - np.cos(phi)) - e * (phi - phi0)
    mean = np.trapezoid(integral, phi) / (math.pi / 3.0) if hasattr(np, "trapezoid") else np.trapz(integral, phi) / (math.pi / 3.0)
    return float((mean - integral.min()) / (2.0 * math.pi * f_Hz * l_H))


def converter_point(op: OpPoint) -> dict:
    """Firing angle (overlap drop included) and continuity estimate for op's armature point.

    Vd = (3 sqrt 2 / pi) V_LL cos(alpha) - (3/pi) w Ls Id - 2 Rs Id   (Mohan, Undeland, Robbins,
    Power Electronics, 6-pulse bridge with commutating inductance; the 2 Rs Id term is the
    mains resistance of the two conducting phases, which the kernel's averaged bridge carries).
    """
    plant = op.plant
    conv = plant.converter
    if conv is None or op.state is None:
        return {}
    cv = conv.values
    kind = cv["converter.kind"]
    s = op.state
    out = {"kind": kind}
    if kind == "current_source":
        out.update({"firing_angle_deg": None, "continuous": True,
                    "note": "an ideal current source has no firing angle"})
        return out
    v_ll = cv["mains.voltage_V"]
    f = cv["mains.frequency_Hz"]
    ls = cv["mains.inductance_H"]
    rs = cv["mains.resistance_ohm"]
    vdo = 3.0 * math.sqrt(2.0) / math.pi * v_ll
    rx = 3.0 / math.pi * 2.0 * math.pi * f * ls
    idc = s.i1
    out.update({"vdo_V": vdo, "commutation_drop_V": rx * abs(idc), "resistive_drop_V": 2.0 * rs * abs(idc)})
    if idc >= 0.0:
        group, v_group = "forward", s.vt
    else:
        group, v_group = "reverse", -s.vt
        if kind == "bridge":
            out.update({"bridge": "reverse", "firing_angle_deg": None, "continuous": None,
                        "note": "a single bridge cannot carry negative armature current: this point needs a dual bridge (or a reversing contactor)"})
            op.cautions.append(out["note"])
            return out
    cos_a = (v_group + (rx + 2.0 * rs) * abs(idc)) / vdo
    out["bridge"] = group
    if abs(cos_a) > 1.0:
        out.update({"firing_angle_deg": None, "continuous": None,
                    "note": f"out of reach: needs cos(alpha) = {cos_a:.3f}; the bridge's {vdo:.0f} V (Vdo) "
                            f"minus the overlap drop cannot give {v_group:.0f} V at {abs(idc):.0f} A"})
        op.cautions.append(out["note"])
        return out
    alpha = math.acos(cos_a)
    a_deg = math.degrees(alpha)
    out["firing_angle_deg"] = a_deg
    # overlap angle: cos(alpha + mu) = cos(alpha) - 2 w Ls Id / (sqrt 2 V_LL)  (Mohan et al.)
    cm = cos_a - 2.0 * 2.0 * math.pi * f * ls * abs(idc) / (math.sqrt(2.0) * v_ll)
    mu = math.degrees(math.acos(max(-1.0, min(1.0, cm)))) - a_deg
    out["overlap_deg"] = mu
    a_min, a_max = cv["bridge.alpha_min_deg"], cv["bridge.alpha_max_deg"]
    if not a_min <= a_deg <= a_max:
        op.cautions.append(f"firing angle {a_deg:.1f} deg lies outside the bridge's range {a_min:g}..{a_max:g} deg")
    gamma = 180.0 - a_deg - mu
    t_q_deg = cv["bridge.turn_off_us"] * 1e-6 * 360.0 * f
    if a_deg > 90.0 and gamma < t_q_deg + 5.0:
        op.cautions.append(f"inverting with only {gamma:.1f} deg extinction margin: commutation failure risk")
    lind = loop_inductance_H(op, ls)
    icrit = critical_current_A(v_ll, f, lind, alpha)
    out["critical_current_A"] = icrit
    out["loop_inductance_H"] = lind
    out["continuous_estimate"] = abs(idc) >= icrit
    out["continuous"] = out["continuous_estimate"]
    out["continuity_basis"] = "ripple estimate (R neglected): mean current vs critical_current_A"
    if cv["field.kind"] != "dc_source" and op.circuit.conn == L.CONN_SEPARATE:
        vac = cv["field.ac_voltage_V"] or v_ll
        cf = s.vf * math.pi / (math.sqrt(2.0) * vac) - 1.0  # averaged half-controlled bridge
        out["field_firing_angle_deg"] = math.degrees(math.acos(cf)) if abs(cf) <= 1.0 else None
    return out


def _bridge_run_setup(op: OpPoint):
    """Arrays for a kernel run of op's converter at op's speed (imposed) and field."""
    conv = op.converter or {}
    plant = op.plant
    s, c = op.state, op.circuit
    p = plant.p.copy()
    p[L.P_LOAD_KIND] = L.LOAD_PRIME_MOVER
    p[L.P_THERMAL_FROZEN] = 1.0
    x = plant.new_state()
    x[L.X_TEMP_ARM_C] = c.arm_temp_C
    x[L.X_SPEED_RAD_S] = s.w
    if c.has_shunt:
        x[L.X_I_FIELD_A] = s.ish
    u = plant.new_inputs()
    u[L.U_PRIME_SPEED_RAD_S] = s.w
    u[L.U_BRIDGE_SELECT] = 1.0 if conv.get("bridge", "forward") == "forward" else 2.0
    u[L.U_CONTACTOR] = 1.0
    u[L.U_FIELD_V] = s.vf
    if conv.get("field_firing_angle_deg") is not None:
        u[L.U_FIELD_ALPHA_DEG] = conv["field_firing_angle_deg"]
    return p, x, u


def _settle_time_s(op: OpPoint) -> float:
    c = op.circuit
    lind = (op.converter or {}).get("loop_inductance_H") or op.plant.p[L.P_LA_H]
    tau = lind / max(c.ra + (c.rse if c.has_series else 0.0), 1e-9)
    return min(max(8.0 * tau, 0.1), 2.0)


def _run_at(op, arrays, alpha_deg, t_settle, n_cycles=3):
    """Settle the kernel at alpha_deg, then measure over whole mains cycles (one call per
    cycle, so the ripple cannot bias the means); arrays (p, x, u) carry the state on."""
    from rtmodel.kernel import step_frame

    p, x, u = arrays
    u[L.U_ALPHA_DEG] = alpha_deg
    f = op.plant.converter["mains.frequency_Hz"]
    dt = op.plant.dt_s
    n_pulse = max(1, int(round(1.0 / (6.0 * f) / dt)))
    n_cycle = max(1, int(round(1.0 / f / dt)))
    y = np.zeros(L.N_OUTPUT)
    for _ in range(int(math.ceil(t_settle / (n_pulse * dt)))):
        step_frame(x, p, u, y, n_pulse)
    status = 0
    ia_sum = vt_sum = 0.0
    for _ in range(n_cycles):
        status |= int(step_frame(x, p, u, y, n_cycle))
        ia_sum += y[L.Y_IA_MEAN_A]
        vt_sum += y[L.Y_VT_MEAN_V]
    return {
        "firing_angle_deg": float(alpha_deg),
        "continuous": not bool(status & L.ST_DISCONTINUOUS),
        "mean_armature_current_A": ia_sum / n_cycles,
        "mean_terminal_voltage_V": vt_sum / n_cycles,
        "status": status,
        "settle_s": t_settle,
    }


def kernel_bridge_run(op: OpPoint, settle_s: float | None = None, alpha_deg: float | None = None) -> dict:
    """Run the compiled kernel with the converter at the op's firing angle (or alpha_deg) and
    the op's speed imposed; report whether the current is continuous over the last three mains
    cycles (the kernel flags a current zero anywhere, also inside a step) and the means.

    Costs a kernel compile the first time (cached after).
    """
    alpha = (op.converter or {}).get("firing_angle_deg") if alpha_deg is None else alpha_deg
    if alpha is None:
        return {}
    t_settle = settle_s if settle_s is not None else _settle_time_s(op)
    return _run_at(op, _bridge_run_setup(op), alpha, t_settle)


def switched_bridge_point(op: OpPoint, rel_tol: float = 0.002, max_runs: int = 40) -> dict:
    """The switched bridge at op's own point: the firing angle at which the kernel, at op's
    speed, carries op's mean armature current, and whether its current is continuous there.

    The firing angle from the continuous-conduction formula (Vd = Vdo cos a - (3/pi) w Ls Id)
    gives a different current in the switched model at light load: the formula knows neither
    the ripple (the overlap takes the current at the commutation instant, not the mean) nor
    the gaps of discontinuous conduction (the terminals then show the EMF). With the speed, and
    so the EMF, imposed, the mean current fixes the mean voltage through the armature KVL, so
    matching the current puts the switched bridge at op's point. g(alpha) = |I(alpha)| - |I_op|
    falls with alpha, steeply in continuous conduction and gently in discontinuous: the angle
    is bracketed by steps that double from the continuous-conduction slope
    dV/dalpha = -Vdo sin(alpha), then found by false position (Illinois variant); each run
    settles from the previous state.

    Returns {"at_formula_angle": run, "at_op_current": run, "converged": bool}.
    """
    conv = op.converter or {}
    alpha0 = conv.get("firing_angle_deg")
    if alpha0 is None:
        return {}
    cv = op.plant.converter.values
    a_min, a_max = cv["bridge.alpha_min_deg"], cv["bridge.alpha_max_deg"]
    target = abs(op.state.ia)
    tol = max(rel_tol * target, 1e-4 * op.plant.machine.values["machine.rated_current_A"])
    t_settle = _settle_time_s(op)
    arrays = _bridge_run_setup(op)
    runs = 0

    def g(alpha):
        nonlocal runs
        runs += 1
        run = _run_at(op, arrays, alpha, t_settle)
        return abs(run["mean_armature_current_A"]) - target, run

    g0, first = g(alpha0)
    out = {"at_formula_angle": first, "at_op_current": first, "converged": abs(g0) <= tol}
    if out["converged"]:
        return out
    c = op.circuit
    r_loop = (c.ra + (c.rse if c.has_series else 0.0) + 2.0 * cv["mains.resistance_ohm"]
              + 6.0 * cv["mains.frequency_Hz"] * cv["mains.inductance_H"])  # (3/pi) w Ls
    vdo = 3.0 * math.sqrt(2.0) / math.pi * cv["mains.voltage_V"]
    slope = vdo * max(math.sin(math.radians(alpha0)), 0.05) * math.pi / 180.0 / r_loop  # A per deg
    # the kernel fires in the step whose midpoint passes the instant, so I(alpha) is a
    # staircase on a grid of a fraction of the step's mains angle: below that the angle is
    # resolved as far as the model can, and the nearer end of the bracket is op's point
    a_res = 360.0 * cv["mains.frequency_Hz"] * op.plant.dt_s / 8.0
    step = max(abs(g0) / slope, 0.01) * (1.0 if g0 > 0.0 else -1.0)
    lo = hi = (alpha0, g0, first)
    while (hi[1] > 0.0) == (g0 > 0.0) and runs < max_runs:
        a_new = min(max(alpha0 + step, a_min), a_max)
        if a_new == hi[0]:
            out["at_op_current"] = hi[2]
            return out  # held at a limit of the bridge's range
        f_new, run = g(a_new)
        lo, hi = hi, (a_new, f_new, run)
        step *= 2.0
        if abs(f_new) <= tol:
            out.update(at_op_current=run, converged=True)
            return out
    # lo and hi bracket the angle (g of opposite signs): false position, Illinois variant
    side = 0
    while runs < max_runs and abs(hi[0] - lo[0]) > a_res:
        (a0, f0, r0), (a1, f1, r1) = lo, hi
        a = a1 - f1 * (a1 - a0) / (f1 - f0)
        fa, run = g(a)
        if abs(fa) <= tol:
            out.update(at_op_current=run, converged=True)
            return out
        if (fa > 0.0) == (f1 > 0.0):
            hi = (a, fa, run)
            if side == -1:
                lo = (a0, 0.5 * f0, r0)
            side = -1
        else:
            lo = (a, fa, run)
            if side == 1:
                hi = (a1, 0.5 * f1, r1)
            side = 1
    best = min((lo, hi), key=lambda e: abs(abs(e[2]["mean_armature_current_A"]) - target))
    out.update(at_op_current=best[2], converged=abs(hi[0] - lo[0]) <= a_res)
    return out


def with_converter(op: OpPoint, use_kernel: bool = True) -> OpPoint:
    """Attach the converter analysis; for switched bridges, decide continuity by kernel runs
    at op's own point (switched_bridge_point)."""
    if op.plant.converter is None or not op.found:
        return op
    op.converter = converter_point(op)
    kind = op.plant.converter["converter.kind"]
    if use_kernel and kind in ("bridge", "dual_bridge") and op.converter.get("firing_angle_deg") is not None:
        pt = switched_bridge_point(op)
        first, here = pt["at_formula_angle"], pt["at_op_current"]
        conv = op.converter
        conv["kernel"] = first
        conv["kernel_at_op_current"] = here
        conv["switched_mean_armature_current_A"] = first["mean_armature_current_A"]
        conv["switched_firing_angle_deg"] = here["firing_angle_deg"] if pt["converged"] else None
        # a current zero in either run is discontinuous conduction; the point's own run decides
        conv["continuous"] = first["continuous"] and here["continuous"]
        conv["continuity_basis"] = ("kernel runs of the switched bridge at this speed: at the formula's "
                                    "angle and at the angle that carries this current")
        i_op = op.state.ia
        a0 = conv["firing_angle_deg"]
        if not conv["continuous"]:
            at = (f"; at {here['firing_angle_deg']:.2f} deg it carries the requested {i_op:.1f} A with "
                  f"current gaps" if pt["converged"] and not here["continuous"] else "")
            op.notes.append(
                f"discontinuous conduction: the firing angle from the continuous-conduction formula "
                f"({a0:.2f} deg) gives {first['mean_armature_current_A']:.1f} A mean in the switched "
                f"model, not {i_op:.1f} A" + at
            )
        elif pt["converged"] and abs(here["firing_angle_deg"] - a0) > 0.05:
            op.notes.append(
                f"the switched bridge needs {here['firing_angle_deg']:.2f} deg for {i_op:.1f} A; the "
                f"continuous-conduction formula's {a0:.2f} deg gives {first['mean_armature_current_A']:.1f} A "
                f"(the formula takes a ripple-free current; the overlap takes the current at the "
                f"commutation instant, near the ripple's minimum)"
            )
        if not pt["converged"]:
            op.notes.append(
                f"the switched bridge did not reach {i_op:.1f} A within the firing range "
                f"(last {here['firing_angle_deg']:.2f} deg, {here['mean_armature_current_A']:.1f} A)"
            )
    elif kind == "averaged_bridge":
        op.notes.append("averaged bridge: continuity is the ripple estimate (the averaged model has no ripple)")
    return op
