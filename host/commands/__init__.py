"""Subcommands of `dcrig`, one module each: add_subparser(subparsers) and _do_<name>(args)."""

import argparse

from ..config import load
from ..interrupts import raise_if_lost
from ..params import pack


def add_config_args(p: argparse.ArgumentParser, converter: bool = True) -> None:
    """MACHINE, optional --converter, repeatable --set: shared by check, op and sim."""
    p.add_argument("machine", metavar="MACHINE.toml", help="machine config (see docs/config-reference.md)")
    if converter:
        p.add_argument("--converter", metavar="CONVERTER.toml", help="converter config; without it an ideal DC source feeds the armature")
    p.add_argument("--set", dest="overrides", action="append", default=[], metavar="KEY=VALUE",
                   help="override a config key, e.g. --set machine.ra_ohm=0.02 (repeatable; converter keys too)")


def load_plant(args):
    """Load, validate and pack the configs named on the command line."""
    from ..schema import CONVERTER_KEYS

    conv_paths = {k.path for k in CONVERTER_KEYS}
    m_over = [s for s in args.overrides if s.split("=", 1)[0].strip() not in conv_paths]
    c_over = [s for s in args.overrides if s.split("=", 1)[0].strip() in conv_paths]
    machine = load("machine", args.machine, m_over)
    converter = None
    conv = getattr(args, "converter", None)
    if conv:
        converter = load("converter", conv, c_over)
    elif c_over:
        from ..errors import ConfigError

        raise ConfigError(f"--set: {c_over[0]}: converter key given but no --converter")
    plant = pack(machine, converter)
    raise_if_lost()  # packing compiles the magnetization curve on a fresh machine
    return plant


def check_load_pu(value: float) -> float:
    """--load of serve and demo: a finite fraction of rated torque within [0, 2]."""
    import math

    from ..errors import ConfigError

    if not (math.isfinite(value) and 0.0 <= value <= 2.0):
        raise ConfigError(f"--load: must be within [0, 2] per unit of rated torque, got {value!r}")
    return value


def check_seconds(option: str, value: float, lo: float = 0.0, hi: float = 3600.0) -> float:
    """A timeout option: finite, > lo and at most hi seconds."""
    import math

    from ..errors import ConfigError

    if not (math.isfinite(value) and lo < value <= hi):
        raise ConfigError(f"{option}: must be a number of seconds > {lo:g} and at most {hi:g}, got {value!r}")
    return value
