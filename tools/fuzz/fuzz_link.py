"""Coverage-guided fuzz target (atheris, libFuzzer) for everything that reads link bytes.

    PYTHONPATH=. python tools/fuzz/fuzz_link.py -atheris_runs=200000     # a bounded run
    PYTHONPATH=. python tools/fuzz/fuzz_link.py -max_total_time=600      # ten minutes

One input is a byte stream as a controller might send it: it goes through the Deframer in
chunks whose sizes come from the input itself, every frame out of it through the codec
(all kinds, both encodings), the HELLO reader and the host's command rules. Anything but
the project's own FrameError is a finding (libFuzzer stops and writes the input as
crash-*). The property tests in tests/test_property_decoders.py check the same contract with
hypothesis on every test run; this target searches deeper, for as long as it is given.
atheris is not a test dependency: `pip install atheris` for a fuzzing session.
"""

from __future__ import annotations

import sys

import atheris

with atheris.instrument_imports():
    from host.link import frames as fr
    from host.link.wire import Deframer

CODECS = (fr.Codec(fr.ENC_FIXED), fr.Codec(fr.ENC_FLOAT32))


def one_input(data: bytes) -> None:
    if not data:
        return
    if data[0] & 0x80:
        # a decoded frame as such (the CRC would stop almost every mutated stream before the
        # codec): header and body straight to the readers
        frames = [data[1:]]
    else:
        d = Deframer()
        step = 1 + data[0] % 64
        frames = []
        for i in range(1, len(data), step):
            frames += d.feed(data[i: i + step])
        frames += d.feed(b"\x00")
        assert len(d._buf) <= d._max_wire
    for f in frames:
        for codec in CODECS:
            try:
                obj = codec.unpack(f)
            except fr.FrameError:
                continue
            if isinstance(obj, fr.sig.Command):
                fr.command_problem(obj)
        try:
            fr.unpack_hello(f)
        except fr.FrameError:
            pass


def main() -> None:
    atheris.Setup(sys.argv, one_input)
    atheris.Fuzz()


if __name__ == "__main__":
    main()
