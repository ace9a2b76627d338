"""Exports of a record read back by an independent reader.

COMTRADE (IEEE C37.111-1999, C37.111-2013 / IEC 60255-24): the files are read with the
`comtrade` package from PyPI (python-comtrade, an implementation written by others from the
standard), in both revisions and both data formats, and every analog value is compared with
the record within the stated resolution (a/2, a being the channel's scaling factor written
in the .cfg), every status channel exactly, and the times within 1 us (the timestamp unit).
CSV: read back with the standard library's csv module against %.6g of the record.
"""

from __future__ import annotations

import csv

import numpy as np
import pytest

from host.record import RunRecorder, open_record
from host.record.export import (check_comtrade_pair, export_comtrade, export_events_csv, export_frames_csv,
                                scaling, unit_of, windows)
from host.record.store import RecordError

COLS = ("time_s", "armature_current_A", "speed_rpm", "torque_Nm", "constant_V", "controller_trip",
        "model_status", "link_ok")
BITS = {"model_status": {"0": "overcurrent", "3": "discontinuous_conduction", "17": "far_bit"}}
PERIOD_S = 1 / 300


def _make(tmp_path, n=2000):
    k = np.arange(n)
    t = k * PERIOD_S
    rows = np.column_stack([
        t, 2500 * np.sin(2 * np.pi * 3 * t) + 100, 500 * (1 - np.exp(-t)), -8000 + k * 3.7, np.full(n, 440.0),
        (t >= 4.0).astype(float), ((k % 3 == 0) * 1 + (k % 5 == 0) * 8 + (k % 7 == 0) * (1 << 17)).astype(float),
        (k % 11 != 0).astype(float),
    ])  # fmt: skip
    path = tmp_path / "record.sqlite"
    with RunRecorder(path, COLS, {"machine": "Kestrel Bay F3 stand, test", "status_bits": BITS,
                                  "mains_hz": 50.0}, lossless=True) as rec:
        rec.frame_block(rows)
        rec.event(1.0, "operator", "run")
        rec.event(4.0, "trip", "controller tripped, code 3")
        rec.event(5.5, "trip", "trip report: code 3")
    return open_record(path), rows


@pytest.mark.parametrize("revision", ["1999", "2013"])
@pytest.mark.parametrize("binary", [False, True])
def test_comtrade_round_trip_through_an_independent_reader(tmp_path, revision, binary):
    import comtrade  # the independent reader (PyPI: comtrade)

    rd, rows = _make(tmp_path)
    wins = windows(rd, pre_s=0.5, post_s=1.0)
    assert [w.name for w in wins] == ["trip-1", "trip-2"]
    w = wins[0]
    cfg, dat = export_comtrade(rd, tmp_path / "ct", w, revision=revision, binary=binary)
    ct = comtrade.Comtrade(use_double_precision=True)  # float64 values, as the record holds
    ct.load(str(cfg), str(dat))
    assert ct.rev_year == revision
    assert ct.cfg.ft == ("BINARY" if binary else "ASCII")
    sel = (rows[:, 0] >= w.t_from_s) & (rows[:, 0] <= w.t_to_s)
    want = rows[sel]
    assert ct.total_samples == len(want)
    assert ct.analog_channel_ids == ["armature_current_A", "speed_rpm", "torque_Nm", "constant_V"]
    units = [ch.uu for ch in ct.cfg.analog_channels]
    assert units == ["A", "r/min", "N m", "V"]
    # times: from the first sample, the trigger 0.5 s after it
    t_rel = want[:, 0] - want[0, 0]
    assert np.max(np.abs(np.asarray(ct.time) - t_rel)) < 1.5e-6
    assert abs(ct.trigger_time - 0.5) < 2e-6
    for k, name in enumerate(ct.analog_channel_ids):
        a = ct.cfg.analog_channels[k].a
        assert a == pytest.approx(scaling(want[:, COLS.index(name)])[0], rel=1e-12)
        err = np.max(np.abs(np.asarray(ct.analog[k]) - want[:, COLS.index(name)]))
        assert err <= a / 2 * (1 + 1e-9) + 1e-9 * abs(want[:, COLS.index(name)]).max(), (name, err, a)
    ids = ct.status_channel_ids
    assert ids == ["controller_trip", "model_status.overcurrent", "model_status.discontinuous_conduction",
                   "model_status.far_bit", "link_ok"]
    ms = want[:, COLS.index("model_status")].astype(int)
    expect = [want[:, COLS.index("controller_trip")] != 0, ms & 1, (ms >> 3) & 1, (ms >> 17) & 1,
              want[:, COLS.index("link_ok")] != 0]
    for k, e in enumerate(expect):
        assert np.array_equal(np.asarray(ct.status[k]), np.asarray(e, dtype=int)), ids[k]
    check_comtrade_pair(cfg)  # our own checker accepts what we wrote


def test_window_choices(tmp_path):
    rd, rows = _make(tmp_path)
    (w,) = windows(rd, t_from_s=1.0, t_to_s=2.0)
    assert (w.t_from_s, w.t_to_s, w.trigger_s) == (1.0, 2.0, 1.0)
    (w,) = windows(rd, around="operator", pre_s=2.0, post_s=0.1)
    assert w.t_from_s == 0.0 and w.t_to_s == pytest.approx(1.1)  # clipped at the record's start
    (w,) = windows(rd, around="trip:report")
    assert w.trigger_s == 5.5
    with pytest.raises(RecordError, match="no event 'fault'"):
        windows(rd, around="fault")
    with pytest.raises(RecordError, match="outside the record"):
        windows(rd, t_from_s=100, t_to_s=200)
    with pytest.raises(RecordError, match="--pre"):
        windows(rd, pre_s=float("nan"))


def test_csv_exports_match_the_record(tmp_path):
    rd, rows = _make(tmp_path)
    export_frames_csv(rd, tmp_path / "frames.csv")
    export_events_csv(rd, tmp_path / "events.csv")
    with (tmp_path / "frames.csv").open() as fh:
        got = list(csv.reader(fh))
    assert tuple(got[0]) == COLS and len(got) == len(rows) + 1
    back = np.array(got[1:], dtype=float)
    np.testing.assert_allclose(back, rows, rtol=1e-5, atol=1e-12)  # %.6g: six significant digits
    assert (tmp_path / "frames.csv").read_bytes().count(b"\r\n") == len(rows) + 1  # CRLF, as csv.writer
    ev = (tmp_path / "events.csv").read_text().splitlines()
    assert ev[0] == "time_s,kind,text" and ev[2] == "4.000000,trip,\"controller tripped, code 3\""


def test_units_from_column_names():
    assert unit_of("armature_current_A") == "A" and unit_of("host_work_us") == "us"
    assert unit_of("speed_rpm") == "r/min" and unit_of("cmd_seq") == ""


@pytest.mark.parametrize("damage", ["no_dat", "short_dat", "bad_counts", "unsorted", "wrong_width"])
def test_bad_comtrade_pairs_give_one_line(tmp_path, damage):
    rd, _ = _make(tmp_path)
    cfg, dat = export_comtrade(rd, tmp_path / "ct", windows(rd)[0], binary=damage == "short_dat")
    if damage == "no_dat":
        dat.unlink()
    elif damage == "short_dat":
        dat.write_bytes(dat.read_bytes()[:-7])
    elif damage == "bad_counts":
        text = cfg.read_bytes().decode()
        cfg.write_bytes(text.replace("\r\n9,4A,5D\r\n", "\r\n99,4A,5D\r\n").encode())
    elif damage == "unsorted":
        lines = dat.read_text().splitlines()
        f = lines[5].split(",")
        f[1] = "999999999"
        lines[5] = ",".join(f)
        dat.write_text("\r\n".join(lines) + "\r\n")
    elif damage == "wrong_width":
        lines = dat.read_text().splitlines()
        lines[3] += ",7"
        dat.write_text("\r\n".join(lines) + "\r\n")
    with pytest.raises(RecordError) as err:
        check_comtrade_pair(cfg)
    assert "\n" not in str(err.value)
