"""Machine-harm checks: what would have damaged the real machine, whatever the controller did.

Each check reads only the frame record and the machine's limits in the run's meta (put there
from the machine config and the scenario's [harm] table by host.scenario.run.harm_limits):

    commutation_limit     |Ia peak in frame| > I_comm(|n|/n_base) x I_rated, the limit curve
                          falling above base speed (piecewise linear in per unit)
    overspeed             |n| > mechanical_limit_rpm
    field_loss_energised  If < field_loss_fraction x If_rated while |Ia| > field_loss_current_pu x
                          I_rated (not for series machines, whose field is the armature current;
                          for a shunt field across the armature, against If_rated x |Vt|/V_rated
                          once |Vt| > 0.3 V_rated)
    winding_temperature   armature temperature > the insulation class limit (IEC 60034-1
                          thermal classes, from memory: B 130 C, F 155 C, H 180 C)
    armature_overvoltage  |frame-mean terminal voltage| > overvoltage_V
    current_rise_rate     rise of |frame-mean Ia| between frames / frame period > di_dt_A_per_s

A flagged check reports the first time and the worst value. Frame means smooth the bridge's
ripple; peaks inside a frame are the kernel's per-frame peak current.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

HARM_UNITS = {"commutation_limit": "A", "overspeed": "r/min", "field_loss_energised": "A",
              "winding_temperature": "C", "armature_overvoltage": "V", "current_rise_rate": "A/s"}


@dataclass
class HarmResult:
    check: str
    flagged: bool
    accepted: bool  # flagged, but the scenario declares it inherent in its fault ([harm] accept)
    text: str
    t_s: float = math.nan  # first time over the limit
    value: float = math.nan  # worst value
    limit: float = math.nan
    unit: str = ""


def _first_worst(t, over, value, limit, check, what, unit, accept, worst_is_max=True):
    if not np.any(over):
        peak = float(np.max(value)) if len(value) else math.nan
        return HarmResult(check, False, False, f"{what}: worst {peak:.4g} {unit}, limit {limit:.4g} {unit}",
                          math.nan, peak, limit, unit)
    k = int(np.argmax(over))
    idx = np.nonzero(over)[0]
    w = idx[np.argmax(value[idx])] if worst_is_max else idx[np.argmin(value[idx])]
    return HarmResult(check, True, check in accept,
                      f"{what} from {t[k]:.3f} s, worst {value[w]:.4g} {unit} at {t[w]:.3f} s (limit {limit:.4g} {unit})",
                      float(t[k]), float(value[w]), float(limit), unit)


def harm_checks(frames: np.ndarray, columns, meta: dict) -> list[HarmResult]:
    col = {c: k for k, c in enumerate(columns)}
    h = meta["harm"]
    accept = set(h.get("accept", []))
    out = []
    if not len(frames):
        return out
    t = frames[:, col["time_s"]]
    n = np.abs(frames[:, col["speed_rpm"]])
    ia = frames[:, col["armature_current_A"]]
    ipk = np.abs(frames[:, col["armature_current_peak_A"]])
    i_rated = h["rated_current_A"]

    # commutation limit: the curve at this speed; the check and the plot use the same values
    lim_A = np.interp(n / h["base_speed_rpm"], h["commutation_speed_pu"], h["commutation_current_pu"]) * i_rated
    over = ipk > lim_A
    ratio = ipk / lim_A
    r = _first_worst(t, over, ratio, 1.0, "commutation_limit", "armature current above the commutation limit",
                     "x limit", accept)
    if r.flagged:
        w = int(np.nonzero(over)[0][np.argmax(ratio[over])])
        r.value, r.limit, r.unit = float(ipk[w]), float(lim_A[w]), "A"
        r.text = (f"armature current above the commutation limit from {r.t_s:.3f} s, worst {ipk[w]:.0f} A at "
                  f"{n[w]:.0f} r/min where the limit is {lim_A[w]:.0f} A")
    else:
        w = int(np.argmax(ratio))
        r.value, r.limit, r.unit = float(ipk[w]), float(lim_A[w]), "A"
        r.text = f"commutation limit: worst {ipk[w]:.0f} A at {n[w]:.0f} r/min where the limit is {lim_A[w]:.0f} A"
    out.append(r)

    lim = h["mechanical_limit_rpm"]
    out.append(_first_worst(t, n > lim, n, lim, "overspeed", "speed above the mechanical limit", "r/min", accept))

    if h.get("connection") != "series" and h.get("rated_field_current_A", 0) > 0:
        i_f = frames[:, col["field_current_A"]]
        f_lim = h["field_loss_fraction"] * h["rated_field_current_A"]
        energised = np.abs(ia) > h["field_loss_current_pu"] * i_rated
        if str(h.get("connection", "")).startswith(("shunt", "compound")) and h.get("rated_voltage_V"):
            # a shunt field across the armature follows the terminal voltage: judge it against
            # the field that voltage should drive, from 30 % of rated voltage up (below it the
            # voltage itself limits the speed)
            va = np.abs(frames[:, col["terminal_voltage_V"]])
            energised &= va > 0.3 * h["rated_voltage_V"]
            over = (i_f < f_lim * va / h["rated_voltage_V"]) & energised
        else:
            over = (i_f < f_lim) & energised
        r = _first_worst(t, over, i_f, f_lim, "field_loss_energised",
                         f"field current below {f_lim:.3g} A with the armature carrying over "
                         f"{h['field_loss_current_pu'] * i_rated:.0f} A", "A", accept, worst_is_max=False)
        if not r.flagged:
            r.text = (f"field loss while energised: never (field below {f_lim:.3g} A only with the armature "
                      "under the current threshold)")
        out.append(r)
    else:
        out.append(HarmResult("field_loss_energised", False, False, "series machine: its field is the armature "
                              "current, nothing to lose separately"))

    temp = frames[:, col["armature_temperature_C"]]
    lim = h["temperature_limit_C"]
    out.append(_first_worst(t, temp > lim, temp, lim, "winding_temperature",
                            f"armature winding above its class {h.get('insulation_class', '?')} limit", "C", accept))

    va = np.abs(frames[:, col["terminal_voltage_V"]])
    lim = h["overvoltage_V"]
    out.append(_first_worst(t, va > lim, va, lim, "armature_overvoltage", "armature voltage above its limit", "V",
                            accept))

    period = float(meta["frame_period_s"])
    didt = np.zeros_like(ia)
    if len(ia) > 1:
        # rises of |Ia| only: a trip that phases back to inversion end takes the current down
        # fast, which is the protection working, not harm
        didt[1:] = np.maximum(np.diff(np.abs(ia)), 0.0) / period
    lim = h["di_dt_A_per_s"]
    out.append(_first_worst(t, didt > lim, didt, lim, "current_rise_rate", "armature current rise rate above the "
                            "machine's limit", "A/s", accept))
    return out
