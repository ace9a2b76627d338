"""Trip codes are shown to a person with their name beside the number (status line, events,
summary, controller messages): a bare 'TRIP 4' means nothing on a screen or in a log.
The names are the controller's published table (docs/controller.md, host.controller.TripCode)."""

from __future__ import annotations

import io
import re
from types import SimpleNamespace

import numpy as np

from host import signals as sig
from host.controller import TripCode, trip_label
from host.controller.protection import trip_detail
from host.runner import StatusLine
from rtmodel import layout as L

def test_every_code_has_its_name_beside_the_number():
    for code in TripCode:
        assert trip_label(code) == f"{int(code)} ({code.name.lower()})"
    assert trip_label(4) == "4 (field_loss)"
    assert trip_label(99) == "99 (unknown_99)"  # a foreign controller's code is still labelled
    assert trip_detail(1, 1712.5) == "1712.5 A" and trip_detail(99, 2.0) == "2"


def test_the_status_line_shows_the_trip_name():
    out = io.StringIO()
    line = StatusLine(out, every_s=0.0)
    loop = SimpleNamespace(
        y=np.zeros(L.N_OUTPUT), session=None, operator=SimpleNamespace(speed_ref_rpm=0.0),
        _link_lost=False, stats=SimpleNamespace(missed_commands=0, deadline_misses=0),
        last_cmd=sig.Command(trip=1, trip_code=int(TripCode.FIELD_LOSS)),
    )
    line(loop)
    text = out.getvalue()
    assert "TRIP 4 (field_loss)" in text, text
    assert not re.search(r"TRIP \d+(?! \()", text), text
