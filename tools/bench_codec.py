"""Per-frame cost of the Python link codec on the host's hot path, printed as a table.

Owns nothing but the measurement. Target (docs/protocol.md, brief): packing one FEEDBACK to
wire bytes plus turning one COMMAND's wire bytes back into a Command well under 30 us
together. Also measures one round trip over a pty virtual cable (two processes' worth of
work in one: write, select, read, deframe), which includes kernel time.

Usage: PYTHONPATH=. python tools/bench_codec.py [--n 20000]
Must never be imported by the host; it is a script.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time

from host import signals as S
from host.link import Codec, Deframer, VirtualCable, encode_wire
from host.link.frames import ENC_FIXED, ENC_FLOAT32, ENCODING_NAMES


def _per_call_us(fn, n: int, repeats: int = 5) -> tuple[float, float]:
    """Median and best of `repeats` runs, each n calls, in microseconds per call."""
    runs = []
    for _ in range(repeats):
        t0 = time.perf_counter_ns()
        for _ in range(n):
            fn()
        runs.append((time.perf_counter_ns() - t0) / n / 1000.0)
    return statistics.median(runs), min(runs)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=20000, help="calls per run")
    args = ap.parse_args(argv)
    fb = S.Feedback(
        seq=5, ack_seq=4, model_time_us=123456, armature_current_A=-3999.99, field_current_A=12.345,
        armature_voltage_V=999.5, tacho_voltage_V=-210.123, encoder_count=-5, mains_angle_deg=359.99,
        mains_voltage_V=400.0, contactor_closed=1, host_status=0x1234, op_run=1, op_speed_ref_rpm=-1500.25,
    )  # fmt: skip
    cmd = S.Command(seq=9, mode=1, bridge_select=1, armature_cmd=123.45, field_mode=1, field_cmd=220.0, contactor=1)
    rows = []
    for enc in (ENC_FIXED, ENC_FLOAT32):
        codec = Codec(enc)
        d = Deframer()
        wire_cmd = encode_wire(codec.pack_command(cmd))
        pack = _per_call_us(lambda: encode_wire(codec.pack_feedback(fb)), args.n)
        unpack = _per_call_us(lambda: codec.unpack_command(d.feed(wire_cmd)[0]), args.n)
        both = _per_call_us(lambda: (encode_wire(codec.pack_feedback(fb)), codec.unpack_command(d.feed(wire_cmd)[0])), args.n)
        rows.append((ENCODING_NAMES[enc], "feedback -> wire", *pack))
        rows.append((ENCODING_NAMES[enc], "wire -> command", *unpack))
        rows.append((ENCODING_NAMES[enc], "both (target < 30 us)", *both))
    with VirtualCable() as cab, cab.host_link() as host, cab.controller_link() as ctrl:
        codec = Codec(ENC_FIXED)
        frame = codec.pack_feedback(fb)
        reply = codec.pack_command(cmd)

        def round_trip():
            host.send_frame(frame)
            ctrl.recv_frame(1.0)
            ctrl.send_frame(reply)
            host.recv_frame(1.0)

        rt = _per_call_us(round_trip, max(1, args.n // 10))
        rows.append(("fixed", "pty round trip, one process", *rt))
    print(f"python {sys.version.split()[0]}, {args.n} calls per run, 5 runs")
    print(f"{'encoding':<9} {'operation':<30} {'median us':>10} {'best us':>9}")
    for enc, op, med, best in rows:
        print(f"{enc:<9} {op:<30} {med:>10.2f} {best:>9.2f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
