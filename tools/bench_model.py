"""Speed of the model kernel: steps per second and real-time factor, printed as one markdown table.

Owns nothing but the measurement; it is a script (never imported by host or rtmodel, and it
imports nothing from tools/). What it measures, in one run:

  * every machine connection on a DC source at a 20 us step (one demo machine each),
  * the F3 stand on the switched 6-pulse bridge and on the averaged bridge, 10 us and 20 us,
  * each in frames of realistic length (n_sub = frame / dt steps per call, 1/300 s frames)
    and the per-call cost at n_sub = 1 (what a frame costs beyond its steps),
  * the first-run compile time (fresh process, NUMBA_CACHE_DIR an empty temp dir) and the
    cached start time (second fresh process, same cache dir),
  * a plain C anchor (tools/bench_c/sep_heun.c, compiled here with `cc -O2`): the same
    equations for the separately excited machine on a DC source, run for the same simulated
    time from the same state; its final state is compared with the kernel's.

Every timing is the best of --repeats runs (the machine may be shared; the best run is the
one least disturbed). No numbers are asserted anywhere: the table is for people to read.

Usage:
    PYTHONPATH=. python tools/bench_model.py             # full run (includes a ~25 s compile)
    PYTHONPATH=. python tools/bench_model.py --quick     # seconds; skips the cold compile
Options: --repeats N, --sim-seconds S, --no-compile, --no-c, --no-pin.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import platform
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from host.config import load  # noqa: E402
from host.errors import DcrigError  # noqa: E402
from host.params import KERNEL_ENV, pack  # noqa: E402
from host.shipped import shipped_dir  # noqa: E402
from rtmodel import layout as L  # noqa: E402

MACHINES = shipped_dir("machines")
CONVERTERS = shipped_dir("converters")
C_SOURCE = ROOT / "tools" / "bench_c" / "sep_heun.c"  # the plain anchor, cc -O2
C_TUNED_SEP = ROOT / "tools" / "bench_c" / "sep_tuned.c"  # the tuned references, cc -O3
C_TUNED_BRIDGE = ROOT / "tools" / "bench_c" / "bridge_tuned.c"
FRAME_S = 1.0 / 300.0  # one 6-pulse period at 50 Hz: the controller's natural update
# the targets of issue 12 (a kernel near the limit, cold compile)
TARGET_RTF_10US = 200.0  # switched bridge at 10 us on one core, x real time
TARGET_RATIO_TUNED = 1.3  # kernel ns/step at most this times the tuned C reference's
TARGET_COLD_COMPILE_S = 20.0  # demo configuration, empty NUMBA_CACHE_DIR, fresh process
TARGET_CACHED_START_S = 2.0  # the same with the cache filled: fresh process until the first frame
DEMO_MACHINE, DEMO_CONVERTER = "kestrel_f3_stand", "kestrel_f3_dual"  # what `dcrig demo` runs

# (label, machine stem, connection as the table names it)
DC_CASES = (
    ("separate", "kestrel_f3_stand", "separately excited"),
    ("shunt", "kestrel_shunt_fan", "shunt"),
    ("series", "kestrel_coil_hoist", "series"),
    ("compound_long", "kestrel_pinch_roll", "compound, long shunt, cumulative"),
    ("compound_short", "kestrel_test_stand", "compound, short shunt, differential"),
)
BRIDGE_MACHINE = "kestrel_f3_stand"
BRIDGE_CASES = (("switched bridge", "kestrel_f3_bridge"), ("averaged bridge", "kestrel_f3_averaged"))
LOAD_PU_F3 = 0.8  # the F3 stand's config has no load; run it at 0.8 of rated torque


# ------------------------------------------------------------------------------------ set-up
def _copper(r, temp_c, ref_c):
    return r * (235.0 + temp_c) / (235.0 + ref_c)  # IEC 60034-1, as in the kernel


def make_plant(machine: str, converter: str | None, dt_us: float):
    m = load("machine", MACHINES / f"{machine}.toml", [f"sim.dt_us={dt_us}"])
    c = load("converter", CONVERTERS / f"{converter}.toml") if converter else None
    return pack(m, c)


def operating_point(plant):
    """Initial state and inputs for a realistic run (not a start from a dead machine).

    DC source: the separate field is already at its steady current; the armature voltage is
    ramped up during the untimed settle (see settle()). Bridge: rated speed and field, firing
    angle for about LOAD_PU_F3 of rated current against LOAD_PU_F3 of rated torque."""
    p = plant.p
    v = plant.machine.values
    x = plant.new_state()
    u = plant.new_inputs()
    conn = int(p[L.P_CONNECTION])
    if plant.machine["machine.name"].startswith("Kestrel Bay F3"):
        u[L.U_LOAD_TORQUE_NM] = LOAD_PU_F3 * plant.derived["rated_torque_Nm"]
    rf_hot = _copper(p[L.P_RF_OHM], p[L.P_TEMP_FIELD_C], p[L.P_TEMP_REF_C]) + p[L.P_RHEO_OHM]
    if conn == L.CONN_SEPARATE and int(p[L.P_SUPPLY_KIND]) == L.SUPPLY_DC:
        x[L.X_I_FIELD_A] = u[L.U_FIELD_V] / rf_hot
    if plant.converter is not None:
        i_f = v["machine.rated_field_current_A"]
        x[L.X_I_FIELD_A] = i_f
        x[L.X_SPEED_RAD_S] = p[L.P_RATED_SPEED_RAD_S]
        # field bridge: mean output sqrt2/pi Vac (1 + cos a) = Rf_hot If
        vdo_f = math.sqrt(2.0) / math.pi * p[L.P_FIELD_VAC_V]
        u[L.U_FIELD_ALPHA_DEG] = math.degrees(math.acos(max(-1.0, min(1.0, rf_hot * i_f / vdo_f - 1.0))))
        u[L.U_FIELD_V] = rf_hot * i_f
        # armature: Vdo cos a = E + R I + Vb + 3/pi w Ls I (overlap drop, textbook formula)
        i_a = LOAD_PU_F3 * v["machine.rated_current_A"]
        e = plant.derived["emf_curve_at_rated_field_V"]
        w_mains = 2.0 * math.pi * p[L.P_MAINS_HZ]
        vd = e + plant.derived["ra_hot_ohm"] * i_a + p[L.P_BRUSH_DROP_V] + 3.0 / math.pi * w_mains * p[L.P_LS_H] * i_a
        vdo = 3.0 * math.sqrt(2.0) / math.pi * p[L.P_MAINS_VLL_V]
        u[L.U_ALPHA_DEG] = math.degrees(math.acos(max(-1.0, min(1.0, vd / vdo))))
        u[L.U_BRIDGE_SELECT] = 1.0
        u[L.U_CONTACTOR] = 1.0
    return x, u


def settle(step, plant, x, u, n_sub: int, ramp_s: float = 2.0, hold_s: float = 2.0):
    """Untimed run to a steady operating point: DC source ramped 0 -> its set voltage over
    ramp_s (frame by frame, as a host would), then held for hold_s."""
    y = np.zeros(L.N_OUTPUT)
    frame_s = n_sub * plant.dt_s
    status = 0
    vt_set = u[L.U_VT_V]
    dc = int(plant.p[L.P_SUPPLY_KIND]) == L.SUPPLY_DC
    n_ramp = int(ramp_s / frame_s) if dc else 0
    for k in range(n_ramp):
        u[L.U_VT_V] = vt_set * (k + 1) / n_ramp
        status |= step(x, plant.p, u, y, n_sub)
    u[L.U_VT_V] = vt_set
    for _ in range(int(hold_s / frame_s)):
        status |= step(x, plant.p, u, y, n_sub)
    return status


def flags_text(status: int, settle_status: int = 0) -> str:
    """Model status bits of the timed runs (and, apart, of the untimed settle)."""
    names = [name for bit, name in L.ST_NAMES.items() if status & bit]
    text = "flags " + (", ".join(names) if names else "none")
    pre = [name for bit, name in L.ST_NAMES.items() if settle_status & bit and not status & bit]
    return text + (f" (settle only: {', '.join(pre)})" if pre else "")


# ------------------------------------------------------------------------------------ timing
def time_frames(step, p, x_start, u, n_frames: int, n_sub: int, repeats: int, collect: bool = True):
    """Best wall and best CPU time (ns) of `repeats` runs of n_frames calls of n_sub steps, each
    from x_start. CPU time is this thread's: on a shared machine it leaves out the time other
    processes held the core, so it is the better guess of a dedicated core's wall time.
    Returns (best_wall_ns, best_cpu_ns, final state of the last run, OR of the status bits of
    every frame). collect=False keeps the status out of the timed loop (bare per-call cost)."""
    y = np.zeros(L.N_OUTPUT)
    best = math.inf
    best_cpu = math.inf
    status = 0
    x = x_start.copy()
    wall = time.perf_counter_ns
    cpu = time.thread_time_ns
    for _ in range(repeats):
        x[:] = x_start
        st = 0
        if collect:
            t0, c0 = wall(), cpu()
            for _ in range(n_frames):
                st |= step(x, p, u, y, n_sub)
            c1, t1 = cpu(), wall()
        else:
            t0, c0 = wall(), cpu()
            for _ in range(n_frames):
                step(x, p, u, y, n_sub)
            c1, t1 = cpu(), wall()
            st = int(y[L.Y_STATUS])
        status |= st
        best = min(best, t1 - t0)
        best_cpu = min(best_cpu, c1 - c0)
    return best, best_cpu, x, status


def frames_for(sim_s: float, n_sub: int, dt: float) -> int:
    return max(1, int(math.ceil(sim_s / (n_sub * dt))))


# ------------------------------------------------------------------------------------ compile
_CHILD = r"""
import json, resource, sys, time
t0 = time.perf_counter()
import numpy as np
from host.config import load
from host.params import pack
from rtmodel import layout as L
t1 = time.perf_counter()
import rtmodel.kernel as K
t2 = time.perf_counter()
plant = pack(load("machine", sys.argv[1]), load("converter", sys.argv[2]))
x, u, y = plant.new_state(), plant.new_inputs(), np.zeros(L.N_OUTPUT)
t3 = time.perf_counter()
plant.kernel()(x, plant.p, u, y, 1)
t4 = time.perf_counter()
cpu = resource.getrusage(resource.RUSAGE_SELF)
print(json.dumps({"import_kernel_s": t2 - t1, "first_call_s": t4 - t3, "in_process_s": t4 - t0,
                  "cpu_s": cpu.ru_utime + cpu.ru_stime}))
"""


def model_sources_stamp() -> tuple:
    """Modification times of the model's sources, to notice an edit between two fresh starts."""
    return tuple((f.name, f.stat().st_mtime_ns) for f in sorted((ROOT / "rtmodel").glob("*.py")))


def fresh_start(cache_dir: str | None) -> dict:
    """Import the kernel and make the first call in a fresh interpreter; times in s."""
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    if cache_dir is not None:
        env["NUMBA_CACHE_DIR"] = cache_dir
    t0 = time.perf_counter()
    out = subprocess.run([sys.executable, "-c", _CHILD, str(MACHINES / f"{DEMO_MACHINE}.toml"),
                          str(CONVERTERS / f"{DEMO_CONVERTER}.toml")],
                         capture_output=True, text=True, env=env, cwd=str(ROOT), timeout=600)
    wall = time.perf_counter() - t0
    if out.returncode != 0:
        return {"error": (out.stderr.strip().splitlines() or ["no output"])[-1]}
    res = json.loads(out.stdout.strip().splitlines()[-1])
    res["process_s"] = wall
    return res


# ------------------------------------------------------------------------------------ C anchor
def c_params(plant, x, u, n_frames: int, n_sub: int, repeats: int) -> str:
    p = plant.p
    if (int(p[L.P_AR_N]) != 0 or int(p[L.P_LOAD_KIND]) != L.LOAD_CONSTANT or u[L.U_LOAD_OHM] != 0.0
            or p[L.P_MAG_LINEAR] > 0.5):
        raise ValueError("the C anchor covers a machine without armature reaction, constant load, no load resistor")
    n = int(p[L.P_MAG_N])
    t_ref = p[L.P_TEMP_REF_C]
    smooth = p[L.P_FRICTION_SMOOTH_RAD_S] if hasattr(L, "P_FRICTION_SMOOTH_RAD_S") else None
    vals = {
        "dt_s": p[L.P_DT_S], "ra_ohm": p[L.P_RA_OHM], "la_H": p[L.P_LA_H],
        "brush_drop_V": p[L.P_BRUSH_DROP_V], "brush_knee_A": p[L.P_BRUSH_KNEE_A],
        "rf_hot_ohm": _copper(p[L.P_RF_OHM], p[L.P_TEMP_FIELD_C], t_ref) + p[L.P_RHEO_OHM],
        "lf_leak_H": p[L.P_LF_LEAK_H], "lm0_H": p[L.P_LM0_H], "slope0_V_per_A": p[L.P_MAG_SLOPE0],
        "w_curve_rad_s": p[L.P_MAG_SPEED_RAD_S], "t_ref_C": t_ref,
        "j_total_kgm2": p[L.P_J_KGM2] + p[L.P_J_LOAD_KGM2], "viscous_Nm_s": p[L.P_VISCOUS_NM_S],
        "coulomb_Nm": p[L.P_COULOMB_NM],
        # the kernel's law for passive torques: smoothed sign (older layouts) or projection
        "mechanics_law": 0 if smooth is not None else 1, "w_smooth_rad_s": smooth or 0.0,
        "field_sign": p[L.P_FIELD_SIGN] if hasattr(L, "P_FIELD_SIGN") else 1.0,
        "load_torque_Nm": u[L.U_LOAD_TORQUE_NM], "v_source_V": u[L.U_VT_V],
        "r_source_ohm": p[L.P_DC_SOURCE_OHM], "v_field_V": u[L.U_FIELD_V],
        "thermal_rise_K": p[L.P_THERMAL_RISE_K], "thermal_tau_s": p[L.P_THERMAL_TAU_S],
        "ambient_C": p[L.P_TEMP_AMBIENT_C],
        "loss_rated": p[L.P_RATED_IA_A] ** 2 * (235.0 + p[L.P_TEMP_AMBIENT_C] + p[L.P_THERMAL_RISE_K]),
        "thermal_frozen": 1.0 if p[L.P_THERMAL_FROZEN] > 0.5 else 0.0,
        "ia0_A": x[L.X_I_LINE_A], "if0_A": x[L.X_I_FIELD_A], "w0_rad_s": x[L.X_SPEED_RAD_S],
        "angle0_rad": x[L.X_ANGLE_RAD], "temp0_C": x[L.X_TEMP_ARM_C],
        "n_frames": n_frames, "n_sub": n_sub, "repeats": repeats,
    }  # fmt: skip
    lines = [f"{k} {float(v_):.17g}" for k, v_ in vals.items()]
    for name, base in (("curve_i", L.P_MAG_I0), ("curve_e", L.P_MAG_E0), ("curve_d", L.P_MAG_D0)):
        lines.append(f"{name} {n} " + " ".join(f"{float(p[base + k]):.17g}" for k in range(n)))
    return "\n".join(lines) + "\n"


def bridge_c_params(plant, x, u, n_frames: int, n_sub: int, repeats: int) -> str:
    """Parameter file of tools/bench_c/bridge_tuned.c: the switched-bridge case's parameters,
    inputs (already clipped and combined the way step_frame combines them) and full state."""
    p = plant.p
    fault_inputs = (L.U_MISFIRE_MASK, L.U_SHORT_MASK, L.U_FUSE_BLOWN_MASK, L.U_PHASE_LOST, L.U_PHASE_REVERSED,
                    L.U_PULSES_BLOCKED, L.U_FIELD_OPEN, L.U_ARMATURE_SHORT, L.U_LOCKED_ROTOR, L.U_COUPLING_BROKEN)
    if (int(p[L.P_SUPPLY_KIND]) != L.SUPPLY_BRIDGE or int(p[L.P_CONNECTION]) != L.CONN_SEPARATE
            or int(p[L.P_FIELD_SUPPLY_KIND]) != L.FIELD_SUPPLY_AVERAGED or int(p[L.P_LOAD_KIND]) != L.LOAD_CONSTANT
            or int(p[L.P_AR_N]) != 0 or p[L.P_MAG_LINEAR] > 0.5
            or any(u[k] != 0.0 for k in fault_inputs) or u[L.U_CONTACTOR] < 0.5
            or int(u[L.U_BRIDGE_SELECT]) != 1 or u[L.U_MAINS_PU] != 1.0):
        raise ValueError("the bridge reference covers a separately excited machine on one switched bridge, averaged "
                         "field bridge, constant load, no armature reaction, no fault input, contactor closed")
    n = int(p[L.P_MAG_N])
    t_ref = p[L.P_TEMP_REF_C]
    alpha = min(max(u[L.U_ALPHA_DEG] * (math.pi / 180.0), p[L.P_ALPHA_MIN_RAD]), p[L.P_ALPHA_MAX_RAD])
    alpha_f = min(max(u[L.U_FIELD_ALPHA_DEG] * (math.pi / 180.0), p[L.P_FIELD_ALPHA_MIN_RAD]), math.pi)
    vals = {
        "dt_s": p[L.P_DT_S], "ra_ohm": p[L.P_RA_OHM], "la_H": p[L.P_LA_H],
        "brush_drop_V": p[L.P_BRUSH_DROP_V], "brush_knee_A": p[L.P_BRUSH_KNEE_A],
        "rf_hot_ohm": _copper(p[L.P_RF_OHM], p[L.P_TEMP_FIELD_C], t_ref) + p[L.P_RHEO_OHM],
        "lf_leak_H": p[L.P_LF_LEAK_H], "lm0_H": p[L.P_LM0_H], "slope0_V_per_A": p[L.P_MAG_SLOPE0],
        "w_curve_rad_s": p[L.P_MAG_SPEED_RAD_S], "t_ref_C": t_ref,
        "j_total_kgm2": p[L.P_J_KGM2] + p[L.P_J_LOAD_KGM2], "viscous_Nm_s": p[L.P_VISCOUS_NM_S],
        "coulomb_Nm": p[L.P_COULOMB_NM], "load_torque_Nm": u[L.U_LOAD_TORQUE_NM], "field_sign": p[L.P_FIELD_SIGN],
        "thermal_rise_K": p[L.P_THERMAL_RISE_K], "thermal_tau_s": p[L.P_THERMAL_TAU_S],
        "ambient_C": p[L.P_TEMP_AMBIENT_C],
        "loss_rated": p[L.P_RATED_IA_A] ** 2 * (235.0 + p[L.P_TEMP_AMBIENT_C] + p[L.P_THERMAL_RISE_K]),
        "thermal_frozen": 1.0 if p[L.P_THERMAL_FROZEN] > 0.5 else 0.0,
        "phase_peak_V": p[L.P_MAINS_VLL_V] / math.sqrt(3.0) * math.sqrt(2.0) * u[L.U_MAINS_PU],
        "mains_Hz": p[L.P_MAINS_HZ] + u[L.U_MAINS_HZ_DEV], "rs_ohm": p[L.P_RS_OHM], "ls_H": p[L.P_LS_H],
        "alpha_rad": alpha, "gate_pulse_rad": p[L.P_GATE_PULSE_RAD], "turn_off_s": p[L.P_TURN_OFF_S],
        "field_vac_V": p[L.P_FIELD_VAC_V] * u[L.U_MAINS_PU], "field_alpha_rad": alpha_f,
        "i_line_A": x[L.X_I_LINE_A], "i_field_A": x[L.X_I_FIELD_A], "w_rad_s": x[L.X_SPEED_RAD_S],
        "angle_rad": x[L.X_ANGLE_RAD], "temp_C": x[L.X_TEMP_ARM_C], "t_s": x[L.X_TIME_S],
        "mains_angle_rad": x[L.X_MAINS_ANGLE_RAD], "vt_V": x[L.X_VT_V], "bridge_active": x[L.X_BRIDGE_ACTIVE],
        "zero_current_s": x[L.X_ZERO_CURRENT_S], "pulse_vint": x[L.X_PULSE_VINT], "pulse_t_s": x[L.X_PULSE_T_S],
        "pulse_vavg_V": x[L.X_PULSE_VAVG_V], "last_fired_up": x[L.X_LAST_FIRED_UP],
        "last_fired_low": x[L.X_LAST_FIRED_LOW], "latched_alpha_rad": x[L.X_LATCHED_ALPHA_RAD],
        "n_frames": n_frames, "n_sub": n_sub, "repeats": repeats,
    }  # fmt: skip
    lines = [f"{k} {float(v_):.17g}" for k, v_ in vals.items()]
    arrays = (("curve_i", L.P_MAG_I0, n, p), ("curve_e", L.P_MAG_E0, n, p), ("curve_d", L.P_MAG_D0, n, p),
              ("ph_i_A", L.X_PH_I0, 3, x), ("thy_on", L.X_THY_ON0, 6, x), ("thy_off_s", L.X_THY_OFF_S0, 6, x),
              ("thy_fire_at_rad", L.X_THY_FIRE_AT0, 6, x), ("thy_gate_rad", L.X_THY_GATE0, 6, x))
    for name, base, m, arr in arrays:
        lines.append(f"{name} {m} " + " ".join(f"{float(arr[base + k]):.17g}" for k in range(m)))
    return "\n".join(lines) + "\n"


# (name in the C output, state index) compared between the kernel and a C reference
SEP_COMPARE = (("ia", "ia_A", L.X_I_LINE_A), ("if", "if_A", L.X_I_FIELD_A), ("speed", "w_rad_s", L.X_SPEED_RAD_S),
               ("temp", "temp_C", L.X_TEMP_ARM_C), ("angle", "angle_rad", L.X_ANGLE_RAD))
BRIDGE_COMPARE = (("ia", "i_line_A", L.X_I_LINE_A), ("if", "i_field_A", L.X_I_FIELD_A),
                  ("speed", "w_rad_s", L.X_SPEED_RAD_S), ("temp", "temp_C", L.X_TEMP_ARM_C),
                  ("angle", "angle_rad", L.X_ANGLE_RAD), ("mains", "mains_angle_rad", L.X_MAINS_ANGLE_RAD),
                  ("vt", "vt_V", L.X_VT_V), ("pulse mean vt", "pulse_vavg_V", L.X_PULSE_VAVG_V))


def compile_c(source: Path, opt: str, workdir: Path) -> tuple[Path | None, str]:
    """Compile one bench_c file; returns (executable or None, compiler line or error)."""
    cc = shutil.which("cc")
    if cc is None:
        return None, "no C compiler (cc) on PATH"
    exe = workdir / f"{source.stem}{opt}"
    comp = subprocess.run([cc, opt, "-o", str(exe), str(source), "-lm"], capture_output=True, text=True)
    if comp.returncode != 0:
        return None, "cc failed: " + (comp.stderr.strip().splitlines() or ["?"])[0]
    ver = subprocess.run([cc, "--version"], capture_output=True, text=True).stdout.splitlines()
    return exe, (ver[0] if ver else cc)


def parse_c_output(text: str) -> dict:
    res = {}
    for line in text.splitlines():
        parts = line.split()
        if len(parts) == 2:
            res[parts[0]] = float(parts[1])
        elif len(parts) > 2:
            res[parts[0]] = [float(v) for v in parts[2:]]
    return res


def run_c(source: Path, opt: str, params_text: str, workdir: Path) -> dict:
    exe, info = compile_c(source, opt, workdir)
    if exe is None:
        return {"error": info}
    par = workdir / f"{source.stem}_params.txt"
    par.write_text(params_text)
    run = subprocess.run([str(exe), str(par)], capture_output=True, text=True, timeout=600)
    if run.returncode != 0:
        return {"error": run.stderr.strip() or f"exit {run.returncode}"}
    res = parse_c_output(run.stdout)
    res["cc"] = info
    res["exe"] = str(exe)
    res["params"] = str(par)
    return res


def state_diffs(x_kernel, c: dict, compare) -> tuple[str, float]:
    """Relative final-state differences kernel vs C, as text, and the largest of them."""
    out = []
    worst = 0.0
    for name, key, idx in compare:
        a = float(x_kernel[idx])
        b = c[key]
        rel = abs(a - b) / max(abs(a), abs(b), 1e-30)
        worst = max(worst, rel)
        out.append(f"{name} {rel:.1e}")
    if "ph_i_A" in c:
        scale = max(abs(float(x_kernel[L.X_I_LINE_A])), 1e-30)
        rel = max(abs(float(x_kernel[L.X_PH_I0 + k]) - c["ph_i_A"][k]) for k in range(3)) / scale
        worst = max(worst, rel)
        out.append(f"line currents {rel:.1e} of Ia")
        same = all((float(x_kernel[L.X_THY_ON0 + k]) > 0.5) == (c["thy_on"][k] > 0.5) for k in range(6))
        out.append("conducting devices " + ("same" if same else "DIFFER"))
        if not same:
            worst = math.inf
    return ", ".join(out), worst


# ------------------------------------------------------------------------------------ instruction counts
COUNT_HEAD = ("counted", "step us", "n (steps)", "instructions/step", "notes")

C_COUNT_MARKS = ROOT / "tools" / "bench_c" / "count_marks.c"

# Under valgrind the kernel must come from the cache, not be compiled (that would take an
# hour): the child therefore names the host CPU the way the parent's numba saw it, because
# valgrind's virtual CPU reports fewer features and numba keys its cache on them. The child
# runs uninstrumented until its imports and a warm-up call are done (count_marks.c), then
# counts one kernel call of n and one of 2n steps per case, one profile dump each.
_COUNT_CHILD = r"""
import ctypes, sys
import numpy as np
from rtmodel import layout as L
from rtmodel.kernel import kernel_for, step_frame
marks = ctypes.CDLL(sys.argv[1])
n = int(sys.argv[2])
builds = sys.argv[3].split(",")
cases = [np.load(f) for f in sys.argv[4:]]
y = np.zeros(L.N_OUTPUT)
runs = []
for d in cases:
    for b in builds:
        f = step_frame if b == "generic" else kernel_for(d["p"])
        f(d["x"].copy(), d["p"], d["u"], y, 1)
        runs.append((f, d, [d["x"].copy(), d["x"].copy()]))
marks.count_start()
for i, (f, d, xs) in enumerate(runs):
    for j, k in enumerate((n, 2 * n)):
        marks.count_zero()
        f(xs[j], d["p"], d["u"], y, k)
        marks.count_dump(f"run{i}_{k}".encode())
"""


def _callgrind_totals(base: Path) -> list[int]:
    """Instruction totals of the dumps base.1, base.2, ... in dump order (the final one, at exit, not)."""
    files = [f for f in base.parent.glob(base.name + ".*") if f.suffix[1:].isdigit()]
    totals = []
    for f in sorted(files, key=lambda f: int(f.suffix[1:])):
        for line in f.read_text(errors="replace").splitlines():
            if line.startswith(("totals:", "summary:")):
                totals.append(int(line.split()[1]))
                break
    return totals


def count_kernel_instructions(cases, builds, n: int, workdir: Path) -> list[tuple[str, str]]:
    """Kernel instructions per step for each (p, x, u) case and build ("generic",
    "specialised"), in that order, all in one valgrind run."""
    n_runs = len(cases) * len(builds)
    valgrind = shutil.which("valgrind")
    cc = shutil.which("cc")
    if valgrind is None or cc is None:
        return [("-", "no valgrind or no cc on PATH")] * n_runs
    lib = workdir / "libcount_marks.so"
    comp = subprocess.run([cc, "-O2", "-shared", "-fPIC", "-o", str(lib), str(C_COUNT_MARKS)], capture_output=True,
                          text=True)
    if comp.returncode != 0:
        return [("-", "count markers do not build (valgrind/callgrind.h missing?)")] * n_runs
    from numba.core.registry import cpu_target

    _triple, cpu_name, features = cpu_target.target_context.codegen().magic_tuple()
    if "+avx512f" in features:
        # valgrind does not run AVX-512 code (an AVX-512 host, e.g. znver4/5, gave "0 dumps"):
        # count a build for x86-64-v3 (AVX2), compiled outside valgrind first so that the run
        # under valgrind loads it from the cache. The counts then describe that build.
        cpu_name, features = "x86-64-v3", None
    files = []
    for i, (p, x, u) in enumerate(cases):
        files.append(workdir / f"count_case{i}.npz")
        np.savez(files[-1], x=x, p=p, u=u)
    base = workdir / "cg_kernel"
    env = dict(os.environ, NUMBA_CPU_NAME=cpu_name)
    env.pop("NUMBA_CPU_FEATURES", None)
    if features is not None:
        env["NUMBA_CPU_FEATURES"] = features
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    child = [sys.executable, "-c", _COUNT_CHILD, str(lib), str(n), ",".join(builds), *map(str, files)]
    try:
        # compile (or load) the builds for this CPU name outside valgrind: a compile under it
        # takes many minutes
        subprocess.run(child, capture_output=True, text=True, env=env, cwd=str(ROOT), timeout=900, check=True)
    except (subprocess.TimeoutExpired, subprocess.CalledProcessError) as err:
        return [("-", f"the counting child failed outside valgrind ({err.__class__.__name__})")] * n_runs
    try:
        run = subprocess.run([valgrind, "--tool=callgrind", "--instr-atstart=no", f"--callgrind-out-file={base}",
                              sys.executable, "-c", _COUNT_CHILD, str(lib), str(n), ",".join(builds),
                              *map(str, files)], capture_output=True, text=True, env=env, cwd=str(ROOT), timeout=900)
    except subprocess.TimeoutExpired:
        return [("-", "valgrind run over 900 s (kernel not in the cache?)")] * n_runs
    totals = _callgrind_totals(base)
    if run.returncode != 0 or len(totals) < 2 * n_runs:
        why = (run.stderr.strip().splitlines() or ["no output"])[-1]
        return [("-", f"valgrind failed ({len(totals)} dumps): {why}")] * n_runs
    out = []
    for i in range(n_runs):
        t1, t2 = totals[2 * i], totals[2 * i + 1]
        out.append((f"{(t2 - t1) / n:.0f}", f"one call of n steps {t1:,} instructions, of 2n {t2:,}; "
                                           f"numba build for {cpu_name}"))
    return out


def count_c_instructions(c: dict, n: int, workdir: Path) -> tuple[str, str]:
    """A C reference's instructions per step: two runs of one frame (n and 2n steps)."""
    valgrind = shutil.which("valgrind")
    if valgrind is None:
        return "-", "no valgrind on PATH"
    base_text = Path(c["params"]).read_text()
    totals = []
    for k in (n, 2 * n):
        lines = [ln for ln in base_text.splitlines() if ln.split()[0] not in ("n_frames", "n_sub", "repeats")]
        par = workdir / f"count_{k}.txt"
        par.write_text("\n".join(lines + ["n_frames 1", f"n_sub {k}", "repeats 1"]) + "\n")
        out = workdir / f"cg_c_{k}"
        run = subprocess.run([valgrind, "--tool=callgrind", f"--callgrind-out-file={out}", c["exe"], str(par)],
                             capture_output=True, text=True, timeout=600)
        got = [int(ln.split()[1]) for ln in out.read_text().splitlines() if ln.startswith(("totals:", "summary:"))] \
            if out.exists() else []
        if run.returncode != 0 or not got:
            return "-", "valgrind failed: " + ((run.stderr.strip().splitlines() or ["no output"])[-1])
        totals.append(got[0])
    return f"{(totals[1] - totals[0]) / n:.0f}", f"whole program: {totals[0]:,} for n steps, {totals[1]:,} for 2n"


# ------------------------------------------------------------------------------------ report
def cpu_model() -> str:
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.lower().startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown CPU"


def load_avg() -> str:
    try:
        return " ".join(f"{v:.2f}" for v in os.getloadavg())
    except OSError:
        return "n/a"


def pin_one_core() -> str:
    try:
        cpus = sorted(os.sched_getaffinity(0))
        os.sched_setaffinity(0, {cpus[-1]})
        return f"pinned to CPU {cpus[-1]} of {len(cpus)}"
    except (AttributeError, OSError) as err:
        return f"not pinned ({err})"


class Table:
    HEAD = ("measurement", "machine (connection)", "supply", "step us", "steps/call", "steps/s",
            "ns/step", "x real time", "CPU time: ns/step, x real time", "notes")

    def __init__(self, head=None):
        self.head = tuple(head or self.HEAD)
        self.rows: list[tuple] = []

    def add(self, *cells):
        self.rows.append(tuple(str(c).replace("|", "/") for c in cells))  # a cell never splits the row

    def markdown(self) -> str:
        out = ["| " + " | ".join(self.head) + " |", "|" + "|".join("---" for _ in self.head) + "|"]
        out += ["| " + " | ".join(r) + " |" for r in self.rows]
        return "\n".join(out)


def _cpu(cpu_ns: float, steps: int, dt: float) -> str:
    return f"{cpu_ns / steps:.1f} ns, {steps * dt / (cpu_ns * 1e-9):.0f}x"


def _si(v: float) -> str:
    return f"{v / 1e6:.2f} M" if v >= 1e6 else f"{v / 1e3:.1f} k"


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="short runs, no cold compile (for smoke tests)")
    ap.add_argument("--repeats", type=int, default=None, help="runs per measurement, best reported (default 5, quick 2)")
    ap.add_argument("--sim-seconds", type=float, default=None, help="simulated time per run (default 10, quick 0.2)")
    ap.add_argument("--no-compile", action="store_true", help="skip the fresh-process compile and cached-start runs")
    ap.add_argument("--no-c", action="store_true", help="skip the C anchor")
    ap.add_argument("--no-pin", action="store_true", help="do not pin this process to one CPU")
    ap.add_argument("--count", dest="count", action="store_true", default=None,
                    help="count instructions per step under valgrind (default on, off with --quick)")
    ap.add_argument("--no-count", dest="count", action="store_false", help="skip the instruction counts")
    args = ap.parse_args(argv)
    if args.count is None:
        args.count = not args.quick
    repeats = args.repeats if args.repeats is not None else (2 if args.quick else 5)
    sim_s = args.sim_seconds if args.sim_seconds is not None else (0.2 if args.quick else 10.0)
    if repeats < 1 or not sim_s > 0:
        print("error: --repeats must be >= 1 and --sim-seconds > 0", file=sys.stderr)
        return 2
    n_calls_1 = 2000 if args.quick else 200_000

    import numba

    load_before = load_avg()
    table = Table()
    count_table = None
    verdict = []
    workdir = Path(tempfile.mkdtemp(prefix="dcrig-bench-"))
    try:
        # compile time first, in fresh processes, before this process warms anything up
        starts = {}  # "first-run compile" / "cached start" -> fresh_start() result
        demo = "F3 stand, dual bridge (demo)"
        if args.no_compile:
            pass
        elif args.quick:
            r = fresh_start(None)
            if "error" in r:
                table.add("cached start (project cache)", demo, "-", "-", "-", "-", "-", "-", "-", "failed: " + r["error"])
            else:
                table.add("cached start (project cache)", demo, "-", "-", "-", "-", "-", "-", "-",
                          f"import kernel {r['import_kernel_s']:.2f} s + first call {r['first_call_s']:.2f} s; "
                          f"fresh process total {r['process_s']:.2f} s, CPU {r['cpu_s']:.2f} s "
                          f"(cold compile skipped in --quick)")
        else:
            cache = str(workdir / "numba_cache")
            os.makedirs(cache)
            for label, note in (("first-run compile", "empty NUMBA_CACHE_DIR"),
                                ("cached start", "same NUMBA_CACHE_DIR, second fresh process")):
                before = model_sources_stamp()
                r = fresh_start(cache)
                if model_sources_stamp() != before or (label == "cached start" and stamp_first != before):
                    # numba keys its cache on the source files: an edit in between forces a compile
                    note += "; INVALID: rtmodel sources changed during the run (being edited?), rerun"
                stamp_first = before
                starts[label] = r
                if "error" in r:
                    table.add(label, demo, "-", "-", "-", "-", "-", "-", "-", "failed: " + r["error"])
                    continue
                table.add(label, demo, "-", "-", "-", "-", "-", "-", "-",
                          f"import kernel {r['import_kernel_s']:.2f} s + first call {r['first_call_s']:.2f} s; "
                          f"fresh process total {r['process_s']:.2f} s, CPU {r['cpu_s']:.2f} s ({note})")

        pin = "not pinned (--no-pin)" if args.no_pin else pin_one_core()
        try:
            from rtmodel.kernel import step_frame as generic
        except ImportError as err:  # the model is being edited: say so in one line
            print(f"error: rtmodel.kernel does not import: {err}", file=sys.stderr)
            return 1

        # warm the generic dispatcher (compile or cache load) outside every timed region; each
        # case's own build is warmed by its untimed settle run
        warm = make_plant("kestrel_f3_stand", None, 20.0)
        generic(warm.new_state(), warm.p, warm.new_inputs(), np.zeros(L.N_OUTPUT), 1)
        specialised = os.environ.get(KERNEL_ENV, "specialised") != "generic"

        def old_path_row(label, plant, supply, x, u, n_frames, n_sub, ns_new, cpu_new):
            """The generic build (the kernel before specialisation) on the same run, beside the new one."""
            if not specialised:
                return
            dt = plant.dt_s
            ns, cpu_ns, _, _ = time_frames(generic, plant.p, x, u, n_frames, n_sub, repeats)
            steps = n_frames * n_sub
            sps = steps / (ns * 1e-9)
            table.add(f"generic build, {label}", "F3 stand (separately excited)", supply, f"{dt * 1e6:g}", n_sub,
                      _si(sps), f"{ns / steps:.1f}", f"{sps * dt:.0f}", _cpu(cpu_ns, steps, dt),
                      f"the old path (step_frame, codes read at run time); the specialised build is "
                      f"{ns / ns_new:.2f}x faster on wall time, {cpu_ns / cpu_new:.2f}x on CPU time")

        sep_run = None
        for label, stem, conn_text in DC_CASES:
            plant = make_plant(stem, None, 20.0)
            dt = plant.dt_s
            n_sub = max(1, round(FRAME_S / dt))
            x, u = operating_point(plant)
            step = plant.kernel()
            st0 = settle(step, plant, x, u, n_sub)
            n_frames = frames_for(sim_s, n_sub, dt)
            ns, cpu_ns, x_end, st = time_frames(step, plant.p, x, u, n_frames, n_sub, repeats)
            steps = n_frames * n_sub
            sps = steps / (ns * 1e-9)
            table.add(f"DC source, {label}", f"{plant.machine['machine.name'].replace('Kestrel Bay ', '')} ({conn_text})",
                      "DC source", f"{dt * 1e6:g}", n_sub, _si(sps), f"{ns / steps:.1f}", f"{sps * dt:.0f}",
                      _cpu(cpu_ns, steps, dt),
                      f"{steps * dt:.1f} s simulated per run; speed {x_end[L.X_SPEED_RAD_S] * 30 / math.pi:.0f} r/min; "
                      f"{flags_text(st, st0)}")
            if label == "separate":
                sep_run = (plant, x.copy(), u.copy(), n_frames, n_sub, ns, cpu_ns, x_end.copy())
                old_path_row("DC source, separate", plant, "DC source", x, u, n_frames, n_sub, ns, cpu_ns)
                # per-call cost: the same plant, one step per call
                ns1, cpu1, _, _ = time_frames(step, plant.p, x, u, n_calls_1, 1, repeats, collect=False)
                per_call = ns1 / n_calls_1
                table.add("per call, n_sub=1", "F3 stand (separately excited)", "DC source", f"{dt * 1e6:g}", 1,
                          _si(1e9 / per_call), f"{per_call:.1f}", f"{dt / (per_call * 1e-9):.0f}",
                          _cpu(cpu1, n_calls_1, dt),
                          f"{per_call:.0f} ns per call; overhead beyond one step {per_call - ns / steps:.0f} ns "
                          f"(CPU time {(cpu1 / n_calls_1) - cpu_ns / steps:.0f} ns)")

        rtf_10 = {}
        bridge_run = None
        for dt_us in (10.0, 20.0):
            for label, conv in BRIDGE_CASES:
                plant = make_plant(BRIDGE_MACHINE, conv, dt_us)
                dt = plant.dt_s
                n_sub = max(1, round(FRAME_S / dt))
                x, u = operating_point(plant)
                step = plant.kernel()
                st0 = settle(step, plant, x, u, n_sub, ramp_s=0.0, hold_s=2.0)
                n_frames = frames_for(sim_s, n_sub, dt)
                ns, cpu_ns, x_end, st = time_frames(step, plant.p, x, u, n_frames, n_sub, repeats)
                steps = n_frames * n_sub
                sps = steps / (ns * 1e-9)
                if dt_us == 10.0:
                    rtf_10[label] = (sps * dt, steps * dt / (cpu_ns * 1e-9))
                ia = float(plant.p[L.P_RATED_IA_A])
                table.add(f"{label}, frame", "F3 stand (separately excited)", plant.converter["converter.name"],
                          f"{dt_us:g}", n_sub, _si(sps), f"{ns / steps:.1f}", f"{sps * dt:.0f}",
                          _cpu(cpu_ns, steps, dt),
                          f"alpha {u[L.U_ALPHA_DEG]:.1f} deg, {LOAD_PU_F3:g} pu load; speed "
                          f"{x_end[L.X_SPEED_RAD_S] * 30 / math.pi:.0f} r/min, Ia {x_end[L.X_I_LINE_A] / ia:.2f} pu; "
                          f"{flags_text(st, st0)}")
                if dt_us == 10.0 and label == "switched bridge":
                    bridge_run = (plant, x.copy(), u.copy(), n_frames, n_sub, ns, cpu_ns, x_end.copy())
                    old_path_row("switched bridge, frame", plant, plant.converter["converter.name"], x, u, n_frames,
                                 n_sub, ns, cpu_ns)
                    ns1, cpu1, _, _ = time_frames(step, plant.p, x, u, n_calls_1, 1, repeats, collect=False)
                    per_call = ns1 / n_calls_1
                    table.add("per call, n_sub=1", "F3 stand (separately excited)", plant.converter["converter.name"],
                              f"{dt_us:g}", 1, _si(1e9 / per_call), f"{per_call:.1f}", f"{dt / (per_call * 1e-9):.0f}",
                              _cpu(cpu1, n_calls_1, dt),
                              f"{per_call:.0f} ns per call; overhead beyond one step {per_call - ns / steps:.0f} ns "
                              f"(CPU time {(cpu1 / n_calls_1) - cpu_ns / steps:.0f} ns)")

        # C references, each run for the same simulated time from the same state as the kernel
        ratios = {}  # case -> (kernel / tuned C wall, CPU time)
        c_runs = []  # (label, case text, C source, opt, params text, kernel run, compare, ratio key)
        if sep_run is not None:
            plant, x0, u0, n_frames, n_sub, _, _, _ = sep_run
            try:
                text = c_params(plant, x0, u0, n_frames, n_sub, repeats)
                c_runs.append(("C anchor (cc -O2)", "DC source", C_SOURCE, "-O2", text, sep_run, SEP_COMPARE, None))
                c_runs.append(("tuned C (cc -O3)", "DC source", C_TUNED_SEP, "-O3", text, sep_run, SEP_COMPARE,
                               "separately excited on a DC source"))
            except ValueError as err:
                table.add("C anchor", "F3 stand (separately excited)", "DC source", *["-"] * 6, "failed: " + str(err))
        if bridge_run is not None:
            plant, x0, u0, n_frames, n_sub, _, _, _ = bridge_run
            try:
                text = bridge_c_params(plant, x0, u0, n_frames, n_sub, repeats)
                c_runs.append(("tuned C bridge (cc -O3)", plant.converter["converter.name"], C_TUNED_BRIDGE, "-O3",
                               text, bridge_run, BRIDGE_COMPARE, "switched bridge at 10 us"))
            except ValueError as err:
                table.add("tuned C bridge", "F3 stand (separately excited)", "-", *["-"] * 6, "failed: " + str(err))
        count_cases = []  # (label, executable, params text) for the instruction counts
        for label, supply, src, opt, text, krun, compare, key in ([] if args.no_c else c_runs):
            plant, x0, u0, n_frames, n_sub, ns_k, cpu_k, x_k = krun
            c = run_c(src, opt, text, workdir)
            if "error" in c:
                table.add(label, "F3 stand (separately excited)", supply, *["-"] * 6, "failed: " + c["error"])
                continue
            steps = int(c["steps"])
            dt = plant.dt_s
            sps_c = steps / (c["best_ns"] * 1e-9)
            diffs, worst = state_diffs(x_k, c, compare)
            table.add(label, "F3 stand (separately excited)", supply, f"{dt * 1e6:g}", n_sub, _si(sps_c),
                      f"{c['best_ns'] / steps:.1f}", f"{sps_c * dt:.0f}", _cpu(c["best_cpu_ns"], steps, dt),
                      f"{c['cc']}; tools/bench_c/{src.name}; same {steps * dt:.1f} s from the same state")
            wall_ratio = ns_k / c["best_ns"]
            cpu_ratio = cpu_k / c["best_cpu_ns"]
            same = "same state" if worst < 1e-9 else "NOT THE SAME STATE: the C file no longer follows the kernel"
            if key is None:
                table.add("numba / C", "F3 stand (separately excited)", supply, f"{dt * 1e6:g}", n_sub,
                          f"{1 / wall_ratio:.2f}", "-", "-", f"{1 / cpu_ratio:.2f}",
                          f"speed ratio numba/C {1 / wall_ratio:.2f} wall, {1 / cpu_ratio:.2f} CPU time; final state "
                          f"relative difference abs(numba - C) / abs(value): {diffs} ({same})")
            else:
                ratios[key] = (wall_ratio, cpu_ratio)
                table.add(f"kernel / {label.split(' (')[0]}", "F3 stand (separately excited)", supply,
                          f"{dt * 1e6:g}", n_sub, f"{wall_ratio:.2f}", "-", "-", f"{cpu_ratio:.2f}",
                          f"kernel ns/step over the tuned C reference's: {wall_ratio:.2f} wall, {cpu_ratio:.2f} CPU time "
                          f"(target <= {TARGET_RATIO_TUNED:g}); final state relative difference: {diffs} ({same})")
            count_cases.append((label, krun, c))

        if args.count and not args.no_c:
            counts = Table(COUNT_HEAD)
            kcases = []  # one kernel count per case (the anchor and the tuned C share the DC one)
            for label, krun, c in count_cases:
                if not any(k is krun for k in kcases):
                    kcases.append(krun)
            n_count = 333
            builds = ["generic", "specialised"] if specialised else ["generic"]
            got = iter(count_kernel_instructions([(k[0].p, k[1], k[2]) for k in kcases], builds, n_count, workdir))
            for krun in kcases:
                supply = "DC source" if krun is sep_run else krun[0].converter["converter.name"]
                for b in builds:
                    per_step, note = next(got)
                    counts.add(f"kernel, {b} build, {supply}", f"{krun[0].dt_s * 1e6:g}", n_count, per_step, note)
                for label, krun_c, c in count_cases:
                    if krun_c is krun:
                        per_step, note = count_c_instructions(c, n_count, workdir)
                        counts.add(f"{label}, {supply}", f"{krun[0].dt_s * 1e6:g}", n_count, per_step, note)
            count_table = counts

        # a ratio is judged on this thread's CPU time: both sides ran on the same pinned core, and
        # a run preempted by another process would otherwise decide it (its wall ratio is beside)
        for key, (wall_ratio, cpu_ratio) in ratios.items():
            met = "MET" if cpu_ratio <= TARGET_RATIO_TUNED else "NOT MET"
            verdict.append(f"target: kernel within {TARGET_RATIO_TUNED:g}x of the tuned C reference, {key}: measured "
                           f"{cpu_ratio:.2f}x on CPU time -> {met} (wall time {wall_ratio:.2f}x)")
        got = rtf_10.get("switched bridge")
        if got is not None:
            rtf, rtf_cpu = got
            met = "MET" if rtf >= TARGET_RTF_10US else "NOT MET"
            verdict.append(f"target: switched bridge at 10 us >= {TARGET_RTF_10US:.0f}x real time on one core: "
                           f"measured {rtf:.0f}x -> {met} (on CPU time {rtf_cpu:.0f}x -> "
                           f"{'met' if rtf_cpu >= TARGET_RTF_10US else 'not met'})"
                           + (f"; averaged bridge in the same run: {rtf_10['averaged bridge'][0]:.0f}x "
                              f"(CPU time {rtf_10['averaged bridge'][1]:.0f}x)" if "averaged bridge" in rtf_10 else ""))
        for key, target in (("first-run compile", TARGET_COLD_COMPILE_S), ("cached start", TARGET_CACHED_START_S)):
            r = starts.get(key)
            if r is None or "error" in r:
                why = "not measured (--quick or --no-compile)" if r is None else "failed: " + r["error"]
                verdict.append(f"target: {key} of the demo configuration <= {target:g} s: {why}")
                continue
            met = "MET" if r["process_s"] <= target else "NOT MET"
            verdict.append(f"target: {key} of the demo configuration <= {target:g} s: measured {r['process_s']:.1f} s "
                           f"fresh process -> {met} (CPU time {r['cpu_s']:.1f} s -> "
                           f"{'met' if r['cpu_s'] <= target else 'not met'})")
    except DcrigError as err:
        print(f"error: {err}", file=sys.stderr)
        return 2
    finally:
        shutil.rmtree(workdir, ignore_errors=True)

    build = os.environ.get(KERNEL_ENV, "specialised")
    print(f"dcrig model kernel speed - {cpu_model()}, {os.cpu_count()} logical CPUs, {pin}; "
          f"Python {platform.python_version()}, numba {numba.__version__}, numpy {np.__version__}; "
          f"kernel build: {'generic (' + KERNEL_ENV + '=generic)' if build == 'generic' else 'specialised per plant'}")
    print(f"Best of {repeats} runs per measurement (the machine may be shared: the best run is the least "
          f"disturbed one); frames of 1/300 s (n_sub = frame / step); load average before "
          f"{load_before}, after {load_avg()}.{' QUICK mode: short runs, numbers indicative only.' if args.quick else ''}")
    print()
    print(table.markdown())
    print()
    if count_table is not None:
        print("Instructions per model step, counted by valgrind --tool=callgrind (reproducible, unlike the times): "
              "the difference between a call or frame of 2n and one of n steps, divided by n, so per-call costs "
              "drop out.")
        print()
        print(count_table.markdown())
        print()
    for line in verdict:
        print(line)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
