"""`dcrig identify`: machine parameters from nameplate and commissioning test records.

One subcommand per test record (fit it, print values, fit quality and warnings, optionally
a PNG), `nameplate` for the estimate from the plate, and `build` to combine them into a
machine TOML. Record formats: docs/identify.md.
"""

from __future__ import annotations

import argparse
import json
import math
from pathlib import Path

from ..errors import ConfigError

from ..cli import SAFETY

SAFETY_NOTE = SAFETY + "\n" + (
    "Test records come from energised machines. Stage open-circuit, locked-rotor, heat and run-down tests\n"
    "only under your site's lock-out rules, local electrical codes and licensed practice, with a qualified person:\n"
    "a field winding breaks with a dangerous voltage, a locked rotor overheats within seconds, a motor that loses\n"
    "its field overspeeds. A model built from estimates shows a plausible machine, not this one."
)

EXAMPLE = """examples:
  dcrig identify open-circuit configs/records/kestrel_f3_stand_open_circuit.csv --plot occ.png
  dcrig identify resistance configs/records/kestrel_f3_stand_armature_vi.csv --ref-temp 20
  dcrig identify run-down configs/records/kestrel_f3_stand_run_down_motor.csv --losses configs/records/kestrel_f3_stand_no_load.csv
  dcrig identify build --nameplate configs/records/kestrel_f3_stand_nameplate.csv --connection separate \\
      --name "F3 stand motor (from records)" --records configs/records/kestrel_f3_stand --out f3_identified.toml --plots f3_plots

record formats: docs/identify.md
"""

# build options: record kind -> option name (the order is the order of the fits)
BUILD_RECORDS = (
    ("open-circuit", "open-circuit"), ("resistance", "resistance"), ("series-resistance", "series-resistance"),
    ("field-step", "field-step"), ("armature-step", "armature-step"), ("autotune", "autotune"),
    ("temperature", "temperature"), ("losses", "losses"), ("run-down", "run-down"),
    ("acceleration", "acceleration"), ("load-test", "load-test"),
)
# file-name endings that --records PREFIX picks up (the names tools/make_kestrel_records.py writes)
RECORD_SUFFIXES = {
    "open-circuit": ["_open_circuit.csv"], "resistance": ["_armature_vi.csv"], "series-resistance": ["_series_vi.csv"],
    "field-step": ["_field_step.csv"], "armature-step": ["_armature_step.csv"], "autotune": ["_autotune.csv"],
    "temperature": ["_heat_run.csv"], "losses": ["_no_load.csv"], "run-down": ["_run_down_motor.csv", "_run_down_coupled.csv"],
    "acceleration": ["_acceleration.csv"], "load-test": ["_load_test.csv"],
}


def _common(p, plot=True):
    p.add_argument("--json", action="store_true", help="print one JSON object instead of the table")
    if plot:
        p.add_argument("--plot", metavar="FILE.png", help="write a PNG of the fit")


def add_subparser(sub):
    p = sub.add_parser("identify", help="machine parameters from nameplate and test records",
                       description="Fit commissioning test records (open-circuit curve, resistances, temperature rise, "
                       "field and armature steps, losses, run-down, acceleration, load tests), estimate the rest from "
                       "the nameplate, and build a machine config with the origin of every value.",
                       epilog=EXAMPLE + "\n" + SAFETY_NOTE, formatter_class=argparse.RawDescriptionHelpFormatter)
    s = p.add_subparsers(dest="identify_what", metavar="RECORD")
    fmt = argparse.RawDescriptionHelpFormatter

    def add(name, help_, example):
        q = s.add_parser(name, help=help_, description=help_ + ".",
                         epilog=f"example:\n  {example}\n\nrecord format: docs/identify.md\n\n{SAFETY_NOTE}",
                         formatter_class=fmt)
        q.add_argument("record", metavar="RECORD.csv")
        return q

    q = add("open-circuit", "open-circuit saturation curve: normalised, monotone, outliers flagged, knee located",
            "dcrig identify open-circuit occ.csv --reference-speed 500 --plot occ.png")
    q.add_argument("--reference-speed", type=float, metavar="RPM", help="speed to normalise to (default: the test speed with the most points)")
    _common(q)
    q = add("resistance", "winding resistance from standstill V-I points, brush drop separated, corrected to a reference temperature (IEC 60034-1)",
            "dcrig identify resistance armature_vi.csv --ref-temp 20")
    q.add_argument("--ref-temp", type=float, default=20.0, metavar="DEGC", help="reference temperature (default 20)")
    _common(q)
    q = add("temperature", "winding temperature and rise by the resistance method (IEC 60034-1)",
            "dcrig identify temperature heat_run.csv")
    _common(q)
    q = add("field-step", "field resistance, inductance and time constant from a field-voltage step",
            "dcrig identify field-step field_step.csv --curve occ.csv")
    q.add_argument("--ref-temp", type=float, default=20.0, metavar="DEGC")
    q.add_argument("--curve", metavar="OCC.csv", help="open-circuit record: splits magnetizing and leakage inductance")
    _common(q)
    q = add("armature-step", "armature inductance from the current rise after a voltage step (rotor locked, field off)",
            "dcrig identify armature-step armature_step.csv --brush-drop 2")
    q.add_argument("--brush-drop", type=float, default=2.0, metavar="V", help="total brush drop (default 2 V, common practice)")
    q.add_argument("--ra-ohm", type=float, metavar="OHM", help="armature circuit resistance at the test temperature (default: from the settled current)")
    _common(q)
    q = add("autotune", "armature inductance (and resistance) from a drive's current-loop autotune record",
            "dcrig identify autotune autotune.csv")
    _common(q, plot=False)
    q = add("losses", "rotational losses at speed from no-load runs, and the friction law",
            "dcrig identify losses no_load.csv")
    q.add_argument("--ra-ohm", type=float, metavar="OHM", help="armature circuit resistance during the runs (if not in the record)")
    _common(q)
    q = add("run-down", "inertia by the retardation method (IEEE Std 113)",
            "dcrig identify run-down run_down.csv --losses no_load.csv")
    q.add_argument("--losses", required=True, metavar="LOSSES.csv", help="losses record (no-load runs)")
    _common(q)
    q = add("acceleration", "inertia from an acceleration at known armature current",
            "dcrig identify acceleration accel.csv --losses no_load.csv")
    q.add_argument("--losses", metavar="LOSSES.csv", help="losses record (else friction is neglected)")
    _common(q)
    q = add("load-test", "series-field turns ratio (compound) from steady load points",
            "dcrig identify load-test load_test.csv --curve occ.csv")
    q.add_argument("--curve", required=True, metavar="OCC.csv", help="open-circuit record of the machine")
    _common(q)

    q = s.add_parser("nameplate", help="estimate a whole machine from the nameplate (typical ratios, each labelled)",
                     description="Estimate every machine value from the rating plate with typical ratios; print them with "
                     "their rules, and optionally the NEMA MG 1 power-supply code C pairing.",
                     epilog="example:\n  dcrig identify nameplate nameplate.csv --connection shunt --supply-code\n\n" + SAFETY_NOTE,
                     formatter_class=fmt)
    q.add_argument("record", metavar="NAMEPLATE.csv")
    q.add_argument("--connection", required=True, help="separate|shunt|series|compound_long|compound_short")
    q.add_argument("--duty", default="motor", help="motor|generator")
    q.add_argument("--supply-code", action="store_true", help="print the NEMA MG 1 code C supply pairing of the rated voltage")
    q.add_argument("--out", metavar="FILE.toml", help="also write the estimate as a machine config (origins in comments)")
    q.add_argument("--name", default="machine from nameplate", help="machine.name in the config")
    _common(q, plot=False)

    q = s.add_parser("build", help="combine nameplate and records into a machine config (origins and fit quality)",
                     description="Fit every record given, fill the rest from the nameplate estimate, write a machine TOML "
                     "with each value's origin as a comment and a NAME.identify.json sidecar, check it loads as `dcrig "
                     "check` would, and print the no-load and rated-load speeds.",
                     epilog=EXAMPLE + "\n" + SAFETY_NOTE, formatter_class=fmt)
    q.add_argument("--nameplate", required=True, metavar="NAMEPLATE.csv")
    q.add_argument("--connection", required=True, help="separate|shunt|series|compound_long|compound_short")
    q.add_argument("--duty", default="motor", help="motor|generator")
    q.add_argument("--name", required=True, help="machine.name in the config")
    q.add_argument("--records", metavar="PREFIX", help="take every record named PREFIX_<kind>.csv (docs/identify.md lists the names)")
    for kind, opt in BUILD_RECORDS:
        q.add_argument(f"--{opt}", dest=kind.replace("-", "_"), action="append", default=[], metavar="FILE.csv",
                       help=f"{kind} record" + (" (repeatable: motor alone and coupled)" if kind == "run-down" else ""))
    q.add_argument("--ref-temp", type=float, default=20.0, metavar="DEGC", help="temperature the resistances are written at (default 20)")
    q.add_argument("--insulation", default="F", help="insulation class B|F|H (default F)")
    q.add_argument("--out", required=True, metavar="FILE.toml")
    q.add_argument("--plots", metavar="DIR", help="write one PNG per fit into DIR")
    q.add_argument("--json", action="store_true", help="print the sidecar report as JSON")
    p.set_defaults(func=_do_identify, identify_parser=p)


def _finite(name, value, positive=False):
    if value is None:
        return None
    if not math.isfinite(value) or (positive and value <= 0):
        raise ConfigError(f"--{name}: must be a finite number{' > 0' if positive else ''}, got {value!r}")
    return value


def _print_fit(fit, as_json):
    if as_json:
        print(json.dumps({"kind": fit.kind, "source": fit.source, "values": fit.values, "quality": fit.quality,
                          "warnings": fit.warnings, "tables": fit.extra}, default=float, sort_keys=True))
        return
    print(f"{fit.source}: {fit.kind}")
    width = max([len(k) for k in list(fit.values) + list(fit.quality)] + [10])
    for k, v in fit.values.items():
        print(f"  {k:<{width}}  {v:.6g}" if isinstance(v, float) else f"  {k:<{width}}  {v}")
    for k, v in fit.quality.items():
        print(f"  {k:<{width}}  {v:.3g} (fit quality)" if isinstance(v, float) else f"  {k:<{width}}  {v} (fit quality)")
    if "field_current_A" in fit.extra and "emf_V" in fit.extra:
        print("  curve (field_current_A, emf_V at the reference speed):")
        for i, e in zip(fit.extra["field_current_A"], fit.extra["emf_V"]):
            print(f"    {i:10.4g} {e:10.4g}")
    for w in fit.warnings:
        print(f"warning: {w}")


def _plot(fit, path):
    if not path:
        return
    if not str(path).lower().endswith(".png"):
        raise ConfigError(f"--plot: {path}: expected a file name ending in .png")
    from ..identify.plots import plot_fit

    plot_fit(fit, path)
    print(f"plot: {path}")


def nameplate_from(path, connection, duty):
    from ..identify.nameplate import Nameplate
    from ..identify.records import SPECS, read_record
    from ..schema import MACHINE_KEYS

    choices = {k.name: k.rule.split(":", 1)[1].split("|") for k in MACHINE_KEYS if k.name in ("connection", "duty")}
    if connection not in choices["connection"]:
        raise ConfigError(f"--connection: expected one of {choices['connection']}, got {connection!r}")
    if duty not in choices["duty"]:
        raise ConfigError(f"--duty: expected one of {choices['duty']}, got {duty!r}")
    rec = read_record(path, SPECS["nameplate"])
    if rec.n != 1:
        raise ConfigError(f"{rec.source}: rated_power_kW: a nameplate record has exactly one row, got {rec.n}")
    row = {k: float(v[0]) for k, v in rec.columns.items()}
    for k, v in row.items():
        if not v > 0:
            raise ConfigError(f"{rec.source}: {k}: must be > 0, got {v!r}")
    if connection != "series" and "field_current_A" not in row:
        raise ConfigError(f"{rec.source}: field_current_A: required for a '{connection}' machine (every connection but series), got no such column")
    return Nameplate(rated_power_kW=row["rated_power_kW"], rated_voltage_V=row["rated_voltage_V"],
                     rated_current_A=row["rated_current_A"], rated_speed_rpm=row["rated_speed_rpm"],
                     max_speed_rpm=row.get("max_speed_rpm"), field_voltage_V=row.get("field_voltage_V"),
                     field_current_A=row.get("field_current_A"), connection=connection, duty=duty)


def _do_identify(args):
    from ..identify import fits as F
    from ..identify.records import SPECS, read_record

    what = args.identify_what
    if what is None:
        args.identify_parser.print_help()
        return 2
    if what == "build":
        return _do_build(args)
    if what == "nameplate":
        return _do_nameplate(args)
    for name in ("ref_temp", "reference_speed", "brush_drop"):
        if hasattr(args, name):
            _finite(name.replace("_", "-"), getattr(args, name))
    if getattr(args, "ra_ohm", None) is not None:
        _finite("ra-ohm", args.ra_ohm, positive=True)
    rec = read_record(args.record, SPECS[what])
    if what == "open-circuit":
        fit = F.fit_open_circuit(rec, args.reference_speed)
    elif what == "resistance":
        fit = F.fit_resistance(rec, args.ref_temp)
    elif what == "temperature":
        fit = F.fit_temperature(rec)
    elif what == "field-step":
        curve = None
        if args.curve:
            occ = F.fit_open_circuit(read_record(args.curve, SPECS["open-circuit"]))
            curve = (occ.extra["field_current_A"], occ.extra["emf_V"])
        fit = F.fit_field_step(rec, args.ref_temp, curve)
    elif what == "armature-step":
        fit = F.fit_armature_step(rec, args.brush_drop, args.ra_ohm)
    elif what == "autotune":
        fit = F.fit_autotune(rec)
    elif what == "losses":
        fit = F.fit_losses(rec, args.ra_ohm)
    elif what == "run-down":
        fit = F.fit_run_down(rec, F.fit_losses(read_record(args.losses, SPECS["losses"])))
    elif what == "acceleration":
        losses = F.fit_losses(read_record(args.losses, SPECS["losses"])) if args.losses else None
        fit = F.fit_acceleration(rec, losses)
    elif what == "load-test":
        occ = F.fit_open_circuit(read_record(args.curve, SPECS["open-circuit"]))
        fit = F.fit_turns_ratio(rec, (occ.extra["field_current_A"], occ.extra["emf_V"]), occ.values["reference_speed_rpm"])
    else:  # pragma: no cover - argparse limits the choices
        raise ConfigError(f"identify: unknown record kind {what!r}")
    _print_fit(fit, args.json)
    _plot(fit, getattr(args, "plot", None))
    return 0


def _do_nameplate(args):
    from ..identify.build import Built, Origin, to_toml, verify, write
    from ..identify.nameplate import estimate, supply_pairing

    np_ = nameplate_from(args.record, args.connection, args.duty)
    try:
        est = estimate(np_)
    except ValueError:
        raise ConfigError(f"{args.record}: field_current_A: required for a '{args.connection}' machine, got none") from None
    if args.json:
        out = {k: {"value": v, "origin": o, "why": w} for k, (v, o, w) in est.items()}
        if args.supply_code:
            out["supply_code"] = supply_pairing(np_.rated_voltage_V)
        print(json.dumps(out, sort_keys=True))
    else:
        print(f"{args.record}: nameplate estimate ({args.connection}, {args.duty}); every value below is an estimate unless marked")
        for k, (v, o, w) in est.items():
            shown = ", ".join(f"{x:.4g}" for x in v) if isinstance(v, list) else f"{v:.5g}"
            print(f"  {k} = {shown}  [{o}: {w}]")
        if args.supply_code:
            print(supply_pairing(np_.rated_voltage_V))
    if args.out:
        from ..identify.build import build

        built = build(np_, args.name, {})
        side = write(built, Path(args.out))
        verify(built, args.out)
        print(f"config: {args.out} (sidecar {side})")
    return 0


def _collect(args) -> dict:
    records: dict[str, list] = {}
    if args.records:
        prefix = Path(args.records)
        parent = prefix.parent
        if not parent.is_dir():
            raise ConfigError(f"--records: {args.records}: folder {parent} does not exist")
        for kind, suffixes in RECORD_SUFFIXES.items():
            for suf in suffixes:
                f = parent / (prefix.name + suf)
                if f.exists():
                    records.setdefault(kind, []).append(f)
        if not records:
            raise ConfigError(f"--records: {args.records}: no record named {prefix.name}_<kind>.csv found (see docs/identify.md)")
    for kind, _ in BUILD_RECORDS:
        given = getattr(args, kind.replace("-", "_"))
        if given:
            records[kind] = list(given)  # explicit files win over --records
    return records


def _do_build(args):
    from ..identify.build import build, verify, write
    from ..identify.plots import plot_fit

    _finite("ref-temp", args.ref_temp)
    if args.insulation not in ("B", "F", "H"):
        raise ConfigError(f"--insulation: expected one of ['B', 'F', 'H'], got {args.insulation!r}")
    if not str(args.out).lower().endswith(".toml"):
        raise ConfigError(f"--out: {args.out}: expected a file name ending in .toml")
    np_ = nameplate_from(args.nameplate, args.connection, args.duty)
    records = _collect(args)
    built = build(np_, args.name, records, args.ref_temp, args.insulation)
    checks = verify(built, args.out)  # raises ConfigError before anything is written
    out = Path(args.out)
    side = write(built, out)
    plots = []
    if args.plots:
        folder = Path(args.plots)
        folder.mkdir(parents=True, exist_ok=True)
        for f in built.fits:
            if f.plot:
                plots.append(plot_fit(f, folder / f"{Path(f.source).stem}.png"))
    if args.json:
        from ..identify.build import sidecar

        print(json.dumps(sidecar(built, str(out)), default=float, sort_keys=True))
        return 0
    counts = {}
    for o in built.values.values():
        counts[o.origin] = counts.get(o.origin, 0) + 1
    print(f"{out}: {args.name} ({args.connection}) - valid machine config")
    print("  origins: " + ", ".join(f"{k} {v}" for k, v in sorted(counts.items())) + f"; sidecar {side}")
    for f in built.fits:
        q = ", ".join(f"{k} {v:.3g}" if isinstance(v, float) else f"{k} {v}" for k, v in f.quality.items()
                      if k.startswith(("rms", "scatter", "spread", "points_used", "points_flagged")))
        print(f"  fitted {f.kind:<14} {Path(f.source).name}  ({q})")
    for k, v in checks.items():
        print(f"  {k.replace('_', ' ')}: {v:.6g}")
    estimates = [k for k, o in built.values.items() if o.origin == "estimate"]
    if estimates:
        print("  estimated (no record): " + ", ".join(estimates))
    if plots:
        print(f"  plots: {len(plots)} PNG in {args.plots}")
    for w in built.warnings:
        print(f"warning: {w}")
    return 0
