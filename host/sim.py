"""Offline transient runs: input profiles, the sample loop, CSV and plot output.

Owns: the named model inputs a user may drive (with units), step/ramp profiles, and
`run_offline`, which calls the step kernel once per recorded sample. The host/rtmodel
boundary is rtmodel.layout (array layout) and the frame kernel from Plant.kernel() (a build of
rtmodel.kernel.step_frame for the plant's codes; one call per sample or frame); nothing else
of rtmodel is called here.
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from rtmodel import layout as L

from .controller import firing
from .errors import ConfigError
from .interrupts import raise_if_lost
from .params import RPM, Plant

# user-facing input names -> (index, scale from user unit to model unit)
INPUTS = {
    "terminal_voltage_V": (L.U_VT_V, 1.0),
    "firing_angle_deg": (L.U_ALPHA_DEG, 1.0),
    "bridge": (L.U_BRIDGE_SELECT, 1.0),
    "current_ref_A": (L.U_IREF_A, 1.0),
    "field_voltage_V": (L.U_FIELD_V, 1.0),
    "field_angle_deg": (L.U_FIELD_ALPHA_DEG, 1.0),
    "contactor": (L.U_CONTACTOR, 1.0),
    "load_torque_Nm": (L.U_LOAD_TORQUE_NM, 1.0),
    "prime_speed_rpm": (L.U_PRIME_SPEED_RAD_S, RPM),
    "load_ohm": (L.U_LOAD_OHM, 1.0),
    "mains_pu": (L.U_MAINS_PU, 1.0),
    "mains_hz_dev": (L.U_MAINS_HZ_DEV, 1.0),
    "phase_lost": (L.U_PHASE_LOST, 1.0),
    "phase_reversed": (L.U_PHASE_REVERSED, 1.0),
    "misfire_mask": (L.U_MISFIRE_MASK, 1.0),
    "short_mask": (L.U_SHORT_MASK, 1.0),
    "pulses_blocked": (L.U_PULSES_BLOCKED, 1.0),
    "fuse_blown_mask": (L.U_FUSE_BLOWN_MASK, 1.0),
    "field_open": (L.U_FIELD_OPEN, 1.0),
    "armature_short": (L.U_ARMATURE_SHORT, 1.0),
    "locked_rotor": (L.U_LOCKED_ROTOR, 1.0),
    "coupling_broken": (L.U_COUPLING_BROKEN, 1.0),
}
assert len({i for i, _ in INPUTS.values()}) == L.N_INPUT  # every model input has a name
# a voltage reference for a bridge supply, turned into a firing angle by the arccos law
# Vd = Vdo cos(alpha), Vdo = 3 sqrt(2)/pi V_LL (Mohan, Undeland, Robbins), as a
# voltage-controlled converter front end would; not a model input of its own
BRIDGE_VOLTAGE_REF = "bridge_voltage_ref_V"
INPUTS[BRIDGE_VOLTAGE_REF] = (-1, 1.0)


@dataclass(frozen=True)
class Segment:
    """An input change: a step to v1 at t0 (t1 == t0), or a linear ramp v0 -> v1 over t0..t1."""

    name: str
    t0_s: float
    t1_s: float
    v0: float
    v1: float

    def value(self, t_s: float, before: float) -> float:
        if t_s < self.t0_s:
            return before
        if t_s >= self.t1_s:
            return self.v1
        return self.v0 + (self.v1 - self.v0) * (t_s - self.t0_s) / (self.t1_s - self.t0_s)


def _name_ok(name: str, where: str) -> None:
    if name not in INPUTS:
        import difflib

        hint = difflib.get_close_matches(name, list(INPUTS), n=1)
        more = f"; did you mean '{hint[0]}'?" if hint else ""
        raise ConfigError(f"{where}: unknown input '{name}'{more} (known: {', '.join(sorted(INPUTS))})")


def parse_change(text: str, option: str = "--change") -> Segment:
    """'NAME@T=VALUE', e.g. 'terminal_voltage_V@0.5=440': the input jumps to VALUE at T."""
    try:
        lhs, val = text.split("=", 1)
        name, t = lhs.split("@", 1)
        t_s = float(t)
        v = float(val)
    except ValueError as err:
        raise ConfigError(f"{option}: '{text}': expected NAME@TIME_S=VALUE, e.g. load_torque_Nm@1.5=4000") from err
    _name_ok(name, option)
    if not (math.isfinite(t_s) and t_s >= 0 and math.isfinite(v)):
        raise ConfigError(f"{option}: '{text}': time must be >= 0 and values finite")
    return Segment(name, t_s, t_s, v, v)


parse_step = parse_change  # old name (the option was --step); kept while callers move over


def parse_ramp(text: str) -> Segment:
    """'NAME@T0:T1=V0:V1', e.g. 'firing_angle_deg@0.2:2.0=150:20'."""
    try:
        lhs, vals = text.split("=", 1)
        name, ts = lhs.split("@", 1)
        t0, t1 = (float(v) for v in ts.split(":"))
        v0, v1 = (float(v) for v in vals.split(":"))
    except ValueError as err:
        raise ConfigError(
            f"--ramp: '{text}': expected NAME@T0:T1=V0:V1, e.g. firing_angle_deg@0.2:2.0=150:20"
        ) from err
    _name_ok(name, "--ramp")
    if not (0 <= t0 < t1 and all(math.isfinite(v) for v in (t0, t1, v0, v1))):
        raise ConfigError(f"--ramp: '{text}': need 0 <= T0 < T1 and finite values")
    return Segment(name, t0, t1, v0, v1)


def input_limits(plant: Plant) -> dict[str, tuple[float, float, str]]:
    """Plausible range of each named input, in its user unit, for this plant: (lo, hi, basis).

    A value outside cannot describe a test of this machine (1e30 V on a 440 V armature); the
    model would only overflow, so it is refused before the run, naming the input."""
    v = plant.machine.values
    vr = v["machine.rated_voltage_V"]
    ir = v["machine.rated_current_A"]
    n_max = v["machine.max_speed_rpm"] or 1.2 * v["machine.rated_speed_rpm"]
    t_r = abs(plant.derived["rated_torque_Nm"])
    vf = max(vr, plant.derived.get("field_voltage_rated_V", 0.0))
    vdo = plant.derived.get("vdo_V", vr)
    lim = {
        "terminal_voltage_V": (-10 * vr, 10 * vr, "10 x rated voltage"),
        "bridge_voltage_ref_V": (-10 * vdo, 10 * vdo, "10 x the bridge's Vdo"),
        "firing_angle_deg": (0.0, 180.0, "a firing angle"),
        "field_angle_deg": (0.0, 180.0, "a firing angle"),
        "bridge": (0.0, 2.0, "0 blocked, 1 forward, 2 reverse"),
        "current_ref_A": (-10 * ir, 10 * ir, "10 x rated current"),
        "field_voltage_V": (-10 * vf, 10 * vf, "10 x the rated field or armature voltage"),
        "load_torque_Nm": (-10 * t_r, 10 * t_r, "10 x rated torque"),
        "prime_speed_rpm": (-3 * n_max, 3 * n_max, "3 x the maximum speed"),
        "load_ohm": (0.0, 1e9, "a resistor, ohm"),
        "mains_pu": (0.0, 2.0, "per unit of the rated mains voltage"),
        "mains_hz_dev": (-0.2 * 400, 0.2 * 400, "a frequency deviation, Hz"),
        "misfire_mask": (0.0, 63.0, "a bit per thyristor"),
        "short_mask": (0.0, 63.0, "a bit per thyristor"),
        "fuse_blown_mask": (0.0, 7.0, "a bit per phase"),
    }
    for name in INPUTS:
        lim.setdefault(name, (0.0, 1.0, "0 or 1"))
    return lim


def check_inputs(plant: Plant, segments: list[Segment], where: dict[str, str] | None = None) -> None:
    """Refuse a segment whose value lies outside input_limits(): the error names the input."""
    lim = input_limits(plant)
    for seg in segments:
        lo, hi, basis = lim[seg.name]
        for val in (seg.v0, seg.v1):
            if not lo <= val <= hi:
                opt = (where or {}).get(seg.name, "--set-input/--change/--ramp")
                raise ConfigError(f"{opt}: {seg.name}: must be within [{lo:g}, {hi:g}] ({basis}), got {val!r}")


def overspeed_limit_rpm(plant: Plant) -> float:
    """The speed above which a run is flagged: machine.max_speed_rpm, default 1.2 x rated."""
    v = plant.machine.values
    return float(v["machine.max_speed_rpm"] or 1.2 * v["machine.rated_speed_rpm"])


def apply_profile(u: np.ndarray, u_start: np.ndarray, segments: list[Segment], t_s: float,
                  vdo_V: float = 0.0) -> None:
    """Set u for time t_s: the start value, then each segment in order (later ones win).

    A bridge_voltage_ref_V segment sets the firing angle alpha = arccos(V / Vdo).
    """
    u[:] = u_start
    v_ref = None
    for seg in segments:
        idx, scale = INPUTS[seg.name]
        if idx < 0:
            v_ref = seg.value(t_s, 0.0 if v_ref is None else v_ref)
            continue
        u[idx] = seg.value(t_s, u[idx] / scale) * scale
    if v_ref is not None and vdo_V > 0.0:
        u[L.U_ALPHA_DEG] = firing.bridge_alpha_deg(v_ref, vdo_V)


def check_segments(plant: Plant, segments) -> None:
    """Input profiles the plant cannot take, refused before anything runs."""
    if plant.converter is None and any(INPUTS[s_.name][0] < 0 for s_ in segments):
        raise ConfigError(f"{BRIDGE_VOLTAGE_REF}: needs a bridge converter (--converter); "
                          "a DC source takes terminal_voltage_V")


# at most this many model steps in one kernel call: about 0.05-0.1 s of wall time at the
# kernel's 100-400 ns per step, so Ctrl-C (SIGINT, handled between calls) is honoured quickly
# and rows are handed to the recorder as they are computed, even with a huge --sample
MAX_STEPS_PER_CALL = 250_000
FLUSH_WALL_S = 0.05  # hand computed rows to on_rows at least this often (wall time)


def run_offline(plant: Plant, t_end_s: float, sample_s: float, segments: list[Segment] = (), x=None,
                on_rows=None, max_steps_per_call: int = MAX_STEPS_PER_CALL):
    """Run the model from x (or the plant's initial state) and record one output row per sample.

    Returns (t_s, Y) with Y of shape (n_samples + 1, N_OUTPUT); row 0 is the initial state.
    Inputs are held over a sample (sample_s >= one step). A sample of more than
    max_steps_per_call steps is computed in several kernel calls (the row is the output of the
    last one: frame means and peaks, such as the mean terminal voltage, then cover that last
    call only). on_rows(Y[a:b]) gets every computed row in order, at least every
    FLUSH_WALL_S of wall time, and once more with the rows done so far when the run is
    interrupted (KeyboardInterrupt goes on after it).
    """
    import time

    step_frame = plant.kernel()
    dt = plant.dt_s
    n_sub = max(1, int(round(sample_s / dt)))
    n = int(math.ceil(t_end_s / (n_sub * dt) - 1e-9))
    x = plant.new_state() if x is None else x
    u_start = plant.new_inputs()
    u = u_start.copy()
    Y = np.zeros((n + 1, L.N_OUTPUT))
    segments = list(segments)
    check_segments(plant, segments)
    vdo = 0.0
    if plant.converter is not None:
        vdo = firing.vdo(float(plant.p[L.P_MAINS_VLL_V]))
    calls = [max_steps_per_call] * (n_sub // max_steps_per_call)
    if n_sub % max_steps_per_call:
        calls.append(n_sub % max_steps_per_call)
    apply_profile(u, u_start, segments, 0.0, vdo)
    step_frame(x, plant.p, u, Y[0], 0)
    raise_if_lost()  # first call compiles: a Ctrl-C that landed in the compiler's callbacks
    done = 1  # rows computed
    flushed = 0  # rows handed to on_rows
    if on_rows is not None:  # the initial state at once: a first sample may take long
        on_rows(Y[0:1])
        flushed = 1
    clock = time.perf_counter
    last_flush = clock()
    try:
        for k in range(n):
            apply_profile(u, u_start, segments, x[L.X_TIME_S], vdo)
            status = 0
            for steps in calls:
                status = step_frame(x, plant.p, u, Y[k + 1], steps)
                if status & L.ST_NONFINITE:
                    break
            done = k + 2
            if status & L.ST_NONFINITE:
                Y = Y[:done]
                break
            if on_rows is not None and (done - flushed >= 8192 or clock() - last_flush >= FLUSH_WALL_S):
                a, flushed = flushed, done  # moved first: an interrupt inside on_rows never repeats rows
                on_rows(Y[a:done])
                last_flush = clock()
    except KeyboardInterrupt:
        if on_rows is not None and done > flushed:
            a, flushed = flushed, done
            on_rows(Y[a:done])
        raise
    if on_rows is not None and done > flushed:
        on_rows(Y[flushed:done])
    return Y[:, L.Y_TIME_S].copy(), Y


def steady_start_state(plant: Plant) -> np.ndarray:
    """The initial state of a motor already running in steady state on its DC source: field
    up and the speed where the motor's torque meets the configured load (host.opoint), so a
    run can start there instead of from rest. Speed-dependent loads (proportional, quadratic)
    are met by fixed-point iteration on the load law.

    Raises ConfigError where no such state exists or the supply is not a DC source."""
    from . import opoint

    v = plant.machine.values
    src = plant.machine.source
    if plant.converter is not None:
        raise ConfigError("--from-steady: starts from the DC source's steady state; give no --converter "
                          f"(a bridge's steady state depends on the firing angle), got {plant.converter.source}")
    if v["machine.duty"] != "motor":
        raise ConfigError(f"{src}: machine.duty: --from-steady needs a motor, got {v['machine.duty']!r}")
    vt = float(plant.u0[L.U_VT_V])
    kind = v["mechanics.load"]
    t_set = float(plant.u0[L.U_LOAD_TORQUE_NM])
    w_r = v["machine.rated_speed_rpm"] * RPM
    if kind == "prime_mover":
        op = opoint.solve_motor(plant, vt, speed_rpm=float(plant.u0[L.U_PRIME_SPEED_RAD_S]) / RPM)
    else:
        law = {"none": lambda w: 0.0, "constant": lambda w: abs(t_set), "overhauling": lambda w: t_set,
               "proportional": lambda w: t_set * w / w_r, "quadratic": lambda w: t_set * (w / w_r) ** 2}[kind]
        w = w_r
        op = None
        for _ in range(60):
            op = opoint.solve_motor(plant, vt, load_torque_Nm=law(w))
            if op.state is None:
                break
            if abs(op.state.w - w) < 1e-9 * max(abs(w), 1.0):
                break
            w = op.state.w
    if op is None or op.state is None:
        why = getattr(op, "reason", "") if op is not None else ""
        raise ConfigError(f"{src}: mechanics.load: --from-steady: no steady running state at {vt:g} V with this load"
                          + (f" ({why})" if why else ""))
    st = op.state
    x = plant.new_state()
    x[L.X_I_LINE_A] = st.i1
    x[L.X_I_FIELD_A] = st.ish
    x[L.X_SPEED_RAD_S] = st.w
    return x


CSV_COLUMNS = (
    L.Y_TIME_S, L.Y_VT_V, L.Y_VT_MEAN_V, L.Y_IA_A, L.Y_I_LINE_A, L.Y_IF_A, L.Y_ISE_A, L.Y_EMF_V,
    L.Y_SPEED_RPM, L.Y_TORQUE_NM, L.Y_LOAD_TORQUE_NM, L.Y_TEMP_ARM_C, L.Y_FIELD_VT_V,
    L.Y_VT_PULSE_MEAN_V, L.Y_LINE_IA_A, L.Y_LINE_IB_A, L.Y_LINE_IC_A, L.Y_CONDUCTING_MASK,
    L.Y_FIRED_MASK, L.Y_LAST_FIRE_ANGLE_DEG, L.Y_MAINS_ANGLE_RAD, L.Y_STATUS,
)


def write_csv(path: str | Path, Y: np.ndarray, columns=CSV_COLUMNS) -> None:
    """CSV with a header of unit-suffixed names (rtmodel.layout.OUTPUT_COLUMNS)."""
    path = Path(path)
    if path.suffix.lower() != ".csv":
        raise ConfigError(f"--out: {path}: expected a .csv file name, got suffix '{path.suffix}'")
    with path.open("w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow([L.OUTPUT_COLUMNS[c] for c in columns])
        for row in Y[:, list(columns)]:
            w.writerow([f"{v:.6g}" for v in row])


def plot(path: str | Path, Y: np.ndarray, title: str) -> None:
    """Four stacked panels: voltages, currents, speed, torques. Headless (Agg)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    t = Y[:, L.Y_TIME_S]
    fig, ax = plt.subplots(4, 1, sharex=True, figsize=(9, 9))
    ax[0].plot(t, Y[:, L.Y_VT_V], lw=0.6, label="terminal voltage")
    ax[0].plot(t, Y[:, L.Y_EMF_V], lw=1.0, label="EMF")
    ax[0].set_ylabel("V")
    ax[1].plot(t, Y[:, L.Y_IA_A], lw=0.6, label="armature current")
    ax[1].set_ylabel("A")
    a2 = ax[1].twinx()
    a2.plot(t, Y[:, L.Y_IF_A], color="tab:green", lw=1.0, label="field current")
    a2.set_ylabel("field A")
    ax[2].plot(t, Y[:, L.Y_SPEED_RPM], lw=1.0, label="speed")
    ax[2].set_ylabel("r/min")
    ax[3].plot(t, Y[:, L.Y_TORQUE_NM], lw=0.6, label="electromagnetic torque")
    ax[3].plot(t, Y[:, L.Y_LOAD_TORQUE_NM], lw=1.0, label="load torque")
    ax[3].set_ylabel("N m")
    ax[3].set_xlabel("time (s)")
    for a in ax:
        a.grid(True, alpha=0.3)
        a.legend(loc="upper right", fontsize=8)
    a2.legend(loc="lower right", fontsize=8)
    fig.suptitle(title)
    fig.tight_layout()
    # whole or absent: a Ctrl-C while saving must not leave a half-written PNG under its name
    import io

    from .record.rundir import write_atomic

    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110)
    plt.close(fig)
    write_atomic(path, buf.getvalue())
