"""Glue between a run and its record: what a run writes into the record's meta (plant, configs,
status bit names), opening the recorder in a run folder, and the exports at the end of a run.

host.record stays free of rtmodel; this module knows the model's status bits
(rtmodel.layout.ST_NAMES) and the host's (host.signals.HOST_*) and writes their names into the
record, so exports and verdicts name each flag without importing the model.
"""

from __future__ import annotations

import sys
from pathlib import Path

from rtmodel import layout as L

from . import signals as sig
from .interrupts import caused_by_interrupt
from .record import RECORD_FILE, RunRecorder, open_record, save_configs
from .record.export import export_events_csv, export_frames_csv

HOST_BITS = {
    sig.HOST_RUNNING: "running", sig.HOST_WATCHDOG_TRIPPED: "watchdog_tripped",
    sig.HOST_FAULT_ACTIVE: "fault_active", sig.HOST_LOCKSTEP: "lockstep", sig.HOST_MODEL_ALARM: "model_alarm",
}  # fmt: skip


def _bit_index(mask: int) -> int:
    return int(mask).bit_length() - 1


def status_bits() -> dict:
    """{column: {bit index: name}} for the flag columns of the frame record and of sim rows."""
    model = {str(_bit_index(m)): n for m, n in L.ST_NAMES.items()}
    host = {str(_bit_index(m)): n for m, n in HOST_BITS.items()}
    return {"model_status": model, "host_status": host, "status": model}


def plant_meta(plant) -> dict:
    conv = plant.converter
    return {
        "machine": plant.machine["machine.name"],
        "converter": conv["converter.name"] if conv is not None else "DC source",
        "mains_hz": float(plant.p[L.P_MAINS_HZ]) if conv is not None else 50.0,
        "dt_s": plant.dt_s,
        "status_bits": status_bits(),
    }


def open_run_record(run_dir: Path, columns, plant, meta: dict, extra_configs: dict | None = None,
                    **recorder_options) -> RunRecorder:
    """Save the resolved configs in run_dir/configs/ and open run_dir/record.sqlite."""
    configs = {"machine": plant.machine, "converter": plant.converter}
    configs.update(extra_configs or {})
    saved = save_configs(run_dir, configs)
    full = dict(plant_meta(plant))
    full["run_dir"] = str(run_dir)
    full["configs"] = saved
    full["config_sha256"] = {k: v["sha256"] for k, v in saved.items()}
    full.update(meta)
    return RunRecorder(Path(run_dir) / RECORD_FILE, columns, full, **recorder_options)


def end_status(err: BaseException | None) -> str:
    if err is None:
        return "complete"
    if caused_by_interrupt(err):
        return "stopped"
    return f"error: {err.__class__.__name__}: {err}".rstrip(": ")


def export_closed_loop(run_dir: Path, title: str, plot: bool, out=None) -> dict:
    """frames.csv, events.csv (and run.png) of a closed-loop run, read back from its record.

    An interrupt while writing keeps the record whole (every export is written atomically);
    the user is told how to export again, and the interrupt goes on."""
    out = out if out is not None else sys.stdout
    run_dir = Path(run_dir)
    files = {}
    try:
        with open_record(run_dir) as rd:
            files["record"] = run_dir / RECORD_FILE
            files["frames"] = export_frames_csv(rd, run_dir / "frames.csv")
            files["events"] = export_events_csv(rd, run_dir / "events.csv")
            if plot:
                from .runner import plot_run

                rows = rd.frames()
                if len(rows):
                    files["plot"] = run_dir / "run.png"
                    tmp = run_dir / ".run.png.tmp.png"
                    plot_run(rows, tmp, title)
                    tmp.replace(files["plot"])
    except KeyboardInterrupt:
        tell_export_again(run_dir, out)
        raise
    return files


def tell_export_again(run_dir: Path, out=None) -> None:
    """After a Ctrl-C while the exports were written: the record is whole, this is how to
    write them again (an export is written atomically, so none is left half-written)."""
    print(f"\ninterrupted while writing the exports; the record is whole: dcrig runs export {run_dir} "
          "--format csv", file=out if out is not None else sys.stdout, flush=True)
