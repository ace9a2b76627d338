"""Synthetic commissioning test records made by running dcrig's own model.

Owns: staging each standard test on a packed plant (inputs and overrides a test bay would
set), one kernel call per recorded sample, measurement noise from a seeded generator, and
writing the records in the format host.identify.records reads. Used by the round-trip tests
and by tools/make_kestrel_records.py for the demo records (invented data). The model is
driven only through rtmodel.layout and rtmodel.kernel.step_frame, like every host run.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from rtmodel import layout as L

from ..config import load
from ..params import RPM, pack
from .formulas import resistance_at


STEP_US = 100.0


class Bench:
    """A plant on the test bay: state, inputs, and a sampled run with noise."""

    def __init__(self, machine_path, overrides=(), converter_path=None, rng=None, noise_pct=0.2, dt_us=STEP_US):
        # a coarser step than the default 20 us: the tests here are slow (field, thermal,
        # run-down) and every demo machine's fastest time constant is > 10 ms, so 100 us stays
        # far inside the accurate step (tau_min / 20) that `dcrig check` prints
        over = [f"sim.dt_us={dt_us!r}"] + list(overrides)
        self.machine = load("machine", machine_path, over)
        self.converter = load("converter", converter_path) if converter_path else None
        self.plant = pack(self.machine, self.converter)
        self.x = self.plant.new_state()
        self.u = self.plant.new_inputs()
        self.y = np.zeros(L.N_OUTPUT)
        self.rng = rng if rng is not None else np.random.default_rng(0)
        self.noise = noise_pct / 100.0
        from rtmodel.kernel import step_frame

        self._step = step_frame

    @property
    def v(self):
        return self.machine.values

    def run(self, t_s: float, sample_s: float | None = None, outputs=()):
        """Advance t_s; return an array of the outputs at each sample (or the last only)."""
        dt = self.plant.dt_s
        if sample_s is None:
            n_sub = max(1, int(round(t_s / dt)))
            self._step(self.x, self.plant.p, self.u, self.y, n_sub)
            return self.y.copy()
        n_sub = max(1, int(round(sample_s / dt)))
        n = max(1, int(round(t_s / (n_sub * dt))))
        rows = np.empty((n, len(outputs)))
        for k in range(n):
            self._step(self.x, self.plant.p, self.u, self.y, n_sub)
            rows[k] = self.y[list(outputs)]
        return rows

    def mean_over(self, t_s: float, outputs, sample_s: float = 1e-3):
        rows = self.run(t_s, sample_s, outputs)
        return rows.mean(axis=0)

    def noisy(self, value, floor=0.0):
        """A reading with relative noise (noise_pct) plus an absolute floor (instrument)."""
        value = np.asarray(value, float)
        return value + self.rng.normal(0.0, 1.0, value.shape) * (self.noise * np.abs(value) + floor)


def write_record(path, kind: str, columns: dict, meta: dict | None = None, notes=(), digits=6) -> Path:
    """Write a record file (docs/identify.md): comment lines, '# key = value', header, rows."""
    path = Path(path)
    lines = [f"# dcrig test record: {kind}"] + [f"# {n}" for n in notes]
    lines.append(f"# record = {kind}")
    for k, val in (meta or {}).items():
        lines.append(f"# {k} = {val:.{digits}g}")
    names = list(columns)
    lines.append(",".join(names))
    arrays = [np.atleast_1d(np.asarray(columns[n], float)) for n in names]
    for row in zip(*arrays):
        lines.append(",".join(f"{val:.{digits}g}" for val in row))
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def _field_ohm_hot(v) -> float:
    return resistance_at(v["machine.field_resistance_ohm"], v["machine.resistance_ref_C"], v["machine.field_temp_C"])


def _as_separate(v) -> list[str]:
    """Overrides that feed the shunt field from its own source, as a test bay does."""
    return [] if v["machine.connection"] in ("separate", "series") else ["machine.connection='separate'"]


def open_circuit(machine_path, field_currents_A, speeds_rpm, rng, noise_pct=0.2, overrides=()):
    """Open-circuit test: prime mover at each speed, armature open, field set point by point.

    The field current state is preset to its steady value (the test waits for it to settle;
    the model need not spend seconds doing so); the EMF is the model's own output."""
    base = load("machine", machine_path).values
    over = list(overrides) + _as_separate(base) + ["mechanics.load='prime_mover'", "machine.thermal.frozen=true"]
    cols = {"field_current_A": [], "emf_V": [], "speed_rpm": []}
    for n in speeds_rpm:
        for i_f in field_currents_A:
            b = Bench(machine_path, over, rng=rng, noise_pct=noise_pct)
            rf = _field_ohm_hot(b.v) + b.v["machine.field_rheostat_ohm"]
            b.u[L.U_CONTACTOR] = 0.0
            b.u[L.U_PRIME_SPEED_RAD_S] = n * RPM
            b.x[L.X_SPEED_RAD_S] = n * RPM
            b.u[L.U_FIELD_V] = i_f * rf
            b.x[L.X_I_FIELD_A] = i_f
            m = b.mean_over(0.05, [L.Y_IF_A, L.Y_VT_V, L.Y_SPEED_RPM])
            # field open for the residual point: the ammeter reads zero
            i_read = 0.0 if i_f == 0 else float(b.noisy(m[0], floor=0.001 * max(field_currents_A)))
            cols["field_current_A"].append(i_read)
            cols["emf_V"].append(float(b.noisy(m[1], floor=0.2)))
            cols["speed_rpm"].append(float(b.noisy(m[2])))
    return cols


def resistance_vi(machine_path, currents_A, winding_temp_C, rng, noise_pct=0.2, overrides=()):
    """Standstill V-I of the armature circuit: rotor locked, field off, DC source set for each
    current, winding held at winding_temp_C (frozen thermal model: a short test)."""
    over = list(overrides) + [f"machine.thermal.initial_C={winding_temp_C!r}", "machine.thermal.frozen=true"]
    cols = {"current_A": [], "voltage_V": []}
    for i_target in currents_A:
        b = Bench(machine_path, over, rng=rng, noise_pct=noise_pct)
        v = b.v
        r = resistance_at(v["machine.ra_ohm"], v["machine.resistance_ref_C"], winding_temp_C)
        b.u[L.U_LOCKED_ROTOR] = 1.0
        b.u[L.U_FIELD_V] = 0.0
        b.u[L.U_VT_V] = v["machine.brush_drop_V"] + i_target * r
        tau = v["machine.la_H"] / r
        b.run(8 * tau)
        m = b.mean_over(0.02, [L.Y_IA_A, L.Y_VT_V], 1e-3)
        cols["current_A"].append(float(b.noisy(m[0])))
        cols["voltage_V"].append(float(b.noisy(m[1])))
    return cols


def field_step(machine_path, step_V, t_end_s, sample_s, rng, noise_pct=0.2, overrides=()):
    """Field-voltage step at rest with the armature open: t, field voltage, field current."""
    base = load("machine", machine_path).values
    over = list(overrides) + _as_separate(base)
    b = Bench(machine_path, over, rng=rng, noise_pct=noise_pct)
    b.u[L.U_CONTACTOR] = 0.0
    b.u[L.U_LOCKED_ROTOR] = 1.0
    b.u[L.U_FIELD_V] = 0.0
    pre = b.run(0.1, sample_s, [L.Y_TIME_S, L.Y_FIELD_VT_V, L.Y_IF_A])
    b.u[L.U_FIELD_V] = step_V
    rows = np.vstack([pre, b.run(t_end_s - 0.1, sample_s, [L.Y_TIME_S, L.Y_FIELD_VT_V, L.Y_IF_A])])
    i_top = float(rows[:, 2].max())
    return {"t_s": rows[:, 0], "field_voltage_V": b.noisy(rows[:, 1], floor=0.05),
            "field_current_A": b.noisy(rows[:, 2], floor=0.001 * i_top)}


def armature_step(machine_path, step_V, t_end_s, sample_s, rng, noise_pct=0.2, winding_temp_C=None, overrides=()):
    """Armature-voltage step, rotor locked, field off: t, armature voltage, armature current."""
    over = list(overrides)
    if winding_temp_C is not None:
        over += [f"machine.thermal.initial_C={winding_temp_C!r}", "machine.thermal.frozen=true"]
    b = Bench(machine_path, over, rng=rng, noise_pct=noise_pct)
    b.u[L.U_LOCKED_ROTOR] = 1.0
    b.u[L.U_FIELD_V] = 0.0
    b.u[L.U_VT_V] = 0.0
    outs = [L.Y_TIME_S, L.Y_VT_V, L.Y_IA_A]
    pre = b.run(0.01, sample_s, outs)
    b.u[L.U_VT_V] = step_V
    rows = np.vstack([pre, b.run(t_end_s - 0.01, sample_s, outs)])
    i_top = float(rows[:, 2].max())
    return {"t_s": rows[:, 0], "armature_voltage_V": b.noisy(rows[:, 1], floor=0.02),
            "armature_current_A": b.noisy(rows[:, 2], floor=0.001 * i_top)}


def _field_on(b):
    v = b.v
    if v["machine.connection"] == "separate":
        b.u[L.U_FIELD_V] = _field_ohm_hot(v) * v["machine.rated_field_current_A"]
        b.x[L.X_I_FIELD_A] = v["machine.rated_field_current_A"]


def no_load_losses(machine_path, voltages_V, winding_temp_C, rng, noise_pct=0.2, settle_s=2.0, overrides=()):
    """Steady no-load runs at several armature voltages, field at rated: speed, V, Ia."""
    over = list(overrides) + [f"machine.thermal.initial_C={winding_temp_C!r}", "machine.thermal.frozen=true",
                              "mechanics.load_torque_Nm=0.0"]
    cols = {"speed_rpm": [], "armature_voltage_V": [], "armature_current_A": []}
    for vt in voltages_V:
        b = Bench(machine_path, over, rng=rng, noise_pct=noise_pct)
        _field_on(b)
        kphi = b.plant.derived["flux_constant_Vs"]
        b.x[L.X_SPEED_RAD_S] = vt / kphi
        b.u[L.U_VT_V] = vt
        b.run(settle_s)
        m = b.mean_over(0.2, [L.Y_SPEED_RPM, L.Y_VT_V, L.Y_IA_A], 1e-3)
        for name, val in zip(cols, m):
            cols[name].append(float(b.noisy(val)))
    return cols


def run_down(machine_path, from_voltage_V, t_end_s, sample_s, rng, noise_pct=0.2, coupled=False, overrides=()):
    """Retardation test: steady no load at from_voltage_V, then the armature opened at t = 0."""
    over = list(overrides) + ["mechanics.load_torque_Nm=0.0", "machine.thermal.frozen=true"]
    b = Bench(machine_path, over, rng=rng, noise_pct=noise_pct)
    if not coupled:
        b.u[L.U_COUPLING_BROKEN] = 1.0
    _field_on(b)
    b.x[L.X_SPEED_RAD_S] = from_voltage_V / b.plant.derived["flux_constant_Vs"]
    b.u[L.U_VT_V] = from_voltage_V
    b.run(2.0)
    b.u[L.U_CONTACTOR] = 0.0
    t0 = float(b.x[L.X_TIME_S])
    rows = b.run(t_end_s, sample_s, [L.Y_TIME_S, L.Y_SPEED_RPM])
    rows = rows[rows[:, 1] > 1.0]
    return {"t_s": rows[:, 0] - t0, "speed_rpm": b.noisy(rows[:, 1], floor=0.05)}


def acceleration(machine_path, converter_path, current_A, t_end_s, sample_s, rng, noise_pct=0.2,
                 winding_temp_C=40.0, coupled=False, overrides=()):
    """Acceleration from rest at a constant armature current (ideal current source)."""
    over = list(overrides) + ["mechanics.load_torque_Nm=0.0", f"machine.thermal.initial_C={winding_temp_C!r}",
                              "machine.thermal.frozen=true"]
    b = Bench(machine_path, over, converter_path=converter_path, rng=rng, noise_pct=noise_pct)
    if not coupled:
        b.u[L.U_COUPLING_BROKEN] = 1.0
    _field_on(b)
    b.u[L.U_IREF_A] = current_A
    rows = b.run(t_end_s, sample_s, [L.Y_TIME_S, L.Y_SPEED_RPM, L.Y_IA_A, L.Y_VT_V])
    return {"t_s": rows[:, 0], "speed_rpm": b.noisy(rows[:, 1], floor=0.05),
            "armature_current_A": b.noisy(rows[:, 2]), "armature_voltage_V": b.noisy(rows[:, 3], floor=0.1)}


def load_test(machine_path, load_torques_Nm, winding_temp_C, rng, noise_pct=0.2, settle_s=4.0, overrides=()):
    """Steady load points at rated voltage: V, Ia, shunt field current, speed."""
    over = list(overrides) + [f"machine.thermal.initial_C={winding_temp_C!r}", "machine.thermal.frozen=true",
                              "mechanics.load='constant'"]
    cols = {"armature_voltage_V": [], "armature_current_A": [], "field_current_A": [], "speed_rpm": []}
    for tl in load_torques_Nm:
        b = Bench(machine_path, over, rng=rng, noise_pct=noise_pct)
        v = b.v
        b.u[L.U_LOAD_TORQUE_NM] = tl
        b.x[L.X_SPEED_RAD_S] = v["machine.rated_speed_rpm"] * RPM
        if v["machine.connection"] != "series":
            b.x[L.X_I_FIELD_A] = v["machine.rated_field_current_A"]
        b.run(settle_s)
        m = b.mean_over(0.2, [L.Y_VT_V, L.Y_IA_A, L.Y_IF_A, L.Y_SPEED_RPM], 1e-3)
        for name, val in zip(cols, m):
            cols[name].append(float(b.noisy(val)))
    return cols


def hot_resistance(machine_path, hot_C, times_s, rng, noise_pct=0.1, probe_A=None, overrides=()):
    """Resistance readings while the armature cools after a heat run (thermal model on):
    at each time a two-current reading (rotor locked, field off) gives R = dV/dI, which
    removes the brush drop, as a bridge across the winding would."""
    over = list(overrides) + [f"machine.thermal.initial_C={hot_C!r}"]
    b = Bench(machine_path, over, rng=rng, noise_pct=noise_pct)
    v = b.v
    b.u[L.U_LOCKED_ROTOR] = 1.0
    b.u[L.U_FIELD_V] = 0.0
    probe = probe_A or 0.1 * v["machine.rated_current_A"]
    r_cold = v["machine.ra_ohm"]
    tau = v["machine.la_H"] / r_cold
    out = []
    for t_k in times_s:
        b.u[L.U_VT_V] = 0.0
        b.run(max(t_k - float(b.x[L.X_TIME_S]), 1e-3))
        readings = []
        for frac in (0.5, 1.0):
            r_now = resistance_at(r_cold, v["machine.resistance_ref_C"], float(b.x[L.X_TEMP_ARM_C]))
            b.u[L.U_VT_V] = v["machine.brush_drop_V"] + frac * probe * r_now
            b.run(8 * tau)
            m = b.mean_over(0.01, [L.Y_VT_V, L.Y_IA_A], 1e-3)
            readings.append(m)
        (v1, i1), (v2, i2) = readings
        out.append(float(b.noisy((v2 - v1) / (i2 - i1))))
    return {"t_after_stop_s": np.asarray(times_s, float), "resistance_ohm": np.asarray(out)}


def cold_resistance(machine_path, cold_C, rng, noise_pct=0.1, overrides=()):
    """One two-current reading with the winding at cold_C (after a long rest)."""
    cols = hot_resistance(machine_path, cold_C, [0.001], rng, noise_pct,
                          overrides=list(overrides) + ["machine.thermal.frozen=true"])
    return float(cols["resistance_ohm"][0])


def ra_at(v, temp_C):
    return resistance_at(v["machine.ra_ohm"], v["machine.resistance_ref_C"], temp_C)


__all__ = [n for n in dir() if not n.startswith("_")] + ["math"]


def _nameplate_row(v):
    row = {"rated_power_kW": v["machine.rated_power_kW"], "rated_voltage_V": v["machine.rated_voltage_V"],
           "rated_current_A": v["machine.rated_current_A"], "rated_speed_rpm": v["machine.rated_speed_rpm"]}
    if v["machine.max_speed_rpm"]:
        row["max_speed_rpm"] = v["machine.max_speed_rpm"]
    if v["machine.connection"] != "series":
        rf_hot = resistance_at(v["machine.field_resistance_ohm"], v["machine.resistance_ref_C"], v["machine.field_temp_C"])
        i_f = v["machine.rated_field_current_A"]
        row["field_voltage_V"] = round((rf_hot + v["machine.field_rheostat_ohm"]) * i_f)
        row["field_current_A"] = i_f
    return row


def separate_machine_records(machine_path, folder, seed=11, noise_pct=0.2, converter_path=None, prefix=""):
    """The full set of test records for a separately excited machine (the demo and the round
    trip): nameplate, open-circuit at two speeds, armature V-I, field step, armature step,
    heat-run readings, no-load losses, run-downs alone and coupled, and (with a current-source
    converter) an acceleration. Returns {record kind: [paths]} as build() takes them."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    v = load("machine", machine_path).values
    name = prefix or Path(machine_path).stem
    out: dict[str, list] = {}

    def put(kind, fname, cols, meta=None, notes=()):
        path = write_record(folder / f"{name}_{fname}.csv", kind, cols, meta,
                            ("invented demo data: made by running dcrig's model with seeded noise",) + tuple(notes))
        out.setdefault(kind, []).append(path)

    put("nameplate", "nameplate", {k: [val] for k, val in _nameplate_row(v).items()})
    n_r = v["machine.rated_speed_rpm"]
    xs = v["machine.magnetization.field_current_A"]
    i_top = xs[-1]
    i_pts = [0.0] + [float(x) for x in np.linspace(i_top / 14, i_top, 14)]
    put("open-circuit", "open_circuit", open_circuit(machine_path, i_pts, [n_r, 0.8 * n_r], rng, noise_pct),
        notes=("driven at two speeds; field raised point by point",))
    t_cold = v["machine.thermal.ambient_C"]
    i_r = v["machine.rated_current_A"]
    put("resistance", "armature_vi", resistance_vi(machine_path, [f * i_r for f in (0.1, 0.25, 0.4, 0.55, 0.7, 0.85, 1.0)], t_cold, rng, noise_pct),
        {"winding_temp_C": t_cold, "brushes": 1}, ("rotor locked, field off",))
    rf_hot = resistance_at(v["machine.field_resistance_ohm"], v["machine.resistance_ref_C"], v["machine.field_temp_C"])
    tau_f = (v["machine.field_inductance_H"] + v["machine.field_leakage_H"]) / rf_hot
    put("field-step", "field_step", field_step(machine_path, rf_hot * v["machine.rated_field_current_A"], 0.1 + 4 * tau_f,
                                               max(tau_f / 400, 1e-3), rng, noise_pct),
        {"winding_temp_C": v["machine.field_temp_C"]}, ("armature open, rotor at rest; step to rated field voltage",))
    ra_c = ra_at(v, t_cold)
    tau_a = v["machine.la_H"] / ra_c
    put("armature-step", "armature_step", armature_step(machine_path, 2.0 + 0.3 * i_r * ra_c, 0.01 + 8 * tau_a, tau_a / 200, rng,
                                                        noise_pct, winding_temp_C=t_cold),
        {"winding_temp_C": t_cold}, ("rotor locked, field off",))
    hot = t_cold + v["machine.thermal.rated_rise_K"]
    r_cold = cold_resistance(machine_path, t_cold, rng, noise_pct / 2)
    put("temperature", "heat_run", hot_resistance(machine_path, hot, [15.0, 30.0, 45.0, 60.0], rng, noise_pct / 2),
        {"cold_resistance_ohm": r_cold, "cold_temp_C": t_cold, "coolant_temp_C": t_cold, "test_current_A": i_r},
        ("readings after a rated-current heat run; two-current method across the winding",))
    vr = v["machine.rated_voltage_V"]
    put("losses", "no_load", no_load_losses(machine_path, [0.3 * vr, 0.45 * vr, 0.6 * vr, 0.75 * vr, 0.9 * vr], t_cold, rng, noise_pct),
        {"armature_circuit_ohm": ra_c, "brush_drop_V": 2.0}, ("steady no-load runs, field at rated",))
    for coupled, fname in ((False, "run_down_motor"), (True, "run_down_coupled")):
        j = v["mechanics.inertia_kgm2"] + (v["mechanics.load_inertia_kgm2"] if coupled else 0.0)
        w = vr / load_plant_kphi(machine_path)
        t_stop = j * w / max(v["mechanics.coulomb_Nm"] + v["mechanics.viscous_Nm_per_rad_s"] * w, 1e-9)
        put("run-down", fname, run_down(machine_path, vr, min(1.2 * t_stop, 60.0), max(t_stop / 600, 5e-3), rng, noise_pct, coupled),
            {"coupled": 1 if coupled else 0}, ("armature opened at rated voltage no-load speed, field held",))
    if converter_path:
        t_acc = 0.6 * v["mechanics.inertia_kgm2"] * n_r * RPM / (load_plant_kphi(machine_path) * 0.5 * i_r)
        put("acceleration", "acceleration", acceleration(machine_path, converter_path, 0.5 * i_r, t_acc, t_acc / 400, rng, noise_pct, t_cold),
            {"armature_circuit_ohm": ra_c, "brush_drop_V": 2.0, "coupled": 0}, ("half rated current from rest, ideal current source",))
    return out


def load_plant_kphi(machine_path) -> float:
    return pack(load("machine", machine_path)).derived["flux_constant_Vs"]
