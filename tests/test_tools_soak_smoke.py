"""The soak script in a short run: counters agree between the live status, the summary and
the frame record, and every injected fault class is detected (tools/soak.py; the 10-minute
run and its memory table are in the README). No timing is asserted."""

from __future__ import annotations

import io
import os
import sys
from pathlib import Path

import pytest

pytestmark = pytest.mark.skipif(os.name != "posix", reason="virtual cables need pseudo-terminals")
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tools"))


def test_short_soak_is_consistent(kernel):
    import soak

    buf = io.StringIO()
    r = soak.run(minutes=0.05, rate=0.05, classes=("corrupt", "loss", "repeat", "reorder", "garbage"),
                 seed=2, block=300, out=buf)
    assert r["ok"], buf.getvalue()
    assert sum(r["injected"].values()) > 0 and len(r["samples"]) >= 1
    assert "verdict: counters consistent" in buf.getvalue()
