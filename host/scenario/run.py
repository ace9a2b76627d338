"""Running one scenario: plant + controller + start state + timeline -> a run record.

Owns: building the plant from the scenario's files, connecting its controller (the emulated
one in-process, the emulated one as a separate process over a virtual cable, the C example
firmware compiled from tools/fwlib, or an external controller on a link URL), the start state,
the lockstep run, and the record: a RunRecord in memory (frames ndarray, columns, events,
meta) and, with an output folder, the durable record (host.record) the verdicts are read
back from. Verdicts themselves are in host.verdict and see only the record.

CAUTION: with controller kind "link" the host exchanges firing commands with whatever is on
the far end. Point it only at a controller that drives no power stage.
"""

from __future__ import annotations

import math
import os
import shutil
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from host.errors import ConfigError, DcrigError, LinkError
from rtmodel import layout as L

from .events import LinkGate, ScenarioDriver
from .load import TRIP_CLASSES, Scenario

ROOT = Path(__file__).resolve().parents[2]
FWLIB = ROOT / "tools" / "fwlib"
RPM = math.pi / 30.0

# IEC 60034-1 / IEC 60085 thermal classes: highest winding temperature, C (from memory)
THERMAL_CLASS_C = {"A": 105.0, "E": 120.0, "B": 130.0, "F": 155.0, "H": 180.0}


@dataclass
class RunRecord:
    """What a verdict reads: frame rows, their column names, events (t_s, kind, text), meta."""

    frames: np.ndarray
    columns: tuple[str, ...]
    events: list
    meta: dict
    wall_s: float = 0.0
    run_dir: Path | None = None
    stats: dict = field(default_factory=dict)


def shipped(rel: str) -> Path:
    """A demo config by its path under the shipped configs folder."""
    from ..shipped import shipped_config

    return shipped_config(rel)


def build_plant(scn: Scenario):
    from host.config import load
    from host.params import pack
    from host.schema import CONVERTER_KEYS

    conv = {k.path for k in CONVERTER_KEYS}
    m_over = [s for s in scn.plant_set if s.split("=", 1)[0].strip() not in conv]
    c_over = [s for s in scn.plant_set if s.split("=", 1)[0].strip() in conv]
    try:
        machine = load("machine", scn.machine, m_over)
        converter = load("converter", scn.converter, c_over) if scn.converter else None
    except ConfigError as err:
        raise ConfigError(f"{scn.path}: plant: {err}") from err
    if c_over and converter is None:
        raise ConfigError(f"{scn.path}: plant.set: {c_over[0]}: converter key given but no plant.converter")
    return pack(machine, converter)


def harm_limits(plant, scn: Scenario | None = None) -> dict:
    """The machine's own limits for the harm checks: from its config, overridden by [harm]."""
    v = plant.machine.values
    i_rated = v["machine.rated_current_A"]
    n_base = v["machine.rated_speed_rpm"]
    n_max = v["machine.max_speed_rpm"]
    cls = v.get("machine.thermal.insulation_class", "F")
    lim = {
        "rated_current_A": i_rated,
        "base_speed_rpm": n_base,
        # commutation limit: 2 x rated current up to base speed, falling as base/n above it
        # (constant commutated power; common practice, no source)
        "commutation_speed_pu": [0.0, 1.0, 1.5, 2.0, 3.0],
        "commutation_current_pu": [2.0, 2.0, 2.0 / 1.5, 1.0, 2.0 / 3.0],
        # IEC 60034-1 overspeed withstand: 1.2 x the highest rated speed (from memory)
        "mechanical_limit_rpm": 1.2 * n_max,
        "temperature_limit_C": THERMAL_CLASS_C.get(str(cls).upper(), 155.0),
        "insulation_class": str(cls),
        # commutator flashover risk: 1.2 x rated armature voltage (common practice, no source)
        "overvoltage_V": 1.2 * v["machine.rated_voltage_V"],
        # current rise of a laminated-frame machine: 200 x rated current per second on the
        # frame-mean current (common practice, no source; a solid-frame machine takes far less)
        "di_dt_A_per_s": 200.0 * i_rated,
        "field_loss_fraction": 0.4,  # field below 40 % of rated ...
        "field_loss_current_pu": 0.1,  # ... while the armature carries over 10 % of rated current
        "rated_field_current_A": v.get("machine.rated_field_current_A") or 0.0,
        "rated_voltage_V": v["machine.rated_voltage_V"],
        "connection": v["machine.connection"],
    }
    if scn is not None:
        lim.update(scn.harm)
    lim["accept"] = list(scn.harm_accept) if scn is not None else []
    return lim


def controller_settings(scn: Scenario):
    from host.controller.settings import load_settings

    if scn.settings is None:
        return None
    s = load_settings(scn.settings)
    if scn.settings_set:
        s = s.replace(scn.settings_set)
    return s


def trip_class_table(scn: Scenario, settings) -> dict[int, str]:
    """Trip code -> fault class, from the controller's profile, then the scenario's own table."""
    table: dict[int, str] = {}
    if settings is not None:
        for cls in TRIP_CLASSES:
            for c in settings[f"trip_classes.{cls}"]:
                table[int(c)] = cls
    elif scn.controller_kind == "c_example":
        table[1] = "overcurrent"  # tools/fwlib/example_controller.c: its one protection
    for cls, codes in scn.trip_classes.items():
        for c in codes:
            table[int(c)] = cls
    return table


def compile_c_example(out_dir: Path | None = None) -> Path:
    """Build tools/fwlib/example_controller.c with the system C compiler (cached by the sources'
    content: checkouts of different protocol versions never share a binary)."""
    import hashlib

    cc = shutil.which("cc")
    if cc is None:
        raise DcrigError("controller kind 'c_example': the system C compiler `cc` is missing")
    out_dir = Path(out_dir or tempfile.gettempdir()) / f"dcrig-fw-{os.getuid()}"
    out_dir.mkdir(parents=True, exist_ok=True)
    srcs = [FWLIB / "example_controller.c", FWLIB / "dcrig_link.c"]
    digest = hashlib.sha256(b"".join(p.read_bytes() for p in srcs + [FWLIB / "dcrig_link.h"])).hexdigest()[:16]
    exe = out_dir / f"example_controller-{digest}"
    if exe.exists():
        return exe
    tmp = out_dir / f"example_controller.{os.getpid()}"
    res = subprocess.run([cc, "-std=c99", "-O2", "-o", str(tmp)] + [str(s) for s in srcs],
                         capture_output=True, text=True, timeout=120)
    if res.returncode != 0:
        raise DcrigError(f"controller kind 'c_example': compile failed: {res.stderr.strip().splitlines()[-1:]}")
    os.replace(tmp, exe)  # atomic: parallel workers never run a half-written file
    return exe


def _start_state(loop, scn: Scenario) -> None:
    x = loop.x
    if scn.start_temperature_C is not None:
        x[L.X_TEMP_ARM_C] = scn.start_temperature_C
    if scn.start_field_up and loop.plant.machine.values["machine.connection"] != "series":
        x[L.X_I_FIELD_A] = loop.plant.machine.values["machine.rated_field_current_A"]
    if scn.start_state == "running":
        x[L.X_SPEED_RAD_S] = scn.start_speed_rpm * RPM
        # the operator holds run with the reference at the running speed from t = 0: the
        # controller closes its contactor and picks the machine up flying
        loop.operator.run, loop.operator.stop = 1, 0
        loop.operator.speed_ref_rpm = scn.start_speed_rpm
        loop.event("timeline", f"start: running at {scn.start_speed_rpm:g} r/min, field up")
    else:
        loop.event("timeline", "start: standstill" + (", field up" if scn.start_field_up else ""))
    loop._step(loop.x, loop.p, loop.u, loop.y, 0)  # outputs of the start state


def run_scenario(scn: Scenario, out_dir=None, *, link_url: str | None = None, fw_dir=None,
                 on_frame=None) -> RunRecord:
    """Run one scenario lockstep and return its record (also stored under out_dir/<name>/).

    link_url: run against an external controller on this link instead of the scenario's own.
    """
    from host.loop import REC_COLUMNS, HostLoop

    plant = build_plant(scn)
    settings = controller_settings(scn)
    kind = "link" if link_url else scn.controller_kind
    url = link_url or scn.link
    table = trip_class_table(scn, settings)
    table_source = "controller profile and scenario" if table else ""
    if not table:  # no profile, no table: the emulated controller's numbering is assumed
        from host.controller.protection import TripCode

        table = {int(c): c.name.lower() for c in TripCode if c}
        table_source = "assumed: the emulated controller's numbering (give the controller a profile)"
    period_us = int(round(plant.derived["frame_period_us"]))
    n_frames = int(math.ceil(scn.duration_s / (period_us * 1e-6) - 1e-9))
    meta = {
        "run_kind": "scenario",  # `dcrig runs list` showed "?" for these
        "run_name": scn.name,
        "scenario": scn.name,
        "scenario_file": str(scn.path),
        "description": scn.description,
        "controller_kind": kind,
        "controller_settings": str(scn.settings) if scn.settings else "",
        "controller_set": scn.settings_set,
        "link": url if kind == "link" else "",
        "frame_period_s": period_us * 1e-6,
        "duration_s": scn.duration_s,
        "trip_classes": {str(k): v for k, v in table.items()},
        "trip_classes_source": table_source,
        "harm": harm_limits(plant, scn),
        "machine": plant.machine["machine.name"],
    }
    if scn.replay is not None:  # closed-loop replay: where the timeline came from
        meta["replay_source"] = str(scn.replay.source)
        meta["replay_map"] = str(scn.replay.map) if scn.replay.map else ""
    run_dir = None
    recorder = None
    if out_dir is not None:
        from host.record import new_run_dir
        from host.recording import open_run_record

        run_dir = new_run_dir(out_dir, scn.name)
        extra = {"controller": settings} if settings is not None else {}
        recorder = open_run_record(run_dir, REC_COLUMNS, plant, meta, extra, lossless=True, synchronous="NORMAL")

    proc = None
    cable = None
    link = None
    t0 = time.perf_counter()
    status = "complete"
    stopped: BaseException | None = None
    loop = None
    try:
        if kind == "emulated":
            from host.controller.drive import DriveController
            from host.controller.inproc import InProcSession

            session = InProcSession(DriveController(settings), period_us)
        else:
            from host.link import HostSession, VirtualCable, open_link
            from host.loop import warm_kernel

            warm_kernel(plant)  # compile before a peer starts waiting for the handshake
            if kind in ("process", "c_example"):
                cable = VirtualCable()
                # the far end held only until the controller answers: from then on its death
                # closes the cable and ends the run at once (found by tools/crash_trials.py: a
                # SIGKILLed controller left the host waiting 5 s per frame, for many minutes)
                link = cable.host_link(hold_far_end=True)
                if kind == "process":
                    env = dict(os.environ)
                    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
                    argv = [sys.executable, "-m", "host.controller.process", cable.slave_path, str(scn.settings),
                            "--idle-timeout", "10", "--handshake-timeout", "30"]
                else:
                    fw = scn.firmware
                    argv = [str(compile_c_example(fw_dir)), cable.slave_path, "-n", str(n_frames + 50),
                            "-i", str(fw.get("iref_A", 300)), "-k", str(fw.get("kp_cdeg_per_A", 20)),
                            "-t", str(fw.get("trip_A", 100000 - 1)), "-e", scn.encoding, "-w", "5000"]
                proc = subprocess.Popen(argv, env=env if kind == "process" else None,
                                        stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
            else:
                link = open_link(url)
                if hasattr(link, "wait_connected"):
                    link.wait_connected(60.0)
            session = HostSession(link, encoding=scn.encoding, frame_period_us=period_us)
            session.handshake(timeout_s=30.0, peer_exit=proc.poll if proc is not None else None)
            if hasattr(link, "release_peer_hold"):
                link.release_peer_hold()  # the controller holds its end now: its death closes the cable
        gate = LinkGate(session)
        # the loop hands every frame row and event to the recorder as it happens (a killed run
        # keeps what it did); the verdicts read them back from the record afterwards
        loop = HostLoop(plant, gate, period_us, watchdog_periods=10, recorder=recorder)
        _start_state(loop, scn)
        loop.hooks.append(ScenarioDriver(scn, gate))

        # a controller on a link that falls silent ends the run (LinkTimeout, record kept) instead
        # of crawling at one command timeout per frame
        loop.run_lockstep(n_frames, on_frame=on_frame, command_timeout_s=5.0 if kind != "emulated" else None,
                          peer_timeout_s=None if kind == "emulated" else 10.0)
    except (KeyboardInterrupt, DcrigError) as err:
        stopped = err
        status = f"stopped: {err.__class__.__name__}: {err}"
        if loop is not None:
            loop.event("host", f"run stopped early: {err.__class__.__name__}: {err}")
    finally:
        wall = time.perf_counter() - t0
        if loop is not None:
            try:
                from host import signals as sig

                loop.session.send_control(sig.CTRL_BYE)
            except Exception:  # the peer may be gone already; nothing to save
                pass
        if proc is not None:
            try:
                proc.wait(timeout=15)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait()
        if link is not None:
            link.close()
        if cable is not None:
            cable.close()
        if recorder is not None:
            recorder.close(status if stopped is None else "stopped")
    if isinstance(stopped, KeyboardInterrupt) and run_dir is not None:
        stopped.run_dir = run_dir  # for the command to say where the record so far is
    if loop is None:
        raise stopped if stopped is not None else LinkError(f"{scn.path}: the run did not start")
    stats = {"frames": loop.stats.frames, "missed_commands": loop.stats.missed_commands,
             "link_loss_events": loop.stats.link_loss_events, "wall_s": wall,
             "model_s": float(loop.y[L.Y_TIME_S]), "status": status}
    if run_dir is not None:
        from host.record import open_record

        with open_record(run_dir) as rec:  # the verdicts read what was stored
            rr = RunRecord(rec.frames(), rec.columns, rec.events(), rec.meta, wall, run_dir, stats)
    else:
        rr = RunRecord(loop.rows().copy(), tuple(REC_COLUMNS), list(loop.events), meta, wall, None, stats)
    if stopped is not None and not isinstance(stopped, LinkError):
        raise stopped
    rr.meta["status"] = status
    return rr
