"""`dcrig sim --from-steady`: the run starts in the steady state the model itself holds.

Check against the model: started there, the kernel stays there (speed, armature and field
current unchanged after 1 s), for a constant load (F3 stand, separately excited) and a fan
load (quadratic, shunt fan): the steady state comes from host.opoint's equivalent-circuit
solution, the run from the kernel, so the two agree only if both are right.
"""

from __future__ import annotations

import numpy as np
import pytest

from conftest import MACHINES, make_plant
from host.cli import main
from host.sim import run_offline, steady_start_state
from rtmodel import layout as L


@pytest.mark.parametrize("machine, overrides", [
    ("kestrel_f3_stand", ["mechanics.load_torque_Nm=6000.0"]),
    ("kestrel_shunt_fan", []),
])
def test_steady_start_stays_steady(kernel, machine, overrides):
    plant = make_plant(machine, overrides=["machine.thermal.frozen=true"] + overrides)
    x0 = steady_start_state(plant)
    assert x0[L.X_SPEED_RAD_S] > 0.5 * plant.machine["machine.rated_speed_rpm"] * np.pi / 30
    t, Y = run_offline(plant, 1.0, 1e-3, x=x0.copy())
    for col, idx in ((L.Y_SPEED_RAD_S, L.X_SPEED_RAD_S), (L.Y_IF_A, L.X_I_FIELD_A)):
        assert Y[-1, col] == pytest.approx(x0[idx], rel=1e-4)
    assert Y[-1, L.Y_I_LINE_A] == pytest.approx(x0[L.X_I_LINE_A], rel=1e-3)


def test_cli_from_steady_and_its_errors(capsys, tmp_path, kernel):
    f3 = str(MACHINES / "kestrel_f3_stand.toml")
    rc = main(["sim", f3, "--t-end", "0.2", "--from-steady", "--out", str(tmp_path / "s.csv")])
    out = capsys.readouterr().out
    assert rc == 0 and "end: speed 5" in out  # about 530 r/min at no load
    rc = main(["sim", f3, "--converter", str(MACHINES.parent / "converters" / "kestrel_f3_bridge.toml"),
               "--t-end", "0.2", "--from-steady", "--out", str(tmp_path / "b.csv")])
    err = capsys.readouterr().err
    assert rc == 2 and err.startswith("error: --from-steady: ") and len(err.strip().splitlines()) == 1
