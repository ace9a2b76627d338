"""Shared fixtures: repository paths, config loading, and one warm-up of the compiled kernel."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pytest

# The host paths run on the generic kernel build in the suite (host.params.Plant.kernel): one
# compile serves every plant. The specialised builds are checked against it, case by case, in
# tests/test_kernel_specialised.py (seven compiles). CLI subprocesses inherit the setting.
os.environ.setdefault("DCRIG_KERNEL", "generic")

from host.shipped import shipped_dir

ROOT = Path(__file__).resolve().parents[1]
# the demo plant's configs as dcrig ships them (host.shipped), not paths into the checkout
MACHINES = shipped_dir("machines")
CONVERTERS = shipped_dir("converters")
CONTROLLERS = shipped_dir("controllers")


@pytest.fixture(scope="session")
def kernel():
    """The compiled step kernel, called once so compile (or cache load) happens here."""
    from host.config import load
    from host.params import pack
    from rtmodel import layout as L
    from rtmodel.kernel import step_frame

    plant = pack(load("machine", MACHINES / "kestrel_f3_stand.toml"))
    x, u, y = plant.new_state(), plant.new_inputs(), np.zeros(L.N_OUTPUT)
    step_frame(x, plant.p, u, y, 1)
    return step_frame


def make_plant(machine: str, converter: str | None = None, overrides=()):
    """Pack configs/machines/<machine>.toml (+ configs/converters/<converter>.toml)."""
    from host.config import load
    from host.params import pack
    from host.schema import CONVERTER_KEYS

    conv_keys = {k.path for k in CONVERTER_KEYS}
    m_over = [o for o in overrides if o.split("=")[0] not in conv_keys]
    c_over = [o for o in overrides if o.split("=")[0] in conv_keys]
    m = load("machine", MACHINES / f"{machine}.toml", m_over)
    c = load("converter", CONVERTERS / f"{converter}.toml", c_over) if converter else None
    return pack(m, c)


@pytest.fixture(scope="session")
def plant_factory():
    return make_plant
