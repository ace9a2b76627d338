"""The step kernel: DC machine in every connection, its supply, mechanics and thermal model.

Owns the one body of equations, the frame kernel f(x, p, u, y, n_sub), and its builds:
`step_frame` (generic: connection, supply, field supply and load read from p at run time) and
`kernel_for(p)` (specialised: those four codes compile-time constants, so numba drops every
other case's code and LLVM folds the connection's 0/1 coefficients; same results to rounding).
Everything else here is inlined into the kernel (by numba, or for the tiny _cm by LLVM). Must
never import host or do I/O; it allocates nothing (so it is compiled without numba's reference
counting, _nrt=False) and never raises: abnormal conditions set ST_* bits in y[Y_STATUS].

Electrical model (motor convention: i_line flows into the + terminal, power in = vt * i_line)
--------------------------------------------------------------------------------------------
Two loop currents are states: i1 = i_line (through the terminals) and i2 = shunt/separate field
winding current. Each winding current is a fixed combination of them (table in _connection):

    armature      ia  = ca1 i1 + ca2 i2     v_arm = E + Ra ia + La dia/dt + Vb(ia)
    series field  ise = cs1 i1 + cs2 i2     v_se  = Rse ise + Lse dise/dt + ks dlam/dt
    shunt field   ish = ch1 i1 + ch2 i2     v_sh  = (Rf + Rrheo) ish + Lfl dish/dt + kh dlam/dt

with net excitation i_m = kh ish + ks ise (ks = +/- series-to-shunt turns ratio for compound
machines, 1 for a series machine whose curve is in series amperes), dlam/dt = L_m(i_m) di_m/dt,
L_m following the magnetization-curve slope, and E = E_curve(i_m - i_reaction) * w / w_curve.
KVL of loop 1 (terminal path) and loop 2 (field loop) gives a 2x2 linear system
M(i) [di1, di2] = rhs, solved exactly each stage. The terminal network is a Thevenin source
(vth, rth, lth) - an ideal or resistive DC source, a resistive load, or the conducting bridge -,
an open circuit (i1 held at zero), or a forced current (ideal current source).

Bridge: three-phase fully controlled 6-pulse bridge, thyristors T1..T6 in firing order. The
mains line currents into the bridge are states; a phase connects to the + rail (upper thyristor
on), the - rail (lower on) or neither. With kp phases on + and kn on -, and
U+ = mean over + phases of (v_x - Rs i_x), U- likewise, the bridge is seen from the DC side as
vth = U+ - U-, lth = Ls (1/kp + 1/kn); each conducting phase then follows
di_x/dt = (v_x - Rs i_x - v_rail) / Ls. Overlap, discontinuous conduction and commutation
failure follow from this circuit and the thyristor rules (turn on when gated and forward
biased, turn off when the current reaches zero, re-conduct if forward biased again within the
turn-off time t_q).

Integration: Heun's method (explicit trapezoidal, 2nd order) with the conduction pattern frozen
within a step. Why: every shipped machine's fastest electrical time constant is hundreds of
steps long at the default 20 us step, so an A-stable implicit method buys nothing; a 2nd-order
method keeps the error below 0.1 % of rated where forward Euler would need a ten times smaller
step; and switching instants (firing, current zero) limit any method to first order at the
step where they fall, so RK4's extra stages would be wasted. Stability needs dt < 2 tau_min;
`dcrig check` prints tau_min and the step limits.

Switching events inside a step: a firing instant is taken in the step whose midpoint passes
it (never early or late on average); when an overlap ends inside a step, the rest of that
step gets the new circuit's DC-current slope and the new circuit's terminal voltage (first
order, the same sub-step for both, so the step's mean voltage and input power obey the
armature KVL with its current and do not sag in proportion to the step). When the DC current
reaches zero inside a step, the step is flagged ST_DISCONTINUOUS (a gap shorter than a step
never shows at a step start), and its mean voltage and power are those of the conducting part
up to the zero, then the open-circuit voltage with no current. Passive torques (Coulomb friction, a passive constant
load) are applied after each stage by _passive: they stop the shaft and hold it, exactly.
The armature temperature takes one Euler step per call on the call's mean copper loss.
"""

import math

from numba import njit

from .layout import (
    CONN_LONG_SHUNT,
    CONN_SEPARATE,
    CONN_SERIES,
    CONN_SHORT_SHUNT,
    CONN_SHUNT,
    FIELD_SUPPLY_AVERAGED,
    FIELD_SUPPLY_DC,
    FIELD_SUPPLY_HALF_BRIDGE,
    LOAD_CONSTANT,
    LOAD_OVERHAULING,
    LOAD_PRIME_MOVER,
    LOAD_PROPORTIONAL,
    LOAD_QUADRATIC,
    P_ALPHA_MAX_RAD,
    P_ALPHA_MIN_RAD,
    P_BRUSH_DROP_V,
    P_BRUSH_INV_KNEE,
    P_COMPOUND_SIGN,
    P_CONNECTION,
    P_COULOMB_NM,
    P_DC_SOURCE_OHM,
    P_DEADTIME_S,
    P_DT_S,
    P_ENCODER_PPR,
    P_FIELD_ALPHA_MIN_RAD,
    P_FIELD_SIGN,
    P_FIELD_SUPPLY_KIND,
    P_FIELD_VAC_V,
    P_GATE_PULSE_RAD,
    P_ISRC_TAU_S,
    P_J_KGM2,
    P_J_LOAD_KGM2,
    P_LA_H,
    P_LF_LEAK_H,
    P_LM0_H,
    P_LOAD_KIND,
    P_LS_H,
    P_LSE_LEAK_H,
    P_MAG_INV_SLOPE0,
    P_MAG_INV_SPEED,
    P_MAINS_HZ,
    P_MAINS_VLL_V,
    P_RA_OHM,
    P_RATED_IA_A,
    P_RATED_SPEED_RAD_S,
    P_RF_OHM,
    P_RHEO_OHM,
    P_RS_OHM,
    P_SE_SHORT_CLOSE_RAD_S,
    P_SE_SHORT_OPEN_RAD_S,
    P_RSE_OHM,
    P_SE_TURNS_RATIO,
    P_SUPPLY_KIND,
    P_TACHO_V_PER_RPM,
    P_TEMP_AMBIENT_C,
    P_TEMP_FIELD_C,
    P_TEMP_REF_C,
    P_THERMAL_FROZEN,
    P_THERMAL_RISE_K,
    P_THERMAL_TAU_S,
    P_TURN_OFF_S,
    P_VISCOUS_NM_S,
    ST_ARMATURE_SHORT,
    ST_BRIDGE_SHORT,
    ST_LEG_OVERLAP,
    ST_COMMUTATION_FAILURE,
    ST_CONTACTOR_BREAK_UNDER_LOAD,
    ST_DEADTIME_VIOLATION,
    ST_DISCONTINUOUS,
    ST_FIELD_OPEN,
    ST_NONFINITE,
    SUPPLY_AVERAGED,
    SUPPLY_BRIDGE,
    SUPPLY_CURRENT,
    SUPPLY_DUAL_BRIDGE,
    U_ALPHA_DEG,
    U_ARMATURE_SHORT,
    U_BRIDGE_SELECT,
    U_CONTACTOR,
    U_COUPLING_BROKEN,
    U_FIELD_ALPHA_DEG,
    U_FIELD_OPEN,
    U_FIELD_V,
    U_FUSE_BLOWN_MASK,
    U_IREF_A,
    U_LOAD_OHM,
    U_LOAD_TORQUE_NM,
    U_LOCKED_ROTOR,
    U_MAINS_HZ_DEV,
    U_MAINS_PU,
    U_MISFIRE_MASK,
    U_PHASE_LOST,
    U_PHASE_REVERSED,
    U_PRIME_SPEED_RAD_S,
    U_PULSES_BLOCKED,
    U_SHORT_MASK,
    U_VT_V,
    X_ANGLE_RAD,
    X_AVG_VOLTAGE_V,
    X_BRIDGE_ACTIVE,
    X_FIELD_CONV_ON,
    X_FIELD_FIRE_AT,
    X_I_FIELD_A,
    X_I_LINE_A,
    X_LAST_FIRED_LOW,
    X_LAST_FIRED_UP,
    X_LATCHED_ALPHA_RAD,
    X_MAINS_ANGLE_RAD,
    X_PH_I0,
    X_PULSE_T_S,
    X_PULSE_VAVG_V,
    X_PULSE_VINT,
    X_SPEED_RAD_S,
    X_TEMP_ARM_C,
    X_THY_FIRE_AT0,
    X_THY_GATE0,
    X_THY_OFF_S0,
    X_THY_ON0,
    X_TIME_S,
    X_SE_SHORTED,
    X_VT_V,
    X_ZERO_CURRENT_S,
    Y_ANGLE_RAD,
    Y_CONDUCTING_MASK,
    Y_EMF_V,
    Y_ENCODER_COUNT,
    Y_FIELD_VT_V,
    Y_FIRED_MASK,
    Y_FLUX_VS,
    Y_I_LINE_A,
    Y_IA_A,
    Y_IA_MEAN_A,
    Y_IA_PEAK_A,
    Y_IF_A,
    Y_IMMF_A,
    Y_INPUT_POWER_W,
    Y_ISE_A,
    Y_LAST_FIRE_ANGLE_DEG,
    Y_LINE_IA_A,
    Y_LINE_IB_A,
    Y_LINE_IC_A,
    Y_LOAD_TORQUE_NM,
    Y_MAINS_ANGLE_RAD,
    Y_SHAFT_POWER_W,
    Y_SPEED_RAD_S,
    Y_SPEED_RPM,
    Y_STATUS,
    Y_TACHO_V,
    Y_TEMP_ARM_C,
    Y_TIME_S,
    Y_SE_SHORTED,
    Y_TORQUE_MEAN_NM,
    Y_TORQUE_NM,
    Y_VT_MEAN_V,
    Y_VT_PULSE_MEAN_V,
    Y_VT_V,
)
from .magnetization import curve_emf, reaction_field_A

TWO_PI = 2.0 * math.pi
PI_6 = math.pi / 6.0
PI_3 = math.pi / 3.0
SQRT2 = math.sqrt(2.0)
SQRT3 = math.sqrt(3.0)
COPPER_K = 235.0  # IEC 60034-1 copper temperature constant (degC)

TERM_THEVENIN = 0
TERM_OPEN = 1
TERM_FORCED = 2

# thyristor k: phase and group (see layout.THY_PHASE / THY_UPPER); repeated as literals because
# numba folds literal tuples into constants
_THY_PHASE = (0, 2, 1, 0, 2, 1)
_THY_UPPER = (1, 0, 1, 0, 1, 0)
_UPPER_OF_PHASE = (0, 2, 4)
_INV_COUNT = (0.0, 1.0, 0.5, 1.0 / 3.0)  # 1/k for k conducting phases on a rail, 0 for none  # thyristor index of the upper device of phase a, b, c
_LOWER_OF_PHASE = (3, 5, 1)


@njit(cache=True, inline="always")
def _connection(conn, ratio, sign, kh):
    """Winding-current coefficients and loop incidences of a connection.

    kh is +1, or -1 for a shunt/separate field connected the other way round (its ampere-turns
    then oppose those of the same current in the normal connection).
    Returns (ca1, ca2, cs1, cs2, ch1, ch2, a1a, a1s, a1h, a2a, a2s, a2h, ks, kh, has_loop2).
    """
    if conn == CONN_SEPARATE:
        return 1.0, 0.0, 0.0, 0.0, 0.0, 1.0, 1.0, 0.0, 0.0, 0.0, 0.0, 1.0, 0.0, kh, True
    if conn == CONN_SHUNT:
        return 1.0, -1.0, 0.0, 0.0, 0.0, 1.0, 1.0, 0.0, 0.0, -1.0, 0.0, 1.0, 0.0, kh, True
    if conn == CONN_SERIES:
        return 1.0, 0.0, 1.0, 0.0, 0.0, 0.0, 1.0, 1.0, 0.0, 0.0, 0.0, 0.0, 1.0, 0.0, False
    ks = ratio * sign
    if conn == CONN_LONG_SHUNT:
        return 1.0, -1.0, 1.0, -1.0, 0.0, 1.0, 1.0, 1.0, 0.0, -1.0, -1.0, 1.0, ks, kh, True
    # CONN_SHORT_SHUNT
    return 1.0, -1.0, 1.0, 0.0, 0.0, 1.0, 1.0, 1.0, 0.0, -1.0, 0.0, 1.0, ks, kh, True


@njit(cache=True)
def _cm(c, v):
    """v * c for a connection coefficient c that is 0 in some connections.

    Gives -0.0 (not v * 0.0) when c is 0: x + -0.0 is x in IEEE arithmetic, so a build with
    the connection as a constant drops the term and everything that only fed it, where
    v * 0.0 must be kept (it is NaN for an infinite v). Only the sign of a zero differs.
    """
    return v * c if c != 0.0 else -0.0


@njit(cache=True, inline="always")
def _copper_ohm(r_ref, temp_c, temp_ref_c):
    # IEC 60034-1 resistance/temperature relation for copper
    return r_ref * (COPPER_K + temp_c) / (COPPER_K + temp_ref_c)


@njit(cache=True, inline="always")
def _machine(p, cc, i1, i2, w, ra, rse, rsh, term, vth, rth, lth, di1_forced, vsrc2, loop2_on, seg):
    """Loop-current derivatives and algebraic quantities of the machine circuit.

    seg: the magnetization segment to try first (the one the last evaluation used).
    Returns (di1, di2, vt, ia, ise, immf, emf, kphi, te, vfield, seg).
    """
    ca1, ca2, cs1, cs2, ch1, ch2, a1a, a1s, a1h, a2a, a2s, a2h, ks, kh, has2 = cc
    ia = _cm(ca1, i1) + _cm(ca2, i2)
    ise = _cm(cs1, i1) + _cm(cs2, i2)
    ish = _cm(ch1, i1) + _cm(ch2, i2)
    immf = _cm(kh, ish) + _cm(ks, ise)
    iar = reaction_field_A(p, ia)
    if immf >= 0.0:
        ieff = immf - iar
        if ieff < 0.0:
            ieff = 0.0
    else:
        ieff = immf + iar
        if ieff > 0.0:
            ieff = 0.0
    e_c, de, seg = curve_emf(p, ieff, seg)
    kphi = e_c * p[P_MAG_INV_SPEED]
    emf = kphi * w
    lm = p[P_LM0_H] * de * p[P_MAG_INV_SLOPE0]
    xb = ia * p[P_BRUSH_INV_KNEE]
    if xb > 1.0:
        xb = 1.0
    elif xb < -1.0:
        xb = -1.0
    vbr = p[P_BRUSH_DROP_V] * xb
    la = p[P_LA_H]
    lse = p[P_LSE_LEAK_H]
    lsh = p[P_LF_LEAK_H]
    # the connection's coefficients through _cm, so that a specialised build keeps only the
    # terms its connection has
    m1 = _cm(ch1, kh) + _cm(cs1, ks)
    m2 = _cm(ch2, kh) + _cm(cs2, ks)
    # static part and derivative coefficients of each element voltage
    sa = ra * ia + emf + vbr
    ss = rse * ise
    sh = rsh * ish
    aa1 = _cm(ca1, la)
    aa2 = _cm(ca2, la)
    as1 = _cm(cs1, lse) + _cm(m1, _cm(ks, lm))
    as2 = _cm(cs2, lse) + _cm(m2, _cm(ks, lm))
    ah1 = _cm(ch1, lsh) + _cm(m1, _cm(kh, lm))
    ah2 = _cm(ch2, lsh) + _cm(m2, _cm(kh, lm))
    r11 = _cm(a1a, aa1) + _cm(a1s, as1) + _cm(a1h, ah1)
    r12 = _cm(a1a, aa2) + _cm(a1s, as2) + _cm(a1h, ah2)
    s1 = _cm(a1a, sa) + _cm(a1s, ss) + _cm(a1h, sh)
    # loop 1 row
    if term == TERM_THEVENIN:
        m11 = r11 + lth
        m12 = r12
        b1 = vth - rth * i1 - s1
    elif term == TERM_OPEN:
        m11 = 1.0
        m12 = 0.0
        b1 = 0.0
    else:
        m11 = 1.0
        m12 = 0.0
        b1 = di1_forced
    # loop 2 row
    if has2 and loop2_on:
        m21 = _cm(a2a, aa1) + _cm(a2s, as1) + _cm(a2h, ah1)
        m22 = _cm(a2a, aa2) + _cm(a2s, as2) + _cm(a2h, ah2)
        b2 = vsrc2 - (_cm(a2a, sa) + _cm(a2s, ss) + _cm(a2h, sh))
    else:
        m21 = 0.0
        m22 = 1.0
        b2 = 0.0
    det = m11 * m22 - m12 * m21
    inv_det = 1.0 / det
    # (x - c v written x + v (-c): the same number, and x + -0.0 folds where x - 0.0 * v cannot)
    di1 = (b1 * m22 + _cm(-m12, b2)) * inv_det
    di2 = (m11 * b2 + _cm(-m21, b1)) * inv_det
    vt = s1 + _cm(r11, di1) + _cm(r12, di2)
    vfield = sh + _cm(ah1, di1) + _cm(ah2, di2)
    te = kphi * ia
    return di1, di2, vt, ia, ise, immf, emf, kphi, te, vfield, seg


@njit(cache=True, _nrt=False)
def _machine_call(p, cc, i1, i2, w, ra, rse, rsh, term, vth, rth, lth, di1_forced, vsrc2, loop2_on, seg):
    """_machine as a called function, for the evaluations outside the step's two stages (the
    frame end, a current zero, an overlap end): one compiled copy for all of them, where each
    inlined copy costs seconds of compile time."""
    return _machine(p, cc, i1, i2, w, ra, rse, rsh, term, vth, rth, lth, di1_forced, vsrc2, loop2_on, seg)


@njit(cache=True, inline="always")
def _wrap(a):
    return a - TWO_PI * math.floor(a / TWO_PI)


@njit(cache=True, inline="always")
def _phase_volts(vpk, s, c, reversed_seq):
    """Phase voltages a, b, c for phase-a angle with sin s and cos c."""
    va = vpk * s
    # sin(theta -/+ 120 deg) by rotation
    vm = vpk * (-0.5 * s - 0.8660254037844386 * c)
    vp = vpk * (-0.5 * s + 0.8660254037844386 * c)
    if reversed_seq:
        return va, vp, vm
    return va, vm, vp


@njit(cache=True, inline="always")
def _bridge_thevenin(rail0, rail1, rail2, v0, v1, v2, i0, i1_, i2_, rs):
    """Mean source-side rail voltages of the conducting phases: (U+, U-, kp, kn)."""
    up = 0.0
    un = 0.0
    kp = 0
    kn = 0
    if rail0 > 0:
        up += v0 - rs * i0
        kp += 1
    elif rail0 < 0:
        un += v0 - rs * i0
        kn += 1
    if rail1 > 0:
        up += v1 - rs * i1_
        kp += 1
    elif rail1 < 0:
        un += v1 - rs * i1_
        kn += 1
    if rail2 > 0:
        up += v2 - rs * i2_
        kp += 1
    elif rail2 < 0:
        un += v2 - rs * i2_
        kn += 1
    up *= _INV_COUNT[kp]  # 1/kp by table (0 for an empty rail): no division per evaluation
    un *= _INV_COUNT[kn]
    return up, un, kp, kn


@njit(cache=True, inline="always")
def _sign(v):
    return 1.0 if v > 0.0 else (-1.0 if v < 0.0 else 0.0)


@njit(cache=True, inline="always")
def _load_torque(kind, t_set, w, w_rated):
    """Load torques that are smooth in speed (the passive constant load is handled apart)."""
    if kind == LOAD_PROPORTIONAL:
        return t_set * w / w_rated
    if kind == LOAD_QUADRATIC:
        return t_set * w * abs(w) / (w_rated * w_rated)
    if kind == LOAD_OVERHAULING:
        return t_set
    return 0.0


@njit(cache=True, inline="always")
def _passive(w0, w_free, dv):
    """Speed after a step under passive (Coulomb-type) torques worth dv = dt*T/J.

    A passive torque opposes motion and never reverses it: the shaft slows by dv in its
    direction of motion, stops if that would carry it through zero, and stays at rest while
    the free (active) change is within dv (break-away at the Coulomb torque). Exact for a
    constant passive torque, and free of the stiffness a smoothed sign function brings.
    """
    if dv <= 0.0:
        return w_free
    if w0 > 0.0 or (w0 == 0.0 and w_free > dv):
        w = w_free - dv
        return w if w > 0.0 else 0.0
    if w0 < 0.0 or (w0 == 0.0 and w_free < -dv):
        w = w_free + dv
        return w if w < 0.0 else 0.0
    return 0.0


@njit(cache=True, inline="always")
def _zero_fraction(i_start, i_end, f_phase):
    """Fraction of a step at which a current that changed sign (or was cut at a device's
    current zero, fraction f_phase) reached zero, taking it linear over the step."""
    if i_start * i_end < 0.0:
        return i_start / (i_start - i_end)
    return f_phase


BR_NONE = 0  # no bridge currents to integrate
BR_FEEDS = 1  # the conducting bridge feeds the machine
BR_DC_SHORT = 2  # the bridge output is shorted (armature flashover): its own loop
BR_LOOP = 3  # no DC path, but two devices of one group form a line-to-line loop


@njit(cache=True, inline="always")
def _stage(p, cc, i1, i2, w, pa, pb, pc, va, vb, vc, ra, rse, rsh, term, vth, rth, lth, di1_forced,
           vsrc2, loop2_on, br, mech, seg):
    """One evaluation of all derivatives: machine loops, bridge line currents, shaft.

    br = (bmode, pol, rail0, rail1, rail2, rs, ls); mech = (speed_imposed, load_kind, t_set,
    w_rated, j_total). Grouped because a call with more than 30 arguments compiles to a
    star-args call, which numba cannot inline.

    Returns (di1, di2, dia_line, dib_line, dic_line, dw, vt, ia, ise, immf, emf, kphi, te,
    vfield, t_load, vth, seg); vth is the Thevenin voltage used (the bridge's when it feeds),
    seg the magnetization segment (see _machine).
    Passive torques are not in dw: the caller applies them with _passive.
    """
    bmode, pol, rail0, rail1, rail2, rs, ls, inv_ls = br
    speed_imposed, load_kind, t_set, w_rated, inv_j = mech
    up_ = 0.0
    un_ = 0.0
    kp = 0
    kn = 0
    if bmode != BR_NONE:
        up_, un_, kp, kn = _bridge_thevenin(rail0, rail1, rail2, va, vb, vc, pa, pb, pc, rs)
        if bmode == BR_FEEDS:
            vth = pol * (up_ - un_)
    d1, d2, vt, ia, ise, immf, emf, kphi, te, vfield, seg = _machine(
        p, cc, i1, i2, w, ra, rse, rsh, term, vth, rth, lth, di1_forced, vsrc2, loop2_on, seg
    )
    dpa = 0.0
    dpb = 0.0
    dpc = 0.0
    if bmode != BR_NONE:
        if bmode == BR_LOOP:
            did = 0.0
        elif bmode == BR_DC_SHORT:
            did = (up_ - un_) * inv_ls / (_INV_COUNT[kp] + _INV_COUNT[kn])
        else:
            did = pol * d1
        vpr = up_ - ls * _INV_COUNT[kp] * did
        vnr = un_ + ls * _INV_COUNT[kn] * did
        if rail0 != 0:
            dpa = (va - rs * pa - (vpr if rail0 > 0 else vnr)) * inv_ls
        if rail1 != 0:
            dpb = (vb - rs * pb - (vpr if rail1 > 0 else vnr)) * inv_ls
        if rail2 != 0:
            dpc = (vc - rs * pc - (vpr if rail2 > 0 else vnr)) * inv_ls
    tf = p[P_VISCOUS_NM_S] * w
    if speed_imposed:
        dw = 0.0
        tl = te - tf - p[P_COULOMB_NM] * _sign(w)
    else:
        tl = _load_torque(load_kind, t_set, w, w_rated)
        dw = (te - tf - tl) * inv_j
    return d1, d2, dpa, dpb, dpc, dw, vt, ia, ise, immf, emf, kphi, te, vfield, tl, vth, seg


def _build(codes):
    """Compile-on-first-call dispatcher of the frame kernel, generic (codes None) or specialised.

    codes = (connection, supply kind, field supply kind, load kind) makes those four
    compile-time constants of the build: one statement of the physics (the body below), many
    builds. numba's cache keys a closure on the values of its free variables, so every build
    has its own cache entry in the same index file.
    """
    SPECIALISED = codes is not None
    CONN, SUPPLY, FIELD, LOAD = codes if SPECIALISED else (-1, -1, -1, -1)
    IS_BRIDGE = SUPPLY == SUPPLY_BRIDGE or SUPPLY == SUPPLY_DUAL_BRIDGE
    IS_AVERAGED = SUPPLY == SUPPLY_AVERAGED

    @njit(cache=True, _nrt=False)
    def step_frame(x, p, u, y, n_sub):
        """Advance the model n_sub fixed steps of p[P_DT_S] and write the outputs.

        Parameters
        ----------
        x : float64[N_STATE]   state, updated in place
        p : float64[N_PARAM]   packed parameters (host.params.pack)
        u : float64[N_INPUT]   inputs, held constant over the call
        y : float64[N_OUTPUT]  outputs, overwritten: end-of-frame values, frame means, OR-ed flags
        n_sub : int            number of steps

        Returns the status bits (also in y[Y_STATUS]).
        """
        dt = p[P_DT_S]
        # the codes in use: compile-time constants in a specialised build (numba then drops the
        # code of every other connection, supply, field supply and load before it compiles), read
        # from p in the generic one
        if SPECIALISED:
            conn = CONN
            supply = SUPPLY
            is_bridge = IS_BRIDGE
            is_avg = IS_AVERAGED
            load_kind = LOAD
            field_kind = FIELD
        else:
            conn = int(p[P_CONNECTION])
            supply = int(p[P_SUPPLY_KIND])
            is_bridge = supply == SUPPLY_BRIDGE or supply == SUPPLY_DUAL_BRIDGE
            is_avg = supply == SUPPLY_AVERAGED
            load_kind = int(p[P_LOAD_KIND])
            field_kind = int(p[P_FIELD_SUPPLY_KIND])
        # compound machines: the series-field shorting contactor of the start, worked by a speed
        # relay once per frame (a real relay takes tens of ms, a frame a few). While it is closed
        # the line current bypasses the series field (its resistance and inductance leave the
        # circuit) and the machine is a shunt machine; the series field's flux is taken to
        # follow at once (its ampere-turns are a few per cent of the shunt field's)
        se_shorted = False
        if (conn == CONN_LONG_SHUNT or conn == CONN_SHORT_SHUNT) and p[P_SE_SHORT_OPEN_RAD_S] > 0.0:
            w_abs = abs(x[X_SPEED_RAD_S])
            if x[X_SE_SHORTED] > 0.5:
                if w_abs > p[P_SE_SHORT_OPEN_RAD_S]:
                    x[X_SE_SHORTED] = 0.0
            elif w_abs < p[P_SE_SHORT_CLOSE_RAD_S]:
                x[X_SE_SHORTED] = 1.0
            se_shorted = x[X_SE_SHORTED] > 0.5
        if se_shorted:
            cc = _connection(CONN_SHUNT, p[P_SE_TURNS_RATIO], p[P_COMPOUND_SIGN], p[P_FIELD_SIGN])
        else:
            cc = _connection(conn, p[P_SE_TURNS_RATIO], p[P_COMPOUND_SIGN], p[P_FIELD_SIGN])

        # ---- inputs, held for the frame
        contactor = u[U_CONTACTOR] > 0.5
        field_open = u[U_FIELD_OPEN] > 0.5
        arm_short = u[U_ARMATURE_SHORT] > 0.5
        locked = u[U_LOCKED_ROTOR] > 0.5
        coupling_ok = u[U_COUPLING_BROKEN] < 0.5
        phase_lost = int(u[U_PHASE_LOST])
        fuse_mask = int(u[U_FUSE_BLOWN_MASK])
        misfire_mask = int(u[U_MISFIRE_MASK])
        short_mask = int(u[U_SHORT_MASK])
        if is_bridge:
            short_mask = short_mask & 63
        else:
            short_mask = 0
        open_mask = fuse_mask & 7
        if 1 <= phase_lost <= 3:
            open_mask |= 1 << (phase_lost - 1)
        rev_seq = u[U_PHASE_REVERSED] > 0.5
        select = int(u[U_BRIDGE_SELECT])
        if supply == SUPPLY_BRIDGE and select == 2:
            select = 0  # a single bridge has no reverse group
        blocked = u[U_PULSES_BLOCKED] > 0.5 or select == 0 or not contactor
        alpha_cmd = u[U_ALPHA_DEG] * (math.pi / 180.0)
        if alpha_cmd < p[P_ALPHA_MIN_RAD]:
            alpha_cmd = p[P_ALPHA_MIN_RAD]
        elif alpha_cmd > p[P_ALPHA_MAX_RAD]:
            alpha_cmd = p[P_ALPHA_MAX_RAD]
        f_mains = p[P_MAINS_HZ] + u[U_MAINS_HZ_DEV]
        w_mains = TWO_PI * f_mains
        dtheta = w_mains * dt
        vpk = p[P_MAINS_VLL_V] / SQRT3 * SQRT2 * u[U_MAINS_PU]
        rs = p[P_RS_OHM]
        ls = p[P_LS_H]
        # rotation by dtheta, to get the voltages at the end of a step without calling sin/cos
        cr = math.cos(dtheta)
        sr = math.sin(dtheta)
        th = x[X_MAINS_ANGLE_RAD]
        s0 = math.sin(th)
        c0 = math.cos(th)
        # field supply
        field_ac_dead = (open_mask & 3) != 0  # field transformer fed from lines a-b
        field_alpha = u[U_FIELD_ALPHA_DEG] * (math.pi / 180.0)
        if field_alpha < p[P_FIELD_ALPHA_MIN_RAD]:
            field_alpha = p[P_FIELD_ALPHA_MIN_RAD]
        elif field_alpha > math.pi:
            field_alpha = math.pi
        field_phase_shift = math.pi / 6.0
        if rev_seq:
            field_phase_shift = -math.pi / 6.0
        # resistances held for the frame (temperature moves over seconds, frames last ms)
        t_ref = p[P_TEMP_REF_C]
        t_field = p[P_TEMP_FIELD_C]
        rse = _copper_ohm(p[P_RSE_OHM], t_field, t_ref)
        rsh = _copper_ohm(p[P_RF_OHM], t_field, t_ref) + p[P_RHEO_OHM]
        j_total = p[P_J_KGM2]
        if coupling_ok:
            j_total += p[P_J_LOAD_KGM2]
        t_passive = p[P_COULOMB_NM]
        w_rated = p[P_RATED_SPEED_RAD_S]
        t_set = u[U_LOAD_TORQUE_NM]
        if not coupling_ok:
            t_set = 0.0
        if load_kind == LOAD_CONSTANT:
            t_set = abs(t_set)
            t_passive += t_set
        speed_imposed = locked or (load_kind == LOAD_PRIME_MOVER and coupling_ok)
        w_imposed = 0.0
        if not locked:
            w_imposed = u[U_PRIME_SPEED_RAD_S]
        i_rated = p[P_RATED_IA_A]
        loss_rated = i_rated * i_rated * (COPPER_K + p[P_TEMP_AMBIENT_C] + p[P_THERMAL_RISE_K])
        frozen = p[P_THERMAL_FROZEN] > 0.5
        tq = p[P_TURN_OFF_S]
        pol = 1.0
        if int(x[X_BRIDGE_ACTIVE]) == 2:
            pol = -1.0

        status = 0
        if field_open:
            status |= ST_FIELD_OPEN
        if arm_short:
            status |= ST_ARMATURE_SHORT
        fired_mask = 0
        sum_vt = 0.0
        sum_ia = 0.0
        sum_te = 0.0
        sum_pin = 0.0
        sum_psh = 0.0
        sum_ia2 = 0.0
        peak_ia = 0.0
        sec_prev = math.floor((x[X_MAINS_ANGLE_RAD] - PI_6) / PI_3)
        ia = 0.0
        ise = 0.0
        immf = 0.0
        emf = 0.0
        kphi = 0.0
        te = 0.0
        vfield = 0.0
        vt = x[X_VT_V]
        tl = 0.0
        term = TERM_OPEN
        vth1 = 0.0
        rth = 0.0
        lth = 0.0
        vsrc2_end = 0.0
        loop2_on = not field_open
        # constant within the call (the armature temperature takes its step after the loop):
        # computed once per frame, reciprocals included, so the step multiplies
        ra = _copper_ohm(p[P_RA_OHM], x[X_TEMP_ARM_C], t_ref)
        inv_j = 1.0 / j_total
        dv_passive = dt * t_passive / j_total
        inv_ls = 1.0 / ls if ls > 0.0 else 0.0
        inv_tau_isrc = 1.0 / p[P_ISRC_TAU_S] if p[P_ISRC_TAU_S] > 0.0 else 0.0
        # DC source (and resistive load) as seen from the terminals: constant within the call
        dc_term = TERM_OPEN
        dc_vth = 0.0
        dc_rth = 0.0
        r_load = u[U_LOAD_OHM]
        if contactor:
            r_src = p[P_DC_SOURCE_OHM]
            dc_term = TERM_THEVENIN
            if r_load > 0.0 and r_src > 0.0:
                g = 1.0 / r_src + 1.0 / r_load
                dc_vth = u[U_VT_V] / r_src / g
                dc_rth = 1.0 / g
            else:
                dc_vth = u[U_VT_V]
                dc_rth = r_src
        elif r_load > 0.0:
            dc_term = TERM_THEVENIN
            dc_rth = r_load
        v_field_avg = 0.0
        if not field_ac_dead:
            v_field_avg = SQRT2 / math.pi * p[P_FIELD_VAC_V] * u[U_MAINS_PU] * (1.0 + math.cos(field_alpha))

        # the continuous state lives in locals across the frame and is stored once after it:
        # numba cannot prove that x, p, u and y do not overlap, so a store to x inside the loop
        # would make every later read of p a fresh load (and keeps LLVM from hoisting them)
        st_i1 = x[X_I_LINE_A]
        st_i2 = x[X_I_FIELD_A]
        st_w = x[X_SPEED_RAD_S]
        st_th = x[X_MAINS_ANGLE_RAD]
        st_t = x[X_TIME_S]
        st_pa = x[X_PH_I0]
        st_pb = x[X_PH_I0 + 1]
        st_pc = x[X_PH_I0 + 2]
        st_angle = x[X_ANGLE_RAD]
        st_vint = x[X_PULSE_VINT]
        st_tpulse = x[X_PULSE_T_S]
        st_zero_s = x[X_ZERO_CURRENT_S]
        seg = 0  # magnetization segment of the last evaluation, tried first by the next one
        # the conducting thyristors as a bit mask (bit k: T_k+1), stored back after the loop
        on = 0
        for k in range(6):
            if x[X_THY_ON0 + k] > 0.5:
                on |= 1 << k
        for _ in range(n_sub):
            i1 = st_i1
            i2 = st_i2
            w = st_w
            th0 = st_th
            t_now = st_t
            s1 = s0 * cr + c0 * sr
            c1 = c0 * cr - s0 * sr
            va0, vb0, vc0 = _phase_volts(vpk, s0, c0, rev_seq)
            va1, vb1, vc1 = _phase_volts(vpk, s1, c1, rev_seq)

            # ---------------- converter events at this step (firing, latching, turn-on)
            vth0 = 0.0
            vth1 = 0.0
            rth = 0.0
            lth = 0.0
            term = TERM_OPEN
            di1_forced = 0.0
            pa = st_pa
            pb = st_pb
            pc = st_pc
            rail0 = 0
            rail1 = 0
            rail2 = 0
            bridge_dc_short = False
            short_loop = False
            if is_bridge or is_avg:
                # dual bridge changeover supervision: the selected bridge may only take over
                # after the current has been zero for the dead time
                active = int(x[X_BRIDGE_ACTIVE])
                if select != 0 and select != active and not blocked:
                    if is_bridge:
                        conducting = False
                        for k in range(6):
                            if (on >> k) & 1:
                                conducting = True
                    else:
                        conducting = i1 != 0.0
                    if active != 0 and (conducting or st_zero_s < p[P_DEADTIME_S]):
                        status |= ST_DEADTIME_VIOLATION
                    if not conducting:
                        x[X_BRIDGE_ACTIVE] = select
                        active = select
                        pol = 1.0 if select == 1 else -1.0
                fire_ok = (not blocked) and select == active
                # natural commutation instants (every 60 deg from 30 deg): latch the firing angle
                sec1 = math.floor((th0 + dtheta - PI_6) / PI_3)
                if sec1 > sec_prev:
                    k = int(sec1) % 6
                    nat = PI_6 + sec1 * PI_3
                    if True:
                        # per-pulse mean terminal voltage, and the averaged bridge's next voltage
                        if st_tpulse > 0.0:
                            x[X_PULSE_VAVG_V] = st_vint / st_tpulse
                        st_vint = 0.0
                        st_tpulse = 0.0
                        x[X_LATCHED_ALPHA_RAD] = alpha_cmd
                        if fire_ok:
                            x[X_THY_FIRE_AT0 + k] = nat + alpha_cmd
                        else:
                            x[X_THY_FIRE_AT0 + k] = -1.0
                        if is_avg:
                            a_eff = alpha_cmd
                            if not fire_ok:
                                a_eff = p[P_ALPHA_MAX_RAD]  # pulse suppression at the inverter end
                            if open_mask != 0:
                                vdo = 2.0 * SQRT2 / math.pi * vpk * SQRT3 / SQRT2  # 1-phase bridge
                            else:
                                vdo = 3.0 * SQRT2 / math.pi * vpk * SQRT3 / SQRT2
                            x[X_AVG_VOLTAGE_V] = vdo * math.cos(a_eff)
                sec_prev = sec1
                if is_bridge and not contactor and not arm_short:
                    # the open contactor breaks the DC circuit: the bridge current is zero
                    for k in range(6):
                        if (on >> k) & 1 and not (short_mask >> k) & 1:
                            on &= ~(1 << k)
                            x[X_THY_OFF_S0 + k] = t_now
                    if short_mask == 0:
                        pa = 0.0
                        pb = 0.0
                        pc = 0.0
                if is_bridge:
                    # firing events and gate pulses (double pulsing: T_k and T_k-1 together); a
                    # gate stays on while the mains angle is below its pulse end
                    # a firing instant falls into the step whose midpoint passed it, so firing is
                    # neither early nor late on average (error within half a step either way)
                    th_mid = th0 + 0.5 * dtheta
                    for k in range(6):
                        fa = x[X_THY_FIRE_AT0 + k]
                        if fa >= 0.0 and th_mid >= fa:
                            x[X_THY_FIRE_AT0 + k] = -1.0
                            if fire_ok:
                                fired_mask |= 1 << k
                                km1 = (k + 5) % 6
                                g_end = fa + p[P_GATE_PULSE_RAD]
                                if not (misfire_mask >> k) & 1:
                                    x[X_THY_GATE0 + k] = g_end
                                if not (misfire_mask >> km1) & 1:
                                    if x[X_THY_GATE0 + km1] < g_end:
                                        x[X_THY_GATE0 + km1] = g_end
                    # shorted thyristors conduct regardless of gate
                    for k in range(6):
                        if (short_mask >> k) & 1 and not (open_mask >> _THY_PHASE[k]) & 1:
                            on |= 1 << k
                    # turn-on: gated (or recovering) and forward biased
                    for ph in range(3):
                        ku = _UPPER_OF_PHASE[ph]
                        kl = _LOWER_OF_PHASE[ph]
                        if (on >> ku) & 1:
                            if ph == 0:
                                rail0 = 1
                            elif ph == 1:
                                rail1 = 1
                            else:
                                rail2 = 1
                        elif (on >> kl) & 1:
                            if ph == 0:
                                rail0 = -1
                            elif ph == 1:
                                rail1 = -1
                            else:
                                rail2 = -1
                    up_, un_, kp, kn = _bridge_thevenin(rail0, rail1, rail2, va0, vb0, vc0, pa, pb, pc, rs)
                    conducting = kp > 0 and kn > 0
                    vdc_open = pol * vt
                    if arm_short or not contactor:
                        vdc_open = 0.0
                    if conducting:
                        for k in range(6):
                            if (on >> k) & 1:
                                continue
                            gated = x[X_THY_GATE0 + k] > th0
                            recovering = t_now - x[X_THY_OFF_S0 + k] < tq
                            if not (gated or recovering):
                                continue
                            ph = _THY_PHASE[k]
                            if (open_mask >> ph) & 1:
                                continue
                            vx = va0 if ph == 0 else (vb0 if ph == 1 else vc0)
                            if _THY_UPPER[k] == 1:
                                fwd = vx - up_
                                partner = _LOWER_OF_PHASE[ph]
                            else:
                                fwd = un_ - vx
                                partner = _UPPER_OF_PHASE[ph]
                            if fwd <= 0.0:
                                continue
                            if (on >> partner) & 1:
                                # both devices of one leg: a shorted device makes it a DC-side
                                # short; otherwise the load would freewheel through the leg, which
                                # this model does not represent: it keeps this device off and says so
                                if ((short_mask >> partner) | (short_mask >> k)) & 1:
                                    status |= ST_BRIDGE_SHORT
                                else:
                                    status |= ST_LEG_OVERLAP
                                continue
                            if not gated:
                                status |= ST_COMMUTATION_FAILURE
                            on |= 1 << k
                            if _THY_UPPER[k] == 1:
                                x[X_LAST_FIRED_UP] = k
                            else:
                                x[X_LAST_FIRED_LOW] = k
                    else:
                        # start of conduction from zero current: best gated upper/lower pair
                        best = 0.0
                        bu = -1
                        bl = -1
                        for ku_ in (0, 2, 4):
                            if x[X_THY_GATE0 + ku_] <= th0 and not (on >> ku_) & 1:
                                continue
                            phu = _THY_PHASE[ku_]
                            if (open_mask >> phu) & 1:
                                continue
                            vu = va0 if phu == 0 else (vb0 if phu == 1 else vc0)
                            for kl_ in (1, 3, 5):
                                if x[X_THY_GATE0 + kl_] <= th0 and not (on >> kl_) & 1:
                                    continue
                                phl = _THY_PHASE[kl_]
                                if phl == phu or (open_mask >> phl) & 1:
                                    continue
                                vl = va0 if phl == 0 else (vb0 if phl == 1 else vc0)
                                margin = vu - vl - vdc_open
                                if margin > best:
                                    best = margin
                                    bu = ku_
                                    bl = kl_
                        if bu >= 0 and (contactor or arm_short):
                            for k in range(6):
                                if (short_mask >> k) & 1 == 0:
                                    on &= ~(1 << k)
                            on |= 1 << bu
                            on |= 1 << bl
                            x[X_LAST_FIRED_UP] = bu
                            x[X_LAST_FIRED_LOW] = bl
                    rail0 = 0
                    rail1 = 0
                    rail2 = 0
                    for ph in range(3):
                        r = 0
                        if (on >> _UPPER_OF_PHASE[ph]) & 1:
                            r = 1
                        elif (on >> _LOWER_OF_PHASE[ph]) & 1:
                            r = -1
                        if ph == 0:
                            rail0 = r
                        elif ph == 1:
                            rail1 = r
                        else:
                            rail2 = r
                    up_, un_, kp, kn = _bridge_thevenin(rail0, rail1, rail2, va0, vb0, vc0, pa, pb, pc, rs)
                    # two devices of one group with no DC path (a shorted device and the next one
                    # fired): a line-to-line loop through the commutating inductances
                    short_loop = not (kp > 0 and kn > 0) and (kp >= 2 or kn >= 2)
                    if kp > 0 and kn > 0:
                        if arm_short or not contactor:
                            bridge_dc_short = arm_short
                        else:
                            term = TERM_THEVENIN
                            lth = ls * (1.0 / kp + 1.0 / kn)
                    else:
                        status |= 0 if blocked else ST_DISCONTINUOUS
                else:
                    # averaged bridge: conducts while the current has the bridge's polarity
                    vavg = pol * x[X_AVG_VOLTAGE_V]
                    if contactor and not arm_short and x[X_BRIDGE_ACTIVE] != 0.0:
                        if pol * i1 > 0.0 or pol * (x[X_AVG_VOLTAGE_V]) > pol * vt + 1e-9:
                            term = TERM_THEVENIN
                            vth0 = vavg
                            vth1 = vavg
                            rth = 3.0 / math.pi * w_mains * ls + 2.0 * rs
                            lth = 2.0 * ls
                        elif not blocked:
                            status |= ST_DISCONTINUOUS
            elif supply == SUPPLY_CURRENT:
                if contactor and not arm_short:
                    term = TERM_FORCED
                    di1_forced = (u[U_IREF_A] - i1) * inv_tau_isrc
            else:
                term = dc_term
                vth0 = dc_vth
                rth = dc_rth
                vth1 = vth0
            if arm_short:
                term = TERM_THEVENIN
                vth0 = 0.0
                vth1 = 0.0
                rth = 0.0
                lth = 0.0
            if conn == CONN_SERIES and field_open:
                term = TERM_OPEN
            if term == TERM_OPEN and i1 != 0.0:
                if not contactor and abs(i1) > 1e-3 * i_rated:
                    status |= ST_CONTACTOR_BREAK_UNDER_LOAD
                i1 = 0.0
            loop2_on = not field_open
            if not loop2_on:
                i2 = 0.0

            # field supply voltage (separately excited machines only)
            vsrc2 = 0.0
            vsrc2_end = 0.0
            if conn == CONN_SEPARATE:
                if field_kind == FIELD_SUPPLY_HALF_BRIDGE or field_kind == FIELD_SUPPLY_AVERAGED:
                    thf = th0 + field_phase_shift
                    if field_kind == FIELD_SUPPLY_HALF_BRIDGE:
                        # half-controlled single-phase bridge with freewheeling: output |v_ac|
                        # from firing at alpha to the next zero crossing, else zero
                        secf1 = math.floor((thf + dtheta) / math.pi)
                        if secf1 > math.floor(thf / math.pi):
                            # zero crossing of the field supply: the conducting thyristor
                            # commutates to the freewheel path; schedule this half cycle's firing
                            x[X_FIELD_CONV_ON] = 0.0
                            x[X_FIELD_FIRE_AT] = secf1 * math.pi + field_alpha
                        fa = x[X_FIELD_FIRE_AT]
                        if fa >= 0.0 and thf + dtheta >= fa:
                            x[X_FIELD_CONV_ON] = 1.0
                            x[X_FIELD_FIRE_AT] = -1.0
                        if x[X_FIELD_CONV_ON] > 0.5 and not field_ac_dead:
                            sf0 = math.sin(thf)
                            sf1 = math.sin(thf + dtheta)
                            vfa = SQRT2 * p[P_FIELD_VAC_V] * u[U_MAINS_PU]
                            vsrc2 = vfa * abs(sf0)
                            vsrc2_end = vfa * abs(sf1)
                    else:
                        vsrc2 = v_field_avg
                        vsrc2_end = vsrc2
                else:
                    vsrc2 = u[U_FIELD_V]
                    vsrc2_end = vsrc2

            # ---------------- Heun step, conduction pattern frozen
            feeds = is_bridge and term == TERM_THEVENIN and not arm_short
            bmode = BR_FEEDS if feeds else (BR_DC_SHORT if bridge_dc_short else (BR_LOOP if short_loop else BR_NONE))
            br = (bmode, pol, rail0, rail1, rail2, rs, ls, inv_ls)
            mech = (speed_imposed, load_kind, t_set, w_rated, inv_j)
            # Heun's two stages written out (a loop of two through one call site compiled faster
            # but ran 4-7 % slower; the evaluations outside the stages call _machine_call instead,
            # which pays for the second copy). (ise, immf, emf, kphi, vfield: outputs only, taken
            # from the frame-end evaluation, so they are not kept here and their arithmetic is dropped)
            d1, d2, dpa, dpb, dpc, dw, vt, ia, _ise, _immf, _emf, _kphi, te, _vf, tl, vth0, seg = _stage(
                p, cc, i1, i2, w, pa, pb, pc, va0, vb0, vc0, ra, rse, rsh, term, vth0, rth, lth, di1_forced,
                vsrc2, loop2_on, br, mech, seg,
            )
            vt_start = vt
            # the Euler predictor (passive torques applied to the predicted speed too)
            i1p = i1 + dt * d1
            i2p = i2 + dt * d2
            wp = _passive(w, w + dt * dw, dv_passive)
            if speed_imposed:
                wp = w_imposed
            pap = pa + dt * dpa
            pbp = pb + dt * dpb
            pcp = pc + dt * dpc
            sdf = (u[U_IREF_A] - i1p) * inv_tau_isrc if term == TERM_FORCED else 0.0
            # the corrector's stage at the predicted state and the step's end voltages
            e1, e2, epa, epb, epc, dw2, vt, ia, _ise, _immf, _emf, _kphi, te, _vf, tl, vth1, seg = _stage(
                p, cc, i1p, i2p, wp, pap, pbp, pcp, va1, vb1, vc1, ra, rse, rsh, term, vth1, rth, lth, sdf,
                vsrc2_end, loop2_on, br, mech, seg,
            )
            vt2 = vt
            ia2 = ia
            te2 = te
            tl2 = tl
            h2 = 0.5 * dt
            i1n = i1 + h2 * (d1 + e1)
            i2n = i2 + h2 * (d2 + e2)
            if speed_imposed:
                wn = w_imposed
            else:
                w_free = w + h2 * (dw + dw2)
                wn = _passive(w, w_free, dv_passive)
                if load_kind == LOAD_CONSTANT:
                    # report the passive load's share of what held or slowed the shaft
                    if wn != 0.0:
                        tl2 = t_set * _sign(wn)
                    else:
                        t_act = j_total * (w_free - w) / dt
                        tl2 = t_act * t_set / t_passive if t_passive > 0.0 else 0.0
            st_angle += h2 * (w + wn)
            if locked:
                wn = 0.0
            pan = pa + h2 * (dpa + epa)
            pbn = pb + h2 * (dpb + epb)
            pcn = pc + h2 * (dpc + epc)
            vt = vt2
            ia = ia2
            te = te2
            tl = tl2

            # ---------------- after the step: thyristor turn-off, clamps, bookkeeping
            # what the switching events below change in the step's terminal voltage: dv_rest is
            # added to the step mean when the rest of the step after an overlap end gets the new
            # circuit; f_cond < 1 is the fraction of the step the terminal current flowed before
            # it reached zero inside the step (the rest of the step sits at the open-circuit voltage)
            dv_rest = 0.0
            f_cond = 1.0
            if is_bridge:
                newi = (pan, pbn, pcn)
                kp = 0
                kn = 0
                rails = (rail0, rail1, rail2)
                failed_up = False
                failed_low = False
                f_off = 1.0  # fraction of the step at which the earliest turn-off happened
                oldi = (pa, pb, pc)
                ra_ = 0
                rb_ = 0
                rc_ = 0
                for ph in range(3):
                    r = rails[ph]
                    cur = newi[ph]
                    if r > 0:
                        ku = _UPPER_OF_PHASE[ph]
                        if cur <= 0.0 and not (short_mask >> ku) & 1:
                            on &= ~(1 << ku)
                            x[X_THY_OFF_S0 + ku] = t_now + dt
                            r = 0
                            if oldi[ph] > 0.0:
                                f_off = min(f_off, oldi[ph] / (oldi[ph] - cur))
                            if int(x[X_LAST_FIRED_UP]) == ku:
                                failed_up = True
                    elif r < 0:
                        kl = _LOWER_OF_PHASE[ph]
                        if cur >= 0.0 and not (short_mask >> kl) & 1:
                            on &= ~(1 << kl)
                            x[X_THY_OFF_S0 + kl] = t_now + dt
                            r = 0
                            if oldi[ph] < 0.0:
                                f_off = min(f_off, oldi[ph] / (oldi[ph] - cur))
                            if int(x[X_LAST_FIRED_LOW]) == kl:
                                failed_low = True
                    if r > 0:
                        kp += 1
                    elif r < 0:
                        kn += 1
                    if ph == 0:
                        ra_ = r
                    elif ph == 1:
                        rb_ = r
                    else:
                        rc_ = r
                # the incoming device going out while the outgoing one still conducts in its group
                # is a failed commutation (a current zero of the whole bridge is not)
                if (failed_up and kp > 0) or (failed_low and kn > 0):
                    status |= ST_COMMUTATION_FAILURE
                if ra_ == 0:
                    pan = 0.0
                if rb_ == 0:
                    pbn = 0.0
                if rc_ == 0:
                    pcn = 0.0
                if kp == 0 or kn == 0:
                    # one group emptied: the DC current is zero; devices that are not shorted go
                    # off, and only a loop of two shorted/conducting phases in one group carries on
                    for k in range(6):
                        if (on >> k) & 1 and not (short_mask >> k) & 1:
                            on &= ~(1 << k)
                            x[X_THY_OFF_S0 + k] = t_now + dt
                    n_up = 0
                    n_low = 0
                    for ph in range(3):
                        if (on >> _UPPER_OF_PHASE[ph]) & 1:
                            n_up += 1
                        elif (on >> _LOWER_OF_PHASE[ph]) & 1:
                            n_low += 1
                    if n_up < 2 and n_low < 2:
                        pan = 0.0
                        pbn = 0.0
                        pcn = 0.0
                    else:
                        # keep the loop's KCL exact: the two line currents are equal and opposite
                        if not ((on >> _UPPER_OF_PHASE[0]) | (on >> _LOWER_OF_PHASE[0])) & 1:
                            pan = 0.0
                        if not ((on >> _UPPER_OF_PHASE[1]) | (on >> _LOWER_OF_PHASE[1])) & 1:
                            pbn = 0.0
                        if not ((on >> _UPPER_OF_PHASE[2]) | (on >> _LOWER_OF_PHASE[2])) & 1:
                            pcn = 0.0
                        res = (pan + pbn + pcn) / (n_up + n_low)
                        if pan != 0.0:
                            pan -= res
                        if pbn != 0.0:
                            pbn -= res
                        if pcn != 0.0:
                            pcn -= res
                    x[X_LAST_FIRED_UP] = -1.0
                    x[X_LAST_FIRED_LOW] = -1.0
                    if feeds:
                        if i1 != 0.0:
                            # the DC current reached zero inside this step: discontinuous
                            # conduction even when the next firing falls at the next step's start
                            # (a gap shorter than a step never shows at a step start)
                            if not blocked:
                                status |= ST_DISCONTINUOUS
                            f_cond = _zero_fraction(i1, i1n, f_off)
                        i1n = 0.0
                else:
                    if feeds and f_off < 1.0:
                        # the end of an overlap fell inside the step, which ran to its end with the
                        # overlap circuit: give the rest of the step the new circuit's DC-current
                        # slope (first order), else every commutation lasts half a step too long
                        # on average and the mean voltage sags in proportion to the step
                        # the old circuit (evaluation 0) and the new one (1), through the called
                        # _machine_call (rare: once per commutation; an inlined copy of _machine
                        # costs seconds of compile time)
                        g1 = g2 = vt_o = h1 = h2_ = vt_n = lth_n = vth_n = 0.0
                        for ev in range(2):
                            if ev == 0:
                                q0, q1, q2 = rail0, rail1, rail2
                            else:
                                q0, q1, q2 = ra_, rb_, rc_
                            up_q, un_q, kp_q, kn_q = _bridge_thevenin(q0, q1, q2, va1, vb1, vc1, pan, pbn, pcn, rs)
                            lth_q = ls * (1.0 / kp_q + 1.0 / kn_q)
                            vth_q = pol * (up_q - un_q)
                            r1, r2, rvt, _a, _s, _m, _e, _k, _t, _f, seg = _machine_call(
                                p, cc, i1n, i2n, wn, ra, rse, rsh, TERM_THEVENIN, vth_q, rth, lth_q, 0.0,
                                vsrc2_end, loop2_on, seg,
                            )
                            if ev == 0:
                                g1, g2, vt_o = r1, r2, rvt
                            else:
                                h1, h2_, vt_n, lth_n, vth_n = r1, r2, rvt, lth_q, vth_q
                        rest = (1.0 - f_off) * dt
                        i1n += rest * (h1 - g1)
                        i2n += rest * (h2_ - g2)
                        # the same sub-step in the terminal voltage: vt = s1 + r11 di1 + r12 di2 of
                        # each circuit, so the voltage-seconds added match the current added through
                        # the winding inductances (the step mean obeys the armature KVL); the step
                        # ends in the new circuit, which the frame-end outputs then describe
                        # (vth1, lth feed only the frame-end evaluation; the next step sets its own)
                        dv_rest = (1.0 - f_off) * (vt_n - vt_o)
                        vth1 = vth_n
                        lth = lth_n
                    # keep KCL exact without a jump of the DC current: the integrated DC current
                    # stands, and each group's remaining devices absorb what a turn-off clipped
                    s_p = (pan if ra_ > 0 else 0.0) + (pbn if rb_ > 0 else 0.0) + (pcn if rc_ > 0 else 0.0)
                    s_n = -((pan if ra_ < 0 else 0.0) + (pbn if rb_ < 0 else 0.0) + (pcn if rc_ < 0 else 0.0))
                    i_d = pol * i1n if feeds else s_p
                    dp = (i_d - s_p) / kp
                    dn = (s_n - i_d) / kn
                    if ra_ > 0:
                        pan += dp
                    elif ra_ < 0:
                        pan += dn
                    if rb_ > 0:
                        pbn += dp
                    elif rb_ < 0:
                        pbn += dn
                    if rc_ > 0:
                        pcn += dp
                    elif rc_ < 0:
                        pcn += dn
                pa = pan
                pb = pbn
                pc = pcn
            elif is_avg and term == TERM_THEVENIN and pol * i1n < 0.0:
                if i1 != 0.0:
                    f_cond = _zero_fraction(i1, i1n, 1.0)
                i1n = 0.0
            if term == TERM_OPEN:
                i1n = 0.0
            # field converters cannot carry negative current; an open field carries none
            if not loop2_on or (conn == CONN_SEPARATE and field_kind != 0 and i2n < 0.0):
                i2n = 0.0
            if (is_bridge or is_avg) and (i1n == 0.0):
                st_zero_s += dt
            elif is_bridge or is_avg:
                st_zero_s = 0.0
            st_i1 = i1n
            st_i2 = i2n
            st_w = wn
            st_pa = pa
            st_pb = pb
            st_pc = pc
            if i1n == 0.0 and term != TERM_OPEN:
                # the terminal current stopped in this step: what follows is the open-circuit
                # voltage (the next turn-on decision compares the bridge against it)
                term = TERM_OPEN
                d1, d2, vt, ia, _ise, _immf, _emf, _kphi, te, _vf, seg = _machine_call(
                    p, cc, 0.0, i2n, wn, ra, rse, rsh, TERM_OPEN, 0.0, 0.0, 0.0, 0.0, vsrc2_end, loop2_on, seg
                )
            sum_ia2 += ia * ia
            st_th = th0 + dtheta
            s0 = s1
            c0 = c1
            st_t += dt
            if f_cond < 1.0:
                # conducting part (trapezoid to the current zero, the voltage taken linear over the
                # step), then the open-circuit voltage; power flows only in the conducting part
                v_cond = vt_start + 0.5 * f_cond * (vt2 - vt_start)
                vmean = f_cond * v_cond + (1.0 - f_cond) * vt
                pin = f_cond * v_cond * 0.5 * i1
            else:
                vmean = 0.5 * (vt_start + vt) + dv_rest
                pin = vmean * 0.5 * (i1 + i1n)
            if is_bridge or is_avg:
                # the per-pulse mean (only a bridge has pulses; it latches at each commutation)
                st_vint += vmean * dt
                st_tpulse += dt
            sum_vt += vmean
            sum_ia += ia
            sum_te += te
            sum_pin += pin
            sum_psh += tl * wn
            if abs(ia) > peak_ia:
                peak_ia = abs(ia)

        x[X_I_LINE_A] = st_i1
        x[X_I_FIELD_A] = st_i2
        x[X_SPEED_RAD_S] = st_w
        x[X_MAINS_ANGLE_RAD] = st_th
        x[X_TIME_S] = st_t
        x[X_PH_I0] = st_pa
        x[X_PH_I0 + 1] = st_pb
        x[X_PH_I0 + 2] = st_pc
        x[X_ANGLE_RAD] = st_angle
        x[X_PULSE_VINT] = st_vint
        x[X_PULSE_T_S] = st_tpulse
        x[X_ZERO_CURRENT_S] = st_zero_s
        for k in range(6):
            x[X_THY_ON0 + k] = 1.0 if (on >> k) & 1 else 0.0
        # outputs at the end state (the loop's values belong to the last predictor stage)
        if n_sub > 0:
            d1, d2, vt, ia, ise, immf, emf, kphi, te, vfield, seg = _machine_call(
                p, cc, x[X_I_LINE_A], x[X_I_FIELD_A], x[X_SPEED_RAD_S], ra, rse, rsh, term, vth1, rth, lth,
                (u[U_IREF_A] - x[X_I_LINE_A]) / p[P_ISRC_TAU_S] if term == TERM_FORCED else 0.0,
                vsrc2_end, loop2_on, seg,
            )
            x[X_VT_V] = vt
        # the armature temperature moves over minutes: one Euler step per call on the frame's
        # mean copper loss is as exact as a step per substep (the call is far shorter than tau)
        if not frozen and n_sub > 0:
            temp = x[X_TEMP_ARM_C]
            loss_ratio = sum_ia2 / n_sub * (COPPER_K + temp) / loss_rated
            x[X_TEMP_ARM_C] = temp + n_sub * dt * (
                p[P_THERMAL_RISE_K] * loss_ratio - (temp - p[P_TEMP_AMBIENT_C])
            ) / p[P_THERMAL_TAU_S]
        finite = True
        for k in range(len(x)):
            if not math.isfinite(x[k]):
                finite = False
        if not finite:
            status |= ST_NONFINITE
        cmask = on
        n = float(n_sub) if n_sub > 0 else 1.0
        y[Y_TIME_S] = x[X_TIME_S]
        y[Y_VT_V] = vt
        y[Y_VT_MEAN_V] = sum_vt / n
        y[Y_VT_PULSE_MEAN_V] = x[X_PULSE_VAVG_V]
        y[Y_IA_A] = ia
        y[Y_IA_MEAN_A] = sum_ia / n
        y[Y_IA_PEAK_A] = peak_ia
        y[Y_I_LINE_A] = x[X_I_LINE_A]
        y[Y_IF_A] = x[X_I_FIELD_A]
        y[Y_ISE_A] = ise
        y[Y_IMMF_A] = immf
        y[Y_EMF_V] = emf
        y[Y_FLUX_VS] = kphi
        y[Y_SPEED_RAD_S] = x[X_SPEED_RAD_S]
        y[Y_SPEED_RPM] = x[X_SPEED_RAD_S] * (30.0 / math.pi)
        y[Y_ANGLE_RAD] = x[X_ANGLE_RAD]
        y[Y_TORQUE_NM] = te
        y[Y_LOAD_TORQUE_NM] = tl
        y[Y_TEMP_ARM_C] = x[X_TEMP_ARM_C]
        y[Y_FIELD_VT_V] = vfield
        y[Y_LINE_IA_A] = x[X_PH_I0]
        y[Y_LINE_IB_A] = x[X_PH_I0 + 1]
        y[Y_LINE_IC_A] = x[X_PH_I0 + 2]
        y[Y_CONDUCTING_MASK] = cmask
        y[Y_FIRED_MASK] = fired_mask
        y[Y_LAST_FIRE_ANGLE_DEG] = x[X_LATCHED_ALPHA_RAD] * (180.0 / math.pi)
        y[Y_MAINS_ANGLE_RAD] = _wrap(x[X_MAINS_ANGLE_RAD])
        y[Y_STATUS] = status
        y[Y_TACHO_V] = y[Y_SPEED_RPM] * p[P_TACHO_V_PER_RPM]
        y[Y_ENCODER_COUNT] = math.floor(x[X_ANGLE_RAD] / TWO_PI * 4.0 * p[P_ENCODER_PPR])
        y[Y_INPUT_POWER_W] = sum_pin / n
        y[Y_SHAFT_POWER_W] = sum_psh / n
        y[Y_TORQUE_MEAN_NM] = sum_te / n
        y[Y_SE_SHORTED] = 1.0 if se_shorted else 0.0
        return status

    return step_frame


# the generic build: every connection and supply as run-time codes read from p
step_frame = _build(None)

_BUILDS = {}  # specialisation codes -> dispatcher, built on first use in this process


def specialisation_codes(p):
    """The codes a specialised build is compiled for: (connection, supply, field supply, load).

    The field supply only matters for a separately excited machine; for the other
    connections it is set to FIELD_SUPPLY_DC, so their builds do not multiply with it.
    """
    conn = int(p[P_CONNECTION])
    field = int(p[P_FIELD_SUPPLY_KIND]) if conn == CONN_SEPARATE else FIELD_SUPPLY_DC
    return conn, int(p[P_SUPPLY_KIND]), field, int(p[P_LOAD_KIND])


def kernel_for(p):
    """The frame kernel specialised for the codes in p: same call and results as step_frame.

    Call it once per run (a dict lookup; the first call for a set of codes in a process makes
    the dispatcher, its first kernel call compiles or loads it from the cache), then call the
    returned function per frame: f(x, p, u, y, n_sub). Only p arrays with the same codes may
    be passed to it (it does not read them from p).
    """
    codes = specialisation_codes(p)
    f = _BUILDS.get(codes)
    if f is None:
        f = _BUILDS[codes] = _build(codes)
    return f
