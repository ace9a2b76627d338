"""End-of-frame outputs are the values of the end state (rtmodel.layout: "end of frame").

The kernel's closing comment says the algebraic outputs are re-evaluated at the final state; the
check here is that they are: the reported armature current equals the current of the state the
kernel leaves behind, and a one-quadrant bridge never reports a negative armature current.
Reference: the model's own state (x) and layout contract; no outside source is needed for
"the output equals the state it describes".
"""

from __future__ import annotations

import numpy as np

import reference_models as R
from conftest import make_plant
from host.config import load
from rtmodel import layout as L


def test_reported_armature_current_is_the_end_state_current(kernel, tmp_path):
    path = R.write_machine(tmp_path, "out_sep", R.machine_toml(R.SEPARATE))
    plant = R.load_plant(path)
    m = R.machine_from_config(load("machine", path).values)
    inp = R.Inputs(vs_V=440.0, field_V=m.rsh)
    x = R.kernel_state(plant, m, [0.0, 1.0, 0.0, 40.0])
    t, Y = R.run_kernel(kernel, plant, x, [(0.0, inp)], 0.2, 1e-3)
    diff = np.max(np.abs(Y[1:, L.Y_IA_A] - Y[1:, L.Y_I_LINE_A]))  # separate: ia = line current
    emf = np.max(np.abs(Y[1:, L.Y_EMF_V] - Y[1:, L.Y_FLUX_VS] * Y[1:, L.Y_SPEED_RAD_S]))
    print(f"\nmax |Y_IA_A - state current| {diff:.2e} A; max |Y_EMF_V - K phi w_end| {emf:.2e} V")
    assert diff < 1e-9 * m.i_rated
    assert emf < 1e-9 * 440.0


def test_one_quadrant_bridge_never_reports_negative_armature_current(kernel):
    """Discontinuous conduction (alpha 80 deg, motor turning): at the step where the bridge
    current is extinguished the state current is set to zero; the reported current must be
    zero too, not the predictor stage's value."""
    plant = make_plant("kestrel_f3_stand", "kestrel_f3_bridge")
    x, u, y = plant.new_state(), plant.new_inputs(), np.zeros(L.N_OUTPUT)
    x[L.X_I_FIELD_A] = 18.0
    x[L.X_SPEED_RAD_S] = 40.0
    u[L.U_ALPHA_DEG] = 80.0
    ia = np.empty(20000)
    il = np.empty(20000)
    disc = 0
    for k in range(len(ia)):
        kernel(x, plant.p, u, y, 1)
        ia[k] = y[L.Y_IA_A]
        il[k] = x[L.X_I_LINE_A]
        disc += bool(int(y[L.Y_STATUS]) & L.ST_DISCONTINUOUS)
    mismatch = np.sum((il == 0.0) & (ia != 0.0))
    print(f"\ndiscontinuous steps {disc}; min reported ia {ia.min():.3f} A; steps with zero state "
          f"current but nonzero report {mismatch}")
    assert disc > 1000  # the scenario really is discontinuous
    assert il.min() >= 0.0
    assert ia.min() >= 0.0
    assert mismatch == 0


def test_frame_mean_torque_is_what_accelerates_the_shaft(kernel):
    """Newton's second law over each frame (any mechanics text): with no load and no friction,
    (J_motor + J_load) (w_end - w_start) / T_frame is the frame's mean electromagnetic torque.
    Checked on the bridge with the phase-c fuse blown (two-pulse current, gaps in every
    pulse) at 3.33 ms frames, one 300 Hz ripple period: the mean torque output meets the law;
    the end-of-frame torque, which the closed-loop record carried before, does not (it sees one
    phase of the ripple every frame)."""
    plant = make_plant("kestrel_f3_stand", "kestrel_f3_bridge",
                       ["mechanics.viscous_Nm_per_rad_s=0", "mechanics.coulomb_Nm=0"])
    j_total = plant.p[L.P_J_KGM2] + plant.p[L.P_J_LOAD_KGM2]
    x, u, y = plant.new_state(), plant.new_inputs(), np.zeros(L.N_OUTPUT)
    x[L.X_I_FIELD_A] = 18.0
    x[L.X_SPEED_RAD_S] = 40.0
    u[L.U_ALPHA_DEG] = 30.0
    u[L.U_FUSE_BLOWN_MASK] = 0b100
    n_sub = int(round((1.0 / 300.0) / plant.dt_s))
    t_frame = n_sub * plant.dt_s
    newton, mean, end, ia_mean = [], [], [], []
    for k in range(120):
        w0 = x[L.X_SPEED_RAD_S]
        kernel(x, plant.p, u, y, n_sub)
        if k < 20:
            continue  # the start-up transient of the current
        newton.append(j_total * (x[L.X_SPEED_RAD_S] - w0) / t_frame)
        mean.append(y[L.Y_TORQUE_MEAN_NM])
        end.append(y[L.Y_TORQUE_NM])
        ia_mean.append(y[L.Y_IA_MEAN_A])
    newton, mean, end = np.array(newton), np.array(mean), np.array(end)
    scale = np.mean(np.abs(newton))
    err_mean = np.max(np.abs(mean - newton)) / scale
    err_end = np.max(np.abs(end - newton)) / scale
    bias = abs(np.mean(mean - newton)) / scale
    print(f"\nmean torque {scale:.0f} N m, mean current {np.mean(ia_mean):.0f} A; worst frame off "
          f"Newton's law: frame-mean output {err_mean:.2%} (bias {bias:.3%}), end-of-frame output {err_end:.1%}")
    assert scale > 500.0  # the bridge really drives current through the two healthy phases
    # the output sums each step's end value (as the mean current does), Heun's speed update
    # takes the trapezoid of its stages: they differ by a fraction of the ripple per step
    assert err_mean < 0.02
    assert bias < 0.005
    assert err_end > 0.2  # the aliasing the mean output is there to avoid
