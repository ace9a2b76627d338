"""The operator's field economy and quick-stop inputs (CONTROL ops 8 and 9, docs/protocol.md
6.4) through a scenario timeline to the emulated controller, in process and as a separate
process over the virtual cable.

What a drive does with them is common practice, no source: a field economy input lowers the
field of a stopped machine to a fraction of rated to spare the winding, and with it off the
field stays at rated so that a start need not wait for the field; a quick stop brings the
drive to rest on its own, steeper ramp (regenerating through the second bridge of a dual
converter). The checks are against the settings the runs are given: the field fraction
and the ramp rates.
"""

from __future__ import annotations

import numpy as np
import pytest

from host.controller.settings import load_settings
from host.loop import R
from host.scenario.load import load_scenario
from host.scenario.run import run_scenario
from host.shipped import shipped_config


def _write(tmp_path, name, body):
    p = tmp_path / f"{name}.toml"
    machines = shipped_config("machines/kestrel_f3_stand.toml").parent.as_posix()
    converters = shipped_config("converters/kestrel_f3_bridge.toml").parent.as_posix()
    controllers = shipped_config("controllers/kestrel_f3_stand.toml").parent.as_posix()
    p.write_text(body.replace("{m}", machines).replace("{c}", converters).replace("{s}", controllers))
    return p


def _run(path):
    """Frames of one lockstep run (record in memory), after checking that nothing tripped."""
    rr = run_scenario(load_scenario(path))
    f = rr.frames
    assert rr.columns[R["controller_trip"]] == "controller_trip"
    assert np.max(f[:, R["controller_trip"]]) == 0.0, [e for e in rr.events if "trip" in str(e)][:3]
    return f


ECONOMY = """
[scenario]
name = "{{name}}"
duration_s = 3.0
[plant]
machine = "{m}/kestrel_f3_stand.toml"
converter = "{c}/kestrel_f3_bridge.toml"
[controller]
kind = "{{kind}}"
settings = "{s}/kestrel_f3_stand.toml"
[start]
state = "standstill"
field_up = true
[[timeline]]
at_s = 0.0
action = "field_economy"
value = {{value}}
[[expect]]
kind = "no_trip"
"""


@pytest.mark.parametrize("kind", ["emulated", "process"])
def test_field_economy_off_holds_rated_field_at_standstill(kind, tmp_path):
    settings = load_settings(shipped_config("controllers/kestrel_f3_stand.toml"))
    if_rated = settings["field.rated_current_A"]
    frac = settings["field.economy_fraction"]
    tails = {}
    for value in (1, 0):
        body = ECONOMY.replace("{{name}}", f"economy_{value}").replace("{{kind}}", kind).replace("{{value}}", str(value))
        f = _run(_write(tmp_path, f"economy_{value}_{kind}", body))
        tail = f[f[:, R["time_s"]] > 2.5]
        tails[value] = float(np.mean(tail[:, R["field_current_A"]]))
    print(f"\nstopped field: economy on {tails[1]:.2f} A, off {tails[0]:.2f} A "
          f"(rated {if_rated:g} A, economy {frac:g} x rated)")
    assert tails[1] == pytest.approx(frac * if_rated, rel=0.05)
    assert tails[0] == pytest.approx(if_rated, rel=0.05)


QUICK = """
[scenario]
name = "quick_{{tag}}"
duration_s = 2.5
[plant]
machine = "{m}/kestrel_f3_stand.toml"
converter = "{c}/kestrel_f3_dual.toml"
[controller]
kind = "emulated"
settings = "{s}/kestrel_f3_dual.toml"
{{set}}
[start]
state = "running"
speed_rpm = 300.0
[[timeline]]
at_s = 0.2
action = "{{action}}"
[[expect]]
kind = "no_trip"
"""


def _decel_rpm_per_s(tmp_path, tag, action, set_line):
    body = QUICK.replace("{{tag}}", tag).replace("{{action}}", action).replace("{{set}}", set_line)
    f = _run(_write(tmp_path, f"quick_{tag}", body))
    t, n = f[:, R["time_s"]], f[:, R["speed_rpm"]]
    # the slope between 200 and 50 r/min: the ramp's middle. Not nearer the start: a stop of
    # the dual bridge begins with a changeover (40 ms dwell, current zero, dead time: about
    # 70 ms in which the speed cannot follow the ramp), and the speed loop catches up after it
    # (250 -> 100 r/min read 450 r/min/s on a 375 ramp); not nearer the rest, where the S-curve
    # of ramp.rounding_s rounds the plain stop off
    t200 = t[np.argmax((t > 0.2) & (n < 200.0))]
    t50 = t[np.argmax((t > 0.2) & (n < 50.0))]
    assert t50 > t200 > 0.2
    return 150.0 / (t50 - t200)


def test_quick_stop_uses_its_own_ramp_and_a_plain_stop_does_not(tmp_path):
    settings = load_settings(shipped_config("controllers/kestrel_f3_dual.toml"))
    stop_rate = settings["ramp.stop_decel_rpm_per_s"]
    quick_rate = 2.5 * stop_rate
    set_line = f'set = {{ "ramp.quick_stop_decel_rpm_per_s" = {quick_rate} }}'
    plain = _decel_rpm_per_s(tmp_path, "plain", "stop", set_line)
    quick = _decel_rpm_per_s(tmp_path, "quick", "quick_stop", set_line)
    unset = _decel_rpm_per_s(tmp_path, "unset", "quick_stop", 'set = { "ramp.quick_stop_decel_rpm_per_s" = 0.0 }')
    print(f"\ndeceleration: stop {plain:.0f} r/min/s (ramp {stop_rate:g}), quick stop {quick:.0f} "
          f"(ramp {quick_rate:g}), quick stop without its own ramp {unset:.0f}")
    assert plain == pytest.approx(stop_rate, rel=0.1)
    assert quick == pytest.approx(quick_rate, rel=0.1)
    assert unset == pytest.approx(stop_rate, rel=0.1)  # 0 = the stop ramp


def test_field_economy_value_must_be_on_or_off(tmp_path):
    from host.errors import ConfigError

    body = ECONOMY.replace("{{name}}", "bad").replace("{{kind}}", "emulated").replace("{{value}}", "0.5")
    path = _write(tmp_path, "bad", body)
    with pytest.raises(ConfigError) as err:
        load_scenario(path)
    msg = str(err.value)
    assert "timeline[0].value" in msg and "must be 1 (on) or 0 (off)" in msg and "bad.toml" in msg
