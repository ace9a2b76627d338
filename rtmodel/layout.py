"""Named indices of every flat array the model kernel reads or writes.

This module is the one place that defines the layout of the four float64 arrays that cross
the rtmodel/host boundary:

    state   x[N_STATE]   continuous and discrete model state, owned by the caller, updated in place
    params  p[N_PARAM]   constants packed once from a validated config (host.params.pack)
    inputs  u[N_INPUT]   what the controller, the operator and the fault injector set for a frame
    outputs y[N_OUTPUT]  what the kernel reports after a frame (end values, frame means, flags)

Python code and tests use these names, never bare numbers. Nothing here imports numba or host.
Integer codes (connection, supply kind, ...) are stored as float64 and compared after int().
"""

# ----------------------------------------------------------------------------------------------
# Integer codes
# ----------------------------------------------------------------------------------------------
CONN_SEPARATE = 0  # separately excited: field on its own supply
CONN_SHUNT = 1  # field across the armature terminals
CONN_SERIES = 2  # series field carries the armature current, no shunt field
CONN_LONG_SHUNT = 3  # compound: shunt field across the terminals (outside the series field)
CONN_SHORT_SHUNT = 4  # compound: shunt field across the armature (inside the series field)
CONNECTION_NAMES = {
    "separate": CONN_SEPARATE,
    "shunt": CONN_SHUNT,
    "series": CONN_SERIES,
    "compound_long": CONN_LONG_SHUNT,
    "compound_short": CONN_SHORT_SHUNT,
}

SUPPLY_DC = 0  # ideal DC voltage source behind a resistance, input U_VT_V, plus optional load
SUPPLY_BRIDGE = 1  # one switched three-phase fully controlled 6-pulse bridge
SUPPLY_DUAL_BRIDGE = 2  # two anti-parallel switched bridges, circulating-current free
SUPPLY_AVERAGED = 3  # averaged bridge: Vdo cos(alpha) - overlap drop, latched once per pulse
SUPPLY_CURRENT = 4  # ideal current source with first-order bandwidth, input U_IREF_A
SUPPLY_NAMES = {
    "dc_source": SUPPLY_DC,
    "bridge": SUPPLY_BRIDGE,
    "dual_bridge": SUPPLY_DUAL_BRIDGE,
    "averaged_bridge": SUPPLY_AVERAGED,
    "current_source": SUPPLY_CURRENT,
}

FIELD_SUPPLY_DC = 0  # ideal DC field voltage, input U_FIELD_V
FIELD_SUPPLY_HALF_BRIDGE = 1  # switched single-phase half-controlled bridge, input U_FIELD_ALPHA_DEG
FIELD_SUPPLY_AVERAGED = 2  # averaged half-controlled bridge, input U_FIELD_ALPHA_DEG
FIELD_SUPPLY_NAMES = {
    "dc_source": FIELD_SUPPLY_DC,
    "half_bridge": FIELD_SUPPLY_HALF_BRIDGE,
    "averaged_half_bridge": FIELD_SUPPLY_AVERAGED,
}

LOAD_NONE = 0
LOAD_CONSTANT = 1  # passive constant torque: opposes motion, never drives the shaft
LOAD_PROPORTIONAL = 2  # T = T_set * n / n_rated
LOAD_QUADRATIC = 3  # fan/pump: T = T_set * n|n| / n_rated^2
LOAD_OVERHAULING = 4  # hoist: gravity torque of fixed sign, drives the machine when lowering
LOAD_PRIME_MOVER = 5  # shaft speed imposed by a prime mover (generator tests)
LOAD_NAMES = {
    "none": LOAD_NONE,
    "constant": LOAD_CONSTANT,
    "proportional": LOAD_PROPORTIONAL,
    "quadratic": LOAD_QUADRATIC,
    "overhauling": LOAD_OVERHAULING,
    "prime_mover": LOAD_PRIME_MOVER,
}

# Status bits in Y_STATUS (OR-ed over the frame). Kernels never raise; they set bits.
ST_DISCONTINUOUS = 1 << 0  # armature current was zero during part of the frame (bridge supply)
ST_COMMUTATION_FAILURE = 1 << 1  # a thyristor re-conducted or a commutation did not complete
ST_DEADTIME_VIOLATION = 1 << 2  # dual bridge: other bridge fired before current zero + dead time
ST_CONTACTOR_BREAK_UNDER_LOAD = 1 << 3  # contactor opened while current flowed
ST_NONFINITE = 1 << 4  # a state became NaN/inf: the run must stop (step too large?)
ST_FIELD_OPEN = 1 << 5  # field circuit open (fault or contactor) during the frame
ST_ARMATURE_SHORT = 1 << 6  # armature short/flashover fault active
ST_BRIDGE_SHORT = 1 << 7  # a shorted thyristor and its leg partner formed a DC-side short
ST_LEG_OVERLAP = 1 << 8  # both devices of a leg were due to conduct (freewheel through a leg,
# e.g. after a misfire): not modelled, the later device was kept off
ST_NAMES = {
    ST_DISCONTINUOUS: "discontinuous_conduction",
    ST_COMMUTATION_FAILURE: "commutation_failure",
    ST_DEADTIME_VIOLATION: "deadtime_violation",
    ST_CONTACTOR_BREAK_UNDER_LOAD: "contactor_break_under_load",
    ST_NONFINITE: "nonfinite_state",
    ST_FIELD_OPEN: "field_open",
    ST_ARMATURE_SHORT: "armature_short",
    ST_BRIDGE_SHORT: "bridge_short",
    ST_LEG_OVERLAP: "leg_overlap_not_modelled",
}

# Thyristor numbering follows the firing sequence of a 6-pulse bridge (common practice):
# T1 a+, T2 c-, T3 b+, T4 a-, T5 c+, T6 b-; index k = number - 1. THY_PHASE[k] is the phase
# (0 a, 1 b, 2 c), THY_UPPER[k] is 1 for the positive-rail group.
THY_PHASE = (0, 2, 1, 0, 2, 1)
THY_UPPER = (1, 0, 1, 0, 1, 0)
N_THY = 6
MAG_MAX_POINTS = 32  # magnetization table length limit (packed in params)
AR_MAX_POINTS = 8  # armature reaction table length limit

# ----------------------------------------------------------------------------------------------
# State x
# ----------------------------------------------------------------------------------------------
_names = []


def _block(prefix, names):
    start = len(_names)
    _names.extend(prefix + n for n in names)
    return start


X_I_LINE_A = _block("X_", ["I_LINE_A"])  # current into the + terminal, motor convention
X_I_FIELD_A = _block("X_", ["I_FIELD_A"])  # shunt or separate field winding current
X_SPEED_RAD_S = _block("X_", ["SPEED_RAD_S"])
X_ANGLE_RAD = _block("X_", ["ANGLE_RAD"])  # shaft angle, unwrapped
X_TEMP_ARM_C = _block("X_", ["TEMP_ARM_C"])
X_TIME_S = _block("X_", ["TIME_S"])
X_MAINS_ANGLE_RAD = _block("X_", ["MAINS_ANGLE_RAD"])  # phase a voltage angle, unwrapped (grows)
# mains line currents into the bridge, phases a, b, c (A); the phase's conducting thyristor
# carries |i|: upper one when i > 0, lower one when i < 0 (a shorted one may carry either sign)
X_PH_I0 = _block("X_", ["PH_IA", "PH_IB", "PH_IC"])
# 1.0 while thyristor k conducts
X_THY_ON0 = _block("X_", [f"THY_ON{k}" for k in range(N_THY)])
# model time at which thyristor k last stopped conducting (s), for the turn-off time check
X_THY_OFF_S0 = _block("X_", [f"THY_OFF_S{k}" for k in range(N_THY)])
# unwrapped mains angle at which thyristor k is to be fired (rad), or -1 when none is pending
X_THY_FIRE_AT0 = _block("X_", [f"THY_FIRE_AT{k}" for k in range(N_THY)])
# unwrapped mains angle at which thyristor k's gate pulse ends (gated while the angle is below)
X_THY_GATE0 = _block("X_", [f"THY_GATE{k}" for k in range(N_THY)])
X_BRIDGE_ACTIVE = _block("X_", ["BRIDGE_ACTIVE"])  # 0 none, 1 forward, 2 reverse bridge
X_ZERO_CURRENT_S = _block("X_", ["ZERO_CURRENT_S"])  # time the armature current has been zero
X_AVG_VOLTAGE_V = _block("X_", ["AVG_VOLTAGE_V"])  # averaged bridge: voltage latched at last pulse
X_PULSE_VINT = _block("X_", ["PULSE_VINT"])  # integral of terminal voltage since last pulse (V s)
X_PULSE_T_S = _block("X_", ["PULSE_T_S"])  # time since last pulse (s)
X_PULSE_VAVG_V = _block("X_", ["PULSE_VAVG_V"])  # mean terminal voltage over the last pulse
X_FIELD_CONV_ON = _block("X_", ["FIELD_CONV_ON"])  # field half bridge: 1 while a thyristor conducts
X_LAST_FIRED_UP = _block("X_", ["LAST_FIRED_UP"])  # index of the last upper thyristor turned on, -1 none
X_LAST_FIRED_LOW = _block("X_", ["LAST_FIRED_LOW"])  # index of the last lower thyristor turned on
X_LATCHED_ALPHA_RAD = _block("X_", ["LATCHED_ALPHA_RAD"])  # firing angle latched at the last instant
X_FIELD_FIRE_AT = _block("X_", ["FIELD_FIRE_AT"])  # field bridge: unwrapped angle of next firing, -1 none
X_VT_V = _block("X_", ["VT_V"])  # last terminal voltage (kept for forward-bias checks)
X_SE_SHORTED = _block("X_", ["SE_SHORTED"])  # compound: 1 while the series-field shorting contactor is closed
STATE_NAMES = tuple(_names)
N_STATE = len(_names)

# ----------------------------------------------------------------------------------------------
# Parameters p
# ----------------------------------------------------------------------------------------------
_names = []
P_CONNECTION = _block("P_", ["CONNECTION"])
P_COMPOUND_SIGN = _block("P_", ["COMPOUND_SIGN"])  # +1 cumulative, -1 differential
P_FIELD_SIGN = _block("P_", ["FIELD_SIGN"])  # +1, or -1: shunt/separate field connected reversed
P_RA_OHM = _block("P_", ["RA_OHM"])  # armature circuit resistance at P_TEMP_REF_C (incl. interpoles)
P_LA_H = _block("P_", ["LA_H"])
P_BRUSH_DROP_V = _block("P_", ["BRUSH_DROP_V"])  # total brush drop while current flows
P_BRUSH_KNEE_A = _block("P_", ["BRUSH_KNEE_A"])  # below this current the drop falls linearly to 0
P_BRUSH_INV_KNEE = _block("P_", ["BRUSH_INV_KNEE"])  # 1/P_BRUSH_KNEE_A
P_RF_OHM = _block("P_", ["RF_OHM"])  # shunt/separate field winding resistance at P_TEMP_REF_C
P_RHEO_OHM = _block("P_", ["RHEO_OHM"])  # field rheostat in series with the shunt field
P_LF_LEAK_H = _block("P_", ["LF_LEAK_H"])  # shunt field leakage inductance (does not saturate)
P_RSE_OHM = _block("P_", ["RSE_OHM"])  # series field resistance at P_TEMP_REF_C
P_LSE_LEAK_H = _block("P_", ["LSE_LEAK_H"])  # series field leakage inductance
P_SE_TURNS_RATIO = _block("P_", ["SE_TURNS_RATIO"])  # series turns per curve-winding turn
P_LM0_H = _block("P_", ["LM0_H"])  # magnetizing inductance of the curve winding, straight part
P_MAG_N = _block("P_", ["MAG_N"])
P_MAG_SPEED_RAD_S = _block("P_", ["MAG_SPEED_RAD_S"])  # speed at which the curve was measured
P_MAG_SLOPE0 = _block("P_", ["MAG_SLOPE0"])  # air-gap line slope (V/A), steepest table segment
P_MAG_I0 = _block("P_", [f"MAG_I{k}" for k in range(MAG_MAX_POINTS)])
P_MAG_E0 = _block("P_", [f"MAG_E{k}" for k in range(MAG_MAX_POINTS)])
P_MAG_D0 = _block("P_", [f"MAG_D{k}" for k in range(MAG_MAX_POINTS)])  # monotone cubic slopes
# reciprocals packed once so the step kernel multiplies instead of dividing
P_MAG_INVH0 = _block("P_", [f"MAG_INVH{k}" for k in range(MAG_MAX_POINTS)])  # 1/(i_k+1 - i_k)
P_MAG_INV_SPEED = _block("P_", ["MAG_INV_SPEED"])  # 1/P_MAG_SPEED_RAD_S
P_MAG_INV_SLOPE0 = _block("P_", ["MAG_INV_SLOPE0"])  # 1/P_MAG_SLOPE0
P_AR_N = _block("P_", ["AR_N"])
P_AR_IA0 = _block("P_", [f"AR_IA{k}" for k in range(AR_MAX_POINTS)])
P_AR_IF0 = _block("P_", [f"AR_IF{k}" for k in range(AR_MAX_POINTS)])
P_TEMP_REF_C = _block("P_", ["TEMP_REF_C"])  # temperature at which resistances are given
P_TEMP_AMBIENT_C = _block("P_", ["TEMP_AMBIENT_C"])
P_TEMP_FIELD_C = _block("P_", ["TEMP_FIELD_C"])  # field windings held at this temperature
P_THERMAL_TAU_S = _block("P_", ["THERMAL_TAU_S"])
P_THERMAL_RISE_K = _block("P_", ["THERMAL_RISE_K"])  # steady rise at rated current
P_THERMAL_FROZEN = _block("P_", ["THERMAL_FROZEN"])  # 1: armature temperature held
P_RATED_IA_A = _block("P_", ["RATED_IA_A"])
P_RATED_SPEED_RAD_S = _block("P_", ["RATED_SPEED_RAD_S"])
P_J_KGM2 = _block("P_", ["J_KGM2"])  # machine rotor inertia
P_J_LOAD_KGM2 = _block("P_", ["J_LOAD_KGM2"])  # load inertia behind the coupling
P_VISCOUS_NM_S = _block("P_", ["VISCOUS_NM_S"])  # N m per rad/s
P_COULOMB_NM = _block("P_", ["COULOMB_NM"])
P_LOAD_KIND = _block("P_", ["LOAD_KIND"])
P_SUPPLY_KIND = _block("P_", ["SUPPLY_KIND"])
P_DC_SOURCE_OHM = _block("P_", ["DC_SOURCE_OHM"])
P_ISRC_TAU_S = _block("P_", ["ISRC_TAU_S"])
P_MAINS_VLL_V = _block("P_", ["MAINS_VLL_V"])  # line-to-line rms
P_MAINS_HZ = _block("P_", ["MAINS_HZ"])
P_LS_H = _block("P_", ["LS_H"])  # commutating inductance per phase
P_RS_OHM = _block("P_", ["RS_OHM"])  # source resistance per phase
P_ALPHA_MIN_RAD = _block("P_", ["ALPHA_MIN_RAD"])
P_ALPHA_MAX_RAD = _block("P_", ["ALPHA_MAX_RAD"])
P_GATE_PULSE_RAD = _block("P_", ["GATE_PULSE_RAD"])
P_TURN_OFF_S = _block("P_", ["TURN_OFF_S"])  # thyristor circuit-commutated recovery time t_q
P_DEADTIME_S = _block("P_", ["DEADTIME_S"])  # dual bridge changeover dead time at zero current
P_FIELD_SUPPLY_KIND = _block("P_", ["FIELD_SUPPLY_KIND"])
P_FIELD_VAC_V = _block("P_", ["FIELD_VAC_V"])  # field bridge ac supply rms (from mains a-b)
P_FIELD_ALPHA_MIN_RAD = _block("P_", ["FIELD_ALPHA_MIN_RAD"])
P_DT_S = _block("P_", ["DT_S"])  # fixed model step
P_ENCODER_PPR = _block("P_", ["ENCODER_PPR"])
P_TACHO_V_PER_RPM = _block("P_", ["TACHO_V_PER_RPM"])
P_MAG_LINEAR = _block("P_", ["MAG_LINEAR"])  # 1: the curve is piecewise linear between points, 0: monotone cubic
# compound machines: a speed relay shorts the series field for the start; it opens the short
# above OPEN and closes it again below CLOSE (|speed|); OPEN <= 0 means no such contactor
P_SE_SHORT_OPEN_RAD_S = _block("P_", ["SE_SHORT_OPEN_RAD_S"])
P_SE_SHORT_CLOSE_RAD_S = _block("P_", ["SE_SHORT_CLOSE_RAD_S"])
PARAM_NAMES = tuple(_names)
N_PARAM = len(_names)

# ----------------------------------------------------------------------------------------------
# Inputs u (set per frame)
# ----------------------------------------------------------------------------------------------
_names = []
U_VT_V = _block("U_", ["VT_V"])  # DC source voltage (SUPPLY_DC)
U_ALPHA_DEG = _block("U_", ["ALPHA_DEG"])  # armature firing angle command (bridge supplies)
U_BRIDGE_SELECT = _block("U_", ["BRIDGE_SELECT"])  # 0 block pulses, 1 forward, 2 reverse bridge
U_IREF_A = _block("U_", ["IREF_A"])  # current command (SUPPLY_CURRENT)
U_FIELD_V = _block("U_", ["FIELD_V"])  # field voltage (FIELD_SUPPLY_DC)
U_FIELD_ALPHA_DEG = _block("U_", ["FIELD_ALPHA_DEG"])  # field bridge firing angle
U_CONTACTOR = _block("U_", ["CONTACTOR"])  # 1 main contactor closed
U_LOAD_TORQUE_NM = _block("U_", ["LOAD_TORQUE_NM"])  # load setting (meaning per load kind)
U_PRIME_SPEED_RAD_S = _block("U_", ["PRIME_SPEED_RAD_S"])  # prime mover speed
U_LOAD_OHM = _block("U_", ["LOAD_OHM"])  # resistor across the terminals; <= 0 means none
U_MAINS_PU = _block("U_", ["MAINS_PU"])  # mains voltage scale (dip: < 1)
U_MAINS_HZ_DEV = _block("U_", ["MAINS_HZ_DEV"])  # frequency deviation (Hz)
U_PHASE_LOST = _block("U_", ["PHASE_LOST"])  # 0 none, 1/2/3 phase a/b/c open
U_PHASE_REVERSED = _block("U_", ["PHASE_REVERSED"])  # 1: sequence a-c-b
U_MISFIRE_MASK = _block("U_", ["MISFIRE_MASK"])  # bit k: thyristor k never fires
U_SHORT_MASK = _block("U_", ["SHORT_MASK"])  # bit k: thyristor k shorted
U_PULSES_BLOCKED = _block("U_", ["PULSES_BLOCKED"])  # 1: firing pulses lost to the whole bridge
U_FUSE_BLOWN_MASK = _block("U_", ["FUSE_BLOWN_MASK"])  # bit j: fuse in phase j open
U_FIELD_OPEN = _block("U_", ["FIELD_OPEN"])  # 1: shunt/separate field circuit open
U_ARMATURE_SHORT = _block("U_", ["ARMATURE_SHORT"])  # 1: flashover across the armature terminals
U_LOCKED_ROTOR = _block("U_", ["LOCKED_ROTOR"])  # 1: shaft held at standstill
U_COUPLING_BROKEN = _block("U_", ["COUPLING_BROKEN"])  # 1: load and its inertia fall away
INPUT_NAMES = tuple(_names)
N_INPUT = len(_names)

# ----------------------------------------------------------------------------------------------
# Outputs y (written at the end of every kernel call)
# ----------------------------------------------------------------------------------------------
_names = []
Y_TIME_S = _block("Y_", ["TIME_S"])
Y_VT_V = _block("Y_", ["VT_V"])  # terminal voltage, end of frame
Y_VT_MEAN_V = _block("Y_", ["VT_MEAN_V"])  # mean over the frame
Y_VT_PULSE_MEAN_V = _block("Y_", ["VT_PULSE_MEAN_V"])  # mean over the last complete pulse
Y_IA_A = _block("Y_", ["IA_A"])  # armature current
Y_IA_MEAN_A = _block("Y_", ["IA_MEAN_A"])
Y_IA_PEAK_A = _block("Y_", ["IA_PEAK_A"])  # largest |ia| in the frame
Y_I_LINE_A = _block("Y_", ["I_LINE_A"])  # current into the + terminal
Y_IF_A = _block("Y_", ["IF_A"])  # shunt/separate field current
Y_ISE_A = _block("Y_", ["ISE_A"])  # series field current
Y_IMMF_A = _block("Y_", ["IMMF_A"])  # net excitation in curve-winding amperes (after reaction)
Y_EMF_V = _block("Y_", ["EMF_V"])
Y_FLUX_VS = _block("Y_", ["FLUX_VS"])  # K*phi (V s/rad = N m/A)
Y_SPEED_RAD_S = _block("Y_", ["SPEED_RAD_S"])
Y_SPEED_RPM = _block("Y_", ["SPEED_RPM"])
Y_ANGLE_RAD = _block("Y_", ["ANGLE_RAD"])
Y_TORQUE_NM = _block("Y_", ["TORQUE_NM"])  # electromagnetic torque
Y_LOAD_TORQUE_NM = _block("Y_", ["LOAD_TORQUE_NM"])  # load torque on the shaft (opposing +)
Y_TEMP_ARM_C = _block("Y_", ["TEMP_ARM_C"])
Y_FIELD_VT_V = _block("Y_", ["FIELD_VT_V"])  # voltage across the shunt/separate field circuit
Y_LINE_IA_A = _block("Y_", ["LINE_IA_A"])  # mains line currents (bridge supplies)
Y_LINE_IB_A = _block("Y_", ["LINE_IB_A"])
Y_LINE_IC_A = _block("Y_", ["LINE_IC_A"])
Y_CONDUCTING_MASK = _block("Y_", ["CONDUCTING_MASK"])  # bit k: thyristor k conducts, end of frame
Y_FIRED_MASK = _block("Y_", ["FIRED_MASK"])  # bit k: thyristor k received a firing pulse
Y_LAST_FIRE_ANGLE_DEG = _block("Y_", ["LAST_FIRE_ANGLE_DEG"])  # firing angle of the last pulse
Y_MAINS_ANGLE_RAD = _block("Y_", ["MAINS_ANGLE_RAD"])
Y_STATUS = _block("Y_", ["STATUS"])  # ST_* bits
Y_TACHO_V = _block("Y_", ["TACHO_V"])
Y_ENCODER_COUNT = _block("Y_", ["ENCODER_COUNT"])  # quadrature counts (4 x PPR per rev)
Y_INPUT_POWER_W = _block("Y_", ["INPUT_POWER_W"])  # Vt * i_line, frame mean
Y_SHAFT_POWER_W = _block("Y_", ["SHAFT_POWER_W"])  # load torque * speed, frame mean
Y_TORQUE_MEAN_NM = _block("Y_", ["TORQUE_MEAN_NM"])  # electromagnetic torque, frame mean
Y_SE_SHORTED = _block("Y_", ["SE_SHORTED"])  # 1: series field shorted during the frame
OUTPUT_NAMES = tuple(_names)
N_OUTPUT = len(_names)
del _names

# Units of the outputs, for CSV headers and logs.
OUTPUT_COLUMNS = {
    Y_TIME_S: "time_s",
    Y_VT_V: "terminal_voltage_V",
    Y_VT_MEAN_V: "terminal_voltage_mean_V",
    Y_VT_PULSE_MEAN_V: "terminal_voltage_pulse_mean_V",
    Y_IA_A: "armature_current_A",
    Y_IA_MEAN_A: "armature_current_mean_A",
    Y_IA_PEAK_A: "armature_current_peak_A",
    Y_I_LINE_A: "line_current_A",
    Y_IF_A: "field_current_A",
    Y_ISE_A: "series_field_current_A",
    Y_IMMF_A: "net_excitation_A",
    Y_EMF_V: "emf_V",
    Y_FLUX_VS: "flux_constant_Vs_per_rad",
    Y_SPEED_RAD_S: "speed_rad_s",
    Y_SPEED_RPM: "speed_rpm",
    Y_ANGLE_RAD: "shaft_angle_rad",
    Y_TORQUE_NM: "torque_Nm",
    Y_LOAD_TORQUE_NM: "load_torque_Nm",
    Y_TEMP_ARM_C: "armature_temperature_C",
    Y_FIELD_VT_V: "field_voltage_V",
    Y_LINE_IA_A: "mains_current_a_A",
    Y_LINE_IB_A: "mains_current_b_A",
    Y_LINE_IC_A: "mains_current_c_A",
    Y_CONDUCTING_MASK: "conducting_mask",
    Y_FIRED_MASK: "fired_mask",
    Y_LAST_FIRE_ANGLE_DEG: "last_firing_angle_deg",
    Y_MAINS_ANGLE_RAD: "mains_angle_rad",
    Y_STATUS: "status_bits",
    Y_TACHO_V: "tacho_voltage_V",
    Y_ENCODER_COUNT: "encoder_count",
    Y_INPUT_POWER_W: "input_power_W",
    Y_SHAFT_POWER_W: "shaft_power_W",
    Y_TORQUE_MEAN_NM: "torque_mean_Nm",
    Y_SE_SHORTED: "series_field_shorted",
}
assert len(OUTPUT_COLUMNS) == N_OUTPUT
