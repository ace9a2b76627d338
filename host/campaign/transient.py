"""The 'transient' campaign kind: an offline run of the plant (host.sim.run_offline) per run,
judged by limits on its figures (peak, final, extreme or sampled values of model outputs).

What it is for: plant questions that need no controller, such as the peak fault current
through the bridge over the tolerance spread of armature and commutating inductance (fuse
and thyristor surge ratings), or the current rise of a locked-rotor voltage step. Runs are
deterministic: the same RunSpec gives the same figures on any worker.

Owns: the figure names (`peak_SIGNAL`, `final_SIGNAL`, `min_SIGNAL`, `max_SIGNAL`, `SIGNAL@T`),
`run_transient(spec, out_dir)` and the run record of a transient run (frames.csv with the
unit-suffixed columns of `dcrig sim`, and run.json with the spec and the figures).
"""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import numpy as np

from rtmodel import layout as L

from ..errors import ConfigError, ModelError

# signal name -> output columns (several: the largest magnitude of them, e.g. the three lines)
SIGNALS = {
    "armature_current_A": (L.Y_IA_A,),
    "armature_current_frame_peak_A": (L.Y_IA_PEAK_A,),
    "line_current_A": (L.Y_LINE_IA_A, L.Y_LINE_IB_A, L.Y_LINE_IC_A),
    "field_current_A": (L.Y_IF_A,),
    "terminal_voltage_V": (L.Y_VT_MEAN_V,),
    "emf_V": (L.Y_EMF_V,),
    "speed_rpm": (L.Y_SPEED_RPM,),
    "torque_Nm": (L.Y_TORQUE_NM,),
    "armature_temperature_C": (L.Y_TEMP_ARM_C,),
}
_FIG = re.compile(r"^(peak|final|min|max)_(?P<sig>[a-z_]+_[A-Za-z]+)$")
_AT = re.compile(r"^(?P<sig>[a-z_]+_[A-Za-z]+)@(?P<t>[0-9.eE+-]+)$")
# computed for every run whatever the limits ask, so the table always has them
STANDARD_FIGURES = tuple(f"peak_{s}" for s in SIGNALS) + tuple(
    f"final_{s}" for s in ("armature_current_A", "speed_rpm", "field_current_A", "armature_temperature_C"))


def figure_known(name: str) -> bool:
    m = _FIG.match(name)
    if m:
        return m.group("sig") in SIGNALS
    m = _AT.match(name)
    if m:
        try:
            t = float(m.group("t"))
        except ValueError:
            return False
        return m.group("sig") in SIGNALS and math.isfinite(t) and t >= 0
    return False


def _signal(Y: np.ndarray, sig: str, signed: bool) -> np.ndarray:
    cols = SIGNALS[sig]
    if len(cols) == 1:
        return Y[:, cols[0]]
    block = Y[:, list(cols)]
    return np.max(np.abs(block), axis=1) if not signed else block[np.arange(len(Y)), np.argmax(np.abs(block), axis=1)]


def figure(Y: np.ndarray, name: str) -> float:
    """The value of one figure of an output record Y (rows of rtmodel outputs)."""
    m = _FIG.match(name)
    if m:
        what, sig = m.group(1), m.group("sig")
        s = _signal(Y, sig, signed=True)
        if what == "peak":
            return float(np.max(np.abs(s)))
        if what == "final":
            return float(s[-1])
        return float(np.min(s) if what == "min" else np.max(s))
    m = _AT.match(name)
    if m:
        s = _signal(Y, m.group("sig"), signed=True)
        return float(np.interp(float(m.group("t")), Y[:, L.Y_TIME_S], s))
    raise ValueError(f"unknown figure {name!r}")


def load_plant(machine: Path, converter: Path | None, overrides, src: str = ""):
    """Load and pack the plant with --set-style overrides (machine keys and converter keys)."""
    from ..config import load
    from ..params import pack
    from ..schema import CONVERTER_KEYS

    conv_paths = {k.path for k in CONVERTER_KEYS}
    m_over = [s for s in overrides if s.split("=", 1)[0].strip() not in conv_paths]
    c_over = [s for s in overrides if s.split("=", 1)[0].strip() in conv_paths]
    m = load("machine", machine, m_over)
    if converter is None and c_over:
        raise ConfigError(f"{src}: {c_over[0].split('=')[0]}: converter key given but no plant.converter")
    c = load("converter", converter, c_over) if converter is not None else None
    return pack(m, c)


def _segments(case):
    from ..sim import parse_ramp, parse_step

    segs = []
    for text in case.inputs:
        n_, v_ = text.split("=", 1)
        segs.append(parse_step(f"{n_}@0={v_}"))
    segs += [parse_step(s) for s in case.changes] + [parse_ramp(r) for r in case.ramps]
    return segs


def judge(case, figures: dict) -> tuple[dict, dict]:
    """Verdict and margin of each limit. Margin = distance inside the bound, in the figure's
    unit (negative: outside); with both bounds, the nearer one."""
    verdicts, margins = {}, {}
    for lim in case.limits:
        v = figures[lim.figure]
        m = math.inf
        if lim.max is not None:
            m = min(m, lim.max - v)
        if lim.min is not None:
            m = min(m, v - lim.min)
        verdicts[lim.name] = "PASS" if m >= 0 else "FAIL"
        margins[lim.name] = float(m)
    return verdicts, margins


def margin_pu(case, margins: dict) -> float:
    """The worst limit margin as a fraction of its bound: comparable across limits and units."""
    worst = math.inf
    for lim in case.limits:
        bound = lim.max if lim.max is not None else lim.min
        worst = min(worst, margins[lim.name] / max(abs(bound), 1e-12))
    return float(worst)


def run_transient(spec, out_dir: Path | None, record: str = "all") -> dict:
    """One transient run. Returns the result dict of host.campaign.engine (status, verdicts,
    margins, figures, record). A config or model error is a DcrigError: the caller records it."""
    from ..sim import run_offline, write_csv

    plant = load_plant(spec.machine, spec.converter, spec.overrides(), spec.campaign)
    case = spec.case
    _, Y = run_offline(plant, case.t_end_s, case.sample_s, _segments(case))
    status_bits = int(np.bitwise_or.reduce(Y[:, L.Y_STATUS].astype(np.int64)))
    if status_bits & L.ST_NONFINITE:
        raise ModelError(f"run {spec.run_id}: the model state became non-finite (step too large for this plant?)")
    names = list(dict.fromkeys(STANDARD_FIGURES + tuple(lim.figure for lim in case.limits)))
    figures = {n: figure(Y, n) for n in names}
    verdicts, margins = judge(case, figures)
    passed = all(v == "PASS" for v in verdicts.values())
    flags = [n for bit, n in L.ST_NAMES.items() if status_bits & bit]
    result = {"status": "pass" if passed else "fail", "verdicts": verdicts, "margins": margins,
              "figures": figures, "margin_pu": margin_pu(case, margins), "record": "",
              "notes": ", ".join(flags)}
    if out_dir is not None and (record == "all" or (record == "failed" and not passed)):
        run_dir = Path(out_dir) / "runs" / spec.run_id
        run_dir.mkdir(parents=True, exist_ok=True)
        write_csv(run_dir / "frames.csv", Y)
        meta = {"run_id": spec.run_id, "campaign": spec.campaign, "case": case.name,
                "machine": str(spec.machine), "converter": str(spec.converter) if spec.converter else None,
                "overrides": spec.overrides(), "figures": figures, "verdicts": verdicts, "margins": margins,
                "model_flags": flags}
        tmp = run_dir / "run.json.tmp"
        tmp.write_text(json.dumps(meta, indent=1))
        tmp.replace(run_dir / "run.json")
        result["record"] = f"runs/{spec.run_id}"
    return result
