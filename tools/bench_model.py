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
from host.params import pack  # noqa: E402
from host.shipped import shipped_dir  # noqa: E402
from rtmodel import layout as L  # noqa: E402

MACHINES = shipped_dir("machines")
CONVERTERS = shipped_dir("converters")
C_SOURCE = ROOT / "tools" / "bench_c" / "sep_heun.c"
FRAME_S = 1.0 / 300.0  # one 6-pulse period at 50 Hz: the controller's natural update
TARGET_RTF_10US = 300.0  # switched bridge at 10 us on one core (the target)

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
import json, sys, time
t0 = time.perf_counter()
import numpy as np
from host.config import load
from host.params import pack
from rtmodel import layout as L
t1 = time.perf_counter()
from rtmodel.kernel import step_frame
t2 = time.perf_counter()
plant = pack(load("machine", sys.argv[1]))
x, u, y = plant.new_state(), plant.new_inputs(), np.zeros(L.N_OUTPUT)
t3 = time.perf_counter()
step_frame(x, plant.p, u, y, 1)
t4 = time.perf_counter()
print(json.dumps({"import_kernel_s": t2 - t1, "first_call_s": t4 - t3, "in_process_s": t4 - t0}))
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
    out = subprocess.run([sys.executable, "-c", _CHILD, str(MACHINES / "kestrel_f3_stand.toml")],
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
    if int(p[L.P_AR_N]) != 0 or int(p[L.P_LOAD_KIND]) != L.LOAD_CONSTANT or u[L.U_LOAD_OHM] != 0.0:
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


def run_c_anchor(plant, x_start, u, n_frames, n_sub, repeats, workdir: Path) -> dict:
    cc = shutil.which("cc")
    if cc is None:
        return {"error": "no C compiler (cc) on PATH"}
    exe = workdir / "sep_heun"
    comp = subprocess.run([cc, "-O2", "-o", str(exe), str(C_SOURCE), "-lm"], capture_output=True, text=True)
    if comp.returncode != 0:
        return {"error": "cc failed: " + (comp.stderr.strip().splitlines() or ["?"])[0]}
    par = workdir / "sep_heun_params.txt"
    par.write_text(c_params(plant, x_start, u, n_frames, n_sub, repeats))
    run = subprocess.run([str(exe), str(par)], capture_output=True, text=True, timeout=600)
    if run.returncode != 0:
        return {"error": run.stderr.strip() or f"exit {run.returncode}"}
    res = {}
    for line in run.stdout.splitlines():
        k, v = line.split()
        res[k] = float(v)
    ver = subprocess.run([cc, "--version"], capture_output=True, text=True).stdout.splitlines()
    res["cc"] = ver[0] if ver else cc
    return res


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

    def __init__(self):
        self.rows: list[tuple] = []

    def add(self, *cells):
        self.rows.append(tuple(str(c).replace("|", "/") for c in cells))  # a cell never splits the row

    def markdown(self) -> str:
        out = ["| " + " | ".join(self.HEAD) + " |", "|" + "|".join("---" for _ in self.HEAD) + "|"]
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
    args = ap.parse_args(argv)
    repeats = args.repeats if args.repeats is not None else (2 if args.quick else 5)
    sim_s = args.sim_seconds if args.sim_seconds is not None else (0.2 if args.quick else 10.0)
    if repeats < 1 or not sim_s > 0:
        print("error: --repeats must be >= 1 and --sim-seconds > 0", file=sys.stderr)
        return 2
    n_calls_1 = 2000 if args.quick else 200_000

    import numba

    load_before = load_avg()
    table = Table()
    verdict = []
    workdir = Path(tempfile.mkdtemp(prefix="dcrig-bench-"))
    try:
        # compile time first, in fresh processes, before this process warms anything up
        if args.no_compile:
            pass
        elif args.quick:
            r = fresh_start(None)
            if "error" in r:
                table.add("cached start (project cache)", "F3 stand", "-", "-", "-", "-", "-", "-", "-", "failed: " + r["error"])
            else:
                table.add("cached start (project cache)", "F3 stand", "-", "-", "-", "-", "-", "-", "-",
                          f"import kernel {r['import_kernel_s']:.2f} s + first call {r['first_call_s']:.2f} s; "
                          f"fresh process total {r['process_s']:.2f} s (cold compile skipped in --quick)")
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
                if "error" in r:
                    table.add(label, "F3 stand", "-", "-", "-", "-", "-", "-", "-", "failed: " + r["error"])
                    continue
                table.add(label, "F3 stand", "-", "-", "-", "-", "-", "-", "-",
                          f"import kernel {r['import_kernel_s']:.2f} s + first call {r['first_call_s']:.2f} s; "
                          f"fresh process total {r['process_s']:.2f} s ({note})")

        pin = "not pinned (--no-pin)" if args.no_pin else pin_one_core()
        try:
            from rtmodel.kernel import step_frame as step
        except ImportError as err:  # the model is being edited: say so in one line
            print(f"error: rtmodel.kernel does not import: {err}", file=sys.stderr)
            return 1

        # warm the dispatcher (compile or cache load) outside every timed region
        warm = make_plant("kestrel_f3_stand", None, 20.0)
        step(warm.new_state(), warm.p, warm.new_inputs(), np.zeros(L.N_OUTPUT), 1)

        sep_run = None
        for label, stem, conn_text in DC_CASES:
            plant = make_plant(stem, None, 20.0)
            dt = plant.dt_s
            n_sub = max(1, round(FRAME_S / dt))
            x, u = operating_point(plant)
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
                # per-call cost: the same plant, one step per call
                ns1, cpu1, _, _ = time_frames(step, plant.p, x, u, n_calls_1, 1, repeats, collect=False)
                per_call = ns1 / n_calls_1
                table.add("per call, n_sub=1", "F3 stand (separately excited)", "DC source", f"{dt * 1e6:g}", 1,
                          _si(1e9 / per_call), f"{per_call:.1f}", f"{dt / (per_call * 1e-9):.0f}",
                          _cpu(cpu1, n_calls_1, dt),
                          f"{per_call:.0f} ns per call; overhead beyond one step {per_call - ns / steps:.0f} ns "
                          f"(CPU time {(cpu1 / n_calls_1) - cpu_ns / steps:.0f} ns)")

        rtf_10 = {}
        for dt_us in (10.0, 20.0):
            for label, conv in BRIDGE_CASES:
                plant = make_plant(BRIDGE_MACHINE, conv, dt_us)
                dt = plant.dt_s
                n_sub = max(1, round(FRAME_S / dt))
                x, u = operating_point(plant)
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
                    ns1, cpu1, _, _ = time_frames(step, plant.p, x, u, n_calls_1, 1, repeats, collect=False)
                    per_call = ns1 / n_calls_1
                    table.add("per call, n_sub=1", "F3 stand (separately excited)", plant.converter["converter.name"],
                              f"{dt_us:g}", 1, _si(1e9 / per_call), f"{per_call:.1f}", f"{dt / (per_call * 1e-9):.0f}",
                              _cpu(cpu1, n_calls_1, dt),
                              f"{per_call:.0f} ns per call; overhead beyond one step {per_call - ns / steps:.0f} ns "
                              f"(CPU time {(cpu1 / n_calls_1) - cpu_ns / steps:.0f} ns)")

        if args.no_c:
            table.add("C anchor", "F3 stand (separately excited)", "DC source", "-", "-", "-", "-", "-", "-", "skipped (--no-c)")
        elif sep_run is not None:
            plant, x0, u0, n_frames, n_sub, ns_numba, cpu_numba, x_numba = sep_run
            try:
                c = run_c_anchor(plant, x0, u0, n_frames, n_sub, repeats, workdir)
            except ValueError as err:
                c = {"error": str(err)}
            if "error" in c:
                table.add("C anchor", "F3 stand (separately excited)", "DC source", "-", "-", "-", "-", "-", "-",
                          "failed: " + c["error"])
            else:
                steps = int(c["steps"])
                dt = plant.dt_s
                sps_c = steps / (c["best_ns"] * 1e-9)
                sps_n = steps / (ns_numba * 1e-9)
                diffs = []
                for name, key, idx in (("ia", "ia_A", L.X_I_LINE_A), ("if", "if_A", L.X_I_FIELD_A),
                                       ("speed", "w_rad_s", L.X_SPEED_RAD_S), ("temp", "temp_C", L.X_TEMP_ARM_C),
                                       ("angle", "angle_rad", L.X_ANGLE_RAD)):
                    a = float(x_numba[idx])
                    b = c[key]
                    rel = abs(a - b) / max(abs(a), abs(b), 1e-30)
                    diffs.append(f"{name} {rel:.1e}")
                table.add("C anchor (cc -O2)", "F3 stand (separately excited)", "DC source", f"{dt * 1e6:g}",
                          n_sub, _si(sps_c), f"{c['best_ns'] / steps:.1f}", f"{sps_c * dt:.0f}",
                          _cpu(c["best_cpu_ns"], steps, dt),
                          f"{c['cc']}; same {steps * dt:.1f} s from the same state")
                table.add("numba / C", "F3 stand (separately excited)", "DC source", f"{dt * 1e6:g}", n_sub,
                          f"{sps_n / sps_c:.2f}", "-", "-", f"{c['best_cpu_ns'] / cpu_numba:.2f}",
                          f"speed ratio numba/C {sps_n / sps_c:.2f} wall, {c['best_cpu_ns'] / cpu_numba:.2f} CPU time (the kernel also carries every connection "
                          f"and supply; C is this one case); final state relative difference abs(numba - C) / abs(value): {', '.join(diffs)}")

        got = rtf_10.get("switched bridge")
        if got is not None:
            rtf, rtf_cpu = got
            met = "MET" if rtf >= TARGET_RTF_10US else "NOT MET"
            verdict.append(f"target: switched bridge at 10 us >= {TARGET_RTF_10US:.0f}x real time on one core: "
                           f"measured {rtf:.0f}x -> {met} (on CPU time {rtf_cpu:.0f}x -> "
                           f"{'met' if rtf_cpu >= TARGET_RTF_10US else 'not met'})"
                           + (f"; averaged bridge in the same run: {rtf_10['averaged bridge'][0]:.0f}x "
                              f"(CPU time {rtf_10['averaged bridge'][1]:.0f}x)" if "averaged bridge" in rtf_10 else ""))
    except DcrigError as err:
        print(f"error: {err}", file=sys.stderr)
        return 2
    finally:
        shutil.rmtree(workdir, ignore_errors=True)

    print(f"dcrig model kernel speed - {cpu_model()}, {os.cpu_count()} logical CPUs, {pin}; "
          f"Python {platform.python_version()}, numba {numba.__version__}, numpy {np.__version__}")
    print(f"Best of {repeats} runs per measurement (the machine may be shared: the best run is the least "
          f"disturbed one); frames of 1/300 s (n_sub = frame / step); load average before "
          f"{load_before}, after {load_avg()}.{' QUICK mode: short runs, numbers indicative only.' if args.quick else ''}")
    print()
    print(table.markdown())
    print()
    for line in verdict:
        print(line)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
