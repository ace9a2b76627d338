"""Independent reference statement of the DC machine equations, for scipy's ODE solvers.

Owns: the textbook circuit of every connection written in the natural physical states
(armature current ia, shunt field current ish, speed w, armature temperature T) with the mass
matrix of the coupled inductances; the magnetization curve built with scipy; and a small test
harness (test-machine configs, running the compiled kernel in segments) shared by
tests/test_machine_*.py.

Must never import rtmodel.kernel or rtmodel.magnetization: the reference is written from the
circuit, not from the model's code, so that a mistake in the model cannot hide in both. It reads
machine data from validated config values (host.config), never from the packed parameter array.
The harness section at the end uses rtmodel.layout names to talk to the kernel; nothing in the
equation section does.

Circuit (motor convention: currents into the + terminal positive, power in = vt * i_line)
-------------------------------------------------------------------------------------------
    armature       v_arm = E + Ra ia + Vb(ia) + La dia/dt,   E = E_curve(i_m) * w / w_curve
    shunt field    v_sh  = Rsh ish + Lfl dish/dt + d(lambda)/dt
    series field   v_se  = Rse ise + Lse dise/dt + n d(lambda)/dt
    main flux      d(lambda)/dt = Lm(i_m) di_m/dt,  Lm = Lm0 * E_curve'(i_m) / max secant slope,
                   i_m = ish + n ise (n = +/- series/shunt turns ratio; series machines: i_m = ise)
    brush drop     Vb(ia) = Vb0 * clip(ia / i_knee, -1, 1)
    torque         Te = (E_curve(i_m) / w_curve) * ia
    mechanics      J dw/dt = Te - B w - Tc clip(w / w_s, -1, 1) - T_load(w)

Connections (Fitzgerald & Kingsley, Electric Machinery, ch. on DC machines; Chapman, Electric
Machinery Fundamentals, DC generator/motor chapters - circuit diagrams, from memory):
    separate       terminal = armature;                field on its own source
    shunt          terminal = armature = shunt field;  i_line = ia + ish
    series         terminal = armature + series field; ise = ia
    long shunt     terminal = armature + series = shunt field; ise = ia;  i_line = ia + ish
    short shunt    shunt field = armature; terminal = shunt + series; ise = i_line = ia + ish
Terminal: a Thevenin source (vth, rth), or open (i_line held at zero).
Copper resistance correction (IEC 60034-1, 235 degC for copper, from memory): R(T) = R_ref (235+T)/(235+T_ref).
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp
from scipy.interpolate import CubicHermiteSpline, PchipInterpolator

# The kernel treats passive torques (Coulomb friction, a passive constant load) exactly: they
# stop the shaft and hold it. An ODE solver needs a continuous law, so the reference smooths
# the sign function over this band (far below any speed the comparisons look at).
REF_SMOOTH_RAD_S = 1e-3

COPPER_K = 235.0  # IEC 60034-1, copper (from memory)
RPM = math.pi / 30.0

SEPARATE, SHUNT, SERIES, LONG_SHUNT, SHORT_SHUNT = "separate", "shunt", "series", "compound_long", "compound_short"
SHUNT_TYPES = (SHUNT, LONG_SHUNT, SHORT_SHUNT)


def copper_ohm(r_ref_ohm: float, temp_c: float, ref_c: float) -> float:
    """IEC 60034-1 copper law (from memory): R2/R1 = (235 + theta2) / (235 + theta1)."""
    return r_ref_ohm * (COPPER_K + temp_c) / (COPPER_K + ref_c)


# ----------------------------------------------------------------------------------------------
# Magnetization curve
# ----------------------------------------------------------------------------------------------
class MagCurve:
    """Open-circuit curve built with scipy.

    Why CubicHermiteSpline and not PchipInterpolator directly: scipy's PchipInterpolator uses a
    one-sided three-point end-slope formula, while the model documents end slopes equal to the
    end secants (so the curve continues past the last point as a straight line). The interior
    knot slopes are taken from scipy's PchipInterpolator (Fritsch-Carlson weighted harmonic
    means), the two end slopes are the end secants, and CubicHermiteSpline evaluates the
    resulting piecewise cubic. Nothing of the model's own slope routine is used here.
    """

    def __init__(self, i_A, e_V, speed_rad_s: float):
        self.i = np.asarray(i_A, dtype=float)
        self.e = np.asarray(e_V, dtype=float)
        self.w_c = float(speed_rad_s)
        secant = np.diff(self.e) / np.diff(self.i)
        d = PchipInterpolator(self.i, self.e).derivative()(self.i)
        d[0] = secant[0]
        d[-1] = secant[-1]
        self.knot_slopes = d
        self.spline = CubicHermiteSpline(self.i, self.e, d)
        self.dspline = self.spline.derivative()
        self.slope_max = float(np.max(secant))  # the air-gap (straight-part) slope
        self.e_res = float(self.e[0])
        self.i1 = float(self.i[1])

    def tangent_from_origin_slope(self) -> float:
        """The textbook tangent construction on the curve with the residual taken off: the
        line through the origin that touches E(i) - E_res. Its touching point solves
        E'(i) i = E(i) - E_res (found here with scipy's brentq); on a curve that is concave
        from the foot it touches at the origin and the slope is E'(0)."""
        from scipy.optimize import brentq

        def g(i):
            e, de = self._pos(i)
            return de * i - (e - self.e_res)

        grid = np.linspace(1e-9, self.i[-1], 4001)
        vals = [g(x) for x in grid]
        # every touching point (g falls through zero) is a candidate, and the origin; on a
        # straight stretch g is zero to rounding, so keep the steepest of the candidates
        best = self._pos(0.0)[1]
        for a, b, ga, gb in zip(grid, grid[1:], vals, vals[1:]):
            if ga > 0.0 >= gb:
                i_t = brentq(g, a, b, xtol=1e-14)
                best = max(best, self._pos(i_t)[1])
        return best

    def _pos(self, i: float):
        if i >= self.i[-1]:
            s = (self.e[-1] - self.e[-2]) / (self.i[-1] - self.i[-2])
            return self.e[-1] + s * (i - self.i[-1]), s
        return float(self.spline(i)), float(self.dspline(i))

    def emf(self, i: float):
        """(E at curve speed, dE/di). Negative excitation: mirrored curve with the residual
        fading out over the first segment (the law the model's docstring states)."""
        if i >= 0.0:
            return self._pos(i)
        e, de = self._pos(-i)
        fade = 1.0 + i / self.i1
        if fade > 0.0:
            return -e + 2.0 * self.e_res * fade, de + 2.0 * self.e_res / self.i1
        return -e, de


# ----------------------------------------------------------------------------------------------
# Machine data (from validated config values) and inputs
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Machine:
    conn: str
    ks: float  # signed series/shunt turns ratio (1 for series machines, 0 without series field)
    ra_ref: float
    la: float
    vb0: float
    knee: float
    rsh: float  # hot shunt/separate field circuit incl. rheostat
    lfl: float
    rse: float  # hot series field
    lse: float
    lm0: float
    curve: MagCurve
    t_ref: float
    t_amb: float
    rise: float
    tau_th: float
    frozen: bool
    i_rated: float
    w_rated: float
    j_motor: float
    j_load: float
    b_visc: float
    t_coul: float
    w_smooth: float
    load: str


def machine_from_config(v: dict) -> Machine:
    conn = v["machine.connection"]
    t_ref = v["machine.resistance_ref_C"]
    t_f = v["machine.field_temp_C"]
    if conn == SERIES:
        ks = 1.0
    elif conn in (LONG_SHUNT, SHORT_SHUNT):
        ks = v["machine.series_turns_ratio"] * (1.0 if v["machine.compound"] == "cumulative" else -1.0)
    else:
        ks = 0.0
    ir = v["machine.rated_current_A"]
    rf = v["machine.field_resistance_ohm"] or 0.0
    if v["machine.armature_reaction.armature_current_A"]:
        raise ValueError("the reference has no armature reaction")
    return Machine(
        conn=conn,
        ks=ks,
        ra_ref=v["machine.ra_ohm"],
        la=v["machine.la_H"],
        vb0=v["machine.brush_drop_V"],
        knee=v["machine.brush_knee_A"] or 0.01 * ir,
        rsh=copper_ohm(rf, t_f, t_ref) + v["machine.field_rheostat_ohm"],
        lfl=v["machine.field_leakage_H"],
        rse=copper_ohm(v["machine.series_resistance_ohm"] or 0.0, t_f, t_ref),
        lse=v["machine.series_leakage_H"],
        lm0=v["machine.field_inductance_H"],
        curve=MagCurve(
            v["machine.magnetization.field_current_A"],
            v["machine.magnetization.emf_V"],
            v["machine.magnetization.speed_rpm"] * RPM,
        ),
        t_ref=t_ref,
        t_amb=v["machine.thermal.ambient_C"],
        rise=v["machine.thermal.rated_rise_K"],
        tau_th=v["machine.thermal.time_constant_s"],
        frozen=bool(v["machine.thermal.frozen"]),
        i_rated=ir,
        w_rated=v["machine.rated_speed_rpm"] * RPM,
        j_motor=v["mechanics.inertia_kgm2"],
        j_load=v["mechanics.load_inertia_kgm2"],
        b_visc=v["mechanics.viscous_Nm_per_rad_s"],
        t_coul=v["mechanics.coulomb_Nm"],
        w_smooth=REF_SMOOTH_RAD_S,
        load=v["mechanics.load"],
    )


@dataclass(frozen=True)
class Inputs:
    """What is held constant over one segment."""

    vs_V: float = 0.0  # DC source voltage
    source_ohm: float = 0.0
    contactor: bool = True
    load_ohm: float = 0.0  # resistor across the terminals
    field_V: float = 0.0  # separate field source
    load_torque_Nm: float = 0.0
    prime_rad_s: float = 0.0  # imposed speed (prime_mover load)
    coupling_ok: bool = True
    locked: bool = False

    def with_(self, **kw) -> "Inputs":
        return replace(self, **kw)


def terminal(inp: Inputs):
    """Thevenin equivalent (vth, rth) seen by the machine terminals, or None if open."""
    r_l = inp.load_ohm
    if inp.contactor:
        r_s = inp.source_ohm
        if r_l > 0.0 and r_s > 0.0:
            g = 1.0 / r_s + 1.0 / r_l
            return inp.vs_V / r_s / g, 1.0 / g
        return inp.vs_V, r_s  # an ideal source fixes the terminal voltage whatever the load
    if r_l > 0.0:
        return 0.0, r_l
    return None


def load_torque(m: Machine, inp: Inputs, w: float) -> float:
    t = inp.load_torque_Nm if inp.coupling_ok else 0.0
    if m.load == "constant":  # passive: opposes motion; smoothed over a tiny band for the ODE solver
        return t * max(-1.0, min(1.0, w / m.w_smooth))
    if m.load == "proportional":
        return t * w / m.w_rated
    if m.load == "quadratic":
        return t * w * abs(w) / m.w_rated**2
    if m.load == "overhauling":
        return t
    return 0.0


def speed_imposed(m: Machine, inp: Inputs) -> bool:
    return inp.locked or (m.load == "prime_mover" and inp.coupling_ok)


# ----------------------------------------------------------------------------------------------
# The equations in natural states s = [ia, ish, w, T]
# ----------------------------------------------------------------------------------------------
def excitation(m: Machine, ia: float, ish: float):
    """(i_m, di_m/dia, di_m/dish, ise, dise/dia, dise/dish, i_line)."""
    c = m.conn
    if c == SEPARATE:
        return ish, 0.0, 1.0, 0.0, 0.0, 0.0, ia
    if c == SHUNT:
        return ish, 0.0, 1.0, 0.0, 0.0, 0.0, ia + ish
    if c == SERIES:
        return ia, 1.0, 0.0, ia, 1.0, 0.0, ia
    if c == LONG_SHUNT:
        return ish + m.ks * ia, m.ks, 1.0, ia, 1.0, 0.0, ia + ish
    # short shunt: the series field carries the line current
    ise = ia + ish
    return ish + m.ks * ise, m.ks, 1.0 + m.ks, ise, 1.0, 1.0, ise


def algebraic(m: Machine, s, inp: Inputs):
    """Quantities at state s: dict of E, Te, vt-ish things without derivatives."""
    ia, ish, w, temp = s
    im = excitation(m, ia, ish)[0]
    e_c, _ = m.curve.emf(im)
    kphi = e_c / m.curve.w_c
    return {"emf": kphi * w, "kphi": kphi, "te": kphi * ia, "im": im}


def derivatives(m: Machine, s, inp: Inputs):
    """ds/dt from the mass-matrix form M(s) [dia, dish] = b(s)."""
    ia, ish, w, temp = s
    im, ga, gh, ise, sa, sh, i_line = excitation(m, ia, ish)
    e_c, de = m.curve.emf(im)
    kphi = e_c / m.curve.w_c
    emf = kphi * w
    lm = m.lm0 * de / m.curve.slope_max
    ra = copper_ohm(m.ra_ref, temp, m.t_ref)
    vb = m.vb0 * max(-1.0, min(1.0, ia / m.knee))
    # each element voltage as (static part, coefficient of dia, coefficient of dish)
    v_arm = np.array([emf + ra * ia + vb, m.la, 0.0])
    v_sh = np.array([m.rsh * ish, lm * ga, m.lfl + lm * gh])
    v_se = np.array([m.rse * ise, m.lse * sa + m.ks * lm * ga, m.lse * sh + m.ks * lm * gh])
    c = m.conn
    term = terminal(inp)
    rows = []
    # terminal equation: path voltage = vth - rth i_line, or i_line constant when open
    d_line = np.array([0.0, 1.0, 1.0 if c in SHUNT_TYPES else 0.0])  # (0, di_line/dia, /dish)
    if term is None:
        rows.append(d_line)
    else:
        vth, rth = term
        path = {SEPARATE: v_arm, SHUNT: v_arm, SERIES: v_arm + v_se, LONG_SHUNT: v_arm + v_se,
                SHORT_SHUNT: v_sh + v_se}[c]
        rows.append(path - np.array([vth - rth * i_line, 0.0, 0.0]))
    # field equation
    if c == SEPARATE:
        rows.append(v_sh - np.array([inp.field_V, 0.0, 0.0]))
    elif c == SHUNT or c == SHORT_SHUNT:
        rows.append(v_sh - v_arm)
    elif c == LONG_SHUNT:
        rows.append(v_sh - (v_arm + v_se))
    else:
        rows.append(np.array([0.0, 0.0, 1.0]))  # no shunt field: ish stays zero
    M = np.array([[r[1], r[2]] for r in rows])
    b = -np.array([r[0] for r in rows])
    dia, dish = np.linalg.solve(M, b)
    te = kphi * ia
    if speed_imposed(m, inp):
        dw = 0.0
    else:
        tf = m.b_visc * w + m.t_coul * max(-1.0, min(1.0, w / m.w_smooth))
        j = m.j_motor + (m.j_load if inp.coupling_ok else 0.0)
        dw = (te - tf - load_torque(m, inp, w)) / j
    if m.frozen:
        dtemp = 0.0
    else:
        # copper loss I^2 R(T) against heat flow proportional to the rise; the thermal
        # resistance is fixed by: rated current gives the rated rise in the steady state
        loss = ia * ia * (COPPER_K + temp) / (m.i_rated**2 * (COPPER_K + m.t_amb + m.rise))
        dtemp = (m.rise * loss - (temp - m.t_amb)) / m.tau_th
    return np.array([dia, dish, dw, dtemp])


def simulate(m: Machine, s0, segments, t_eval, rtol=1e-9, atol=None, method="Radau"):
    """Integrate over consecutive segments [(t_start, Inputs), ...] (last one runs to t_eval[-1]).

    Returns an array (len(t_eval), 4) of [ia, ish, w, T]. Each segment is solved separately so
    that input steps are exact discontinuities, as in the model.
    """
    t_eval = np.asarray(t_eval, dtype=float)
    if atol is None:
        atol = np.array([1e-7 * m.i_rated, 1e-9 * max(1.0, m.i_rated), 1e-8 * m.w_rated, 1e-8])
    out = np.full((len(t_eval), 4), np.nan)
    s = np.array(s0, dtype=float)
    bounds = [seg[0] for seg in segments] + [t_eval[-1]]
    for k, (t0, inp) in enumerate(segments):
        t1 = bounds[k + 1]
        if speed_imposed(m, inp):
            s[2] = 0.0 if inp.locked else inp.prime_rad_s
        if terminal(inp) is None:
            # open terminals: the line current is zero
            s[0] = -s[1] if m.conn in SHUNT_TYPES else 0.0
        sel = (t_eval >= t0) & (t_eval <= t1)
        if k + 1 < len(segments):
            sel &= t_eval < t1
        t_seg = np.union1d(t_eval[sel], [t0, t1])
        sol = solve_ivp(lambda t, y: derivatives(m, y, inp), (t0, t1), s, method=method,
                        rtol=rtol, atol=atol, t_eval=t_seg)
        if not sol.success:
            raise RuntimeError(sol.message)
        idx = np.searchsorted(t_seg, t_eval[sel])
        out[sel] = sol.y[:, idx].T
        s = sol.y[:, -1].copy()
    return out


# ----------------------------------------------------------------------------------------------
# Harness: test-machine configs and segment runs of the compiled kernel
# ----------------------------------------------------------------------------------------------
# Invented test machines (the Kestrel Bay workshop test bay): small enough that every time constant is
# tens of milliseconds, so transients settle within a second of simulated time.
_BASE = """
[machine]
name = "{name}"
connection = "{conn}"
compound = "{compound}"
duty = "{duty}"
rated_power_kW = 22.0
rated_voltage_V = 440.0
rated_current_A = 56.0
rated_speed_rpm = 1450.0
ra_ohm = 0.5
la_H = 0.01
brush_drop_V = 2.0
resistance_ref_C = 20.0
field_temp_C = 75.0
{field}

[machine.magnetization]
speed_rpm = 1500.0
{curve}

[machine.thermal]
ambient_C = 40.0
time_constant_s = 1800.0
rated_rise_K = 80.0

[mechanics]
inertia_kgm2 = 0.5
load = "{load}"
load_torque_Nm = 0.0
"""

_SHUNT_FIELD = """rated_field_current_A = 0.9
field_resistance_ohm = 300.0
field_inductance_H = 40.0
field_leakage_H = 2.0"""

_SHUNT_CURVE = """field_current_A = [0.0, 0.2, 0.4, 0.6, 0.8, 1.0, 1.2, 1.5]
emf_V = [8.0, 120.0, 235.0, 330.0, 395.0, 440.0, 470.0, 500.0]"""

_SERIES_CURVE = """field_current_A = [0.0, 10.0, 20.0, 30.0, 40.0, 50.0, 60.0, 80.0]
emf_V = [5.0, 110.0, 210.0, 290.0, 345.0, 385.0, 412.0, 450.0]"""


def machine_toml(conn: str, duty: str = "motor", compound: str = "cumulative", load: str = "constant") -> str:
    field = _SHUNT_FIELD
    curve = _SHUNT_CURVE
    if conn == SERIES:
        field = "field_inductance_H = 0.05\nseries_resistance_ohm = 0.3\nseries_leakage_H = 0.002"
        curve = _SERIES_CURVE
    elif conn in (LONG_SHUNT, SHORT_SHUNT):
        field += "\nseries_resistance_ohm = 0.1\nseries_leakage_H = 0.001\nseries_turns_ratio = 0.002"
    return _BASE.format(name=f"Kestrel workshop test {conn}", conn=conn, compound=compound, duty=duty,
                        field=field, curve=curve, load=load)


def write_machine(dir_path: Path, stem: str, text: str) -> Path:
    path = Path(dir_path) / f"{stem}.toml"
    tomllib.loads(text)  # fail here, not in the loader, if the template is broken
    path.write_text(text, encoding="utf-8")
    return path


def load_plant(path: Path, overrides=(), converter_path: Path | None = None):
    from host.config import load
    from host.params import pack

    mcfg = load("machine", path, list(overrides))
    ccfg = load("converter", converter_path) if converter_path else None
    return pack(mcfg, ccfg)


def kernel_state(plant, m: Machine, s):
    """Kernel state vector for natural state s = [ia, ish, w, T] (line and field loop currents)."""
    from rtmodel import layout as L

    x = plant.new_state()
    ia, ish, w, temp = s
    x[L.X_I_LINE_A] = ia + ish if m.conn in SHUNT_TYPES else ia
    x[L.X_I_FIELD_A] = ish if m.conn != SERIES else 0.0
    x[L.X_SPEED_RAD_S] = w
    x[L.X_TEMP_ARM_C] = temp
    return x


def kernel_inputs(plant, inp: Inputs):
    from rtmodel import layout as L

    u = plant.new_inputs()
    u[L.U_VT_V] = inp.vs_V
    u[L.U_CONTACTOR] = 1.0 if inp.contactor else 0.0
    u[L.U_LOAD_OHM] = inp.load_ohm
    u[L.U_FIELD_V] = inp.field_V
    u[L.U_LOAD_TORQUE_NM] = inp.load_torque_Nm
    u[L.U_PRIME_SPEED_RAD_S] = inp.prime_rad_s
    u[L.U_COUPLING_BROKEN] = 0.0 if inp.coupling_ok else 1.0
    u[L.U_LOCKED_ROTOR] = 1.0 if inp.locked else 0.0
    return u


def run_kernel(kernel, plant, x, segments, t_end_s: float, sample_s: float, u_hook=None):
    """Run the compiled kernel over [(t_start, Inputs), ...]; one call per sample.

    Returns (t, Y) with Y[k] the outputs at t[k] (row 0: the initial state, zero steps).
    The source resistance of a segment must equal the plant's (it is a parameter).
    """
    from rtmodel import layout as L

    dt = plant.dt_s
    n_sub = int(round(sample_s / dt))
    n = int(round(t_end_s / (n_sub * dt)))
    Y = np.zeros((n + 1, L.N_OUTPUT))
    starts = [round(seg[0] / (n_sub * dt)) for seg in segments]
    k_seg = 0
    u = kernel_inputs(plant, segments[0][1])
    if u_hook:
        u_hook(u, segments[0][1])
    kernel(x, plant.p, u, Y[0], 0)
    for k in range(n):
        while k_seg + 1 < len(segments) and k >= starts[k_seg + 1]:
            k_seg += 1
            u = kernel_inputs(plant, segments[k_seg][1])
            if u_hook:
                u_hook(u, segments[k_seg][1])
        kernel(x, plant.p, u, Y[k + 1], n_sub)
    t = np.arange(n + 1) * n_sub * dt
    return t, Y


def open_circuit_field_A(m: Machine, w: float, temp_c: float, hi_A: float | None = None) -> float:
    """Self-excited open-circuit equilibrium field current (built-up point) at speed w.

    The line current is zero, so the field current also flows through the armature; the root
    of dish/dt along ia = -ish is found by bracketing (scipy brentq).
    """
    from scipy.optimize import brentq

    if m.conn not in SHUNT_TYPES:
        raise ValueError("self excitation needs a shunt field")
    inp = Inputs(contactor=False, prime_rad_s=w)
    m_pm = replace(m, load="prime_mover")

    def dish(i):
        return derivatives(m_pm, [-i, i, w, temp_c], inp)[1]

    hi = hi_A if hi_A is not None else 4.0 * m.curve.i[-1]
    lo = 0.3 * m.curve.i[1]
    return brentq(dish, lo, hi, xtol=1e-12, rtol=1e-13)
