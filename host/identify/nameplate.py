"""Nameplate estimate: every machine-config value from the rating plate and typical ratios.

Owns the typical ratios used where no test record gives a value. Each estimate carries its
origin "estimate" and the rule it came from; rules of thumb are marked "common practice,
no source" and recalled values "from memory", as the project's test rules ask. These are
starting values for a model, not a substitute for tests: a model built on them shows the
controller a plausible machine, not this machine.

Imports nothing of rtmodel.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .formulas import RPM, nema_code_c_ac_V, resistance_at

# the ratios, each with its label (kept together so docs/identify.md can list them)
RATIOS = {
    "armature_loss_share": (0.5, "half the rated losses (V I - P) are armature-circuit copper and brush loss (common practice, no source)"),
    "hot_C": (75.0, "resistances on the plate's rating are taken at 75 degC (common practice, no source)"),
    "armature_tau_s": (0.040, "armature time constant La/Ra about 40 ms for industrial DC motors (common practice, no source)"),
    "field_tau_s": (1.0, "unsaturated field time constant about 1 s (common practice, no source; large machines reach several seconds)"),
    "saturation_factor": (1.4, "air-gap-line EMF at rated field / curve EMF there about 1.4 (common practice, no source)"),
    "residual_pu": (0.025, "residual EMF about 2.5 % of rated EMF (common practice, no source)"),
    "inertia_H_s": (0.2, "stored energy at base speed about 0.2 s of rated power, J = 2 H P / w^2 (common practice, no source; the spread is wide)"),
    "friction_pu": (0.01, "friction and windage about 1 % of rated power at base speed, as dry friction (common practice, no source)"),
    "series_to_armature": (0.5, "series-motor field resistance about half the armature's (common practice, no source)"),
    "compound_series_to_armature": (0.15, "compound series field resistance about 15 % of the armature's (common practice, no source)"),
    "compound_series_share": (0.1, "a compound series field gives about 10 % of the shunt ampere-turns at rated current (common practice, no source)"),
}


@dataclass
class Nameplate:
    rated_power_kW: float
    rated_voltage_V: float
    rated_current_A: float
    rated_speed_rpm: float
    connection: str
    max_speed_rpm: float | None = None
    field_voltage_V: float | None = None
    field_current_A: float | None = None
    duty: str = "motor"


def frohlich_curve(i_rated_A: float, e_rated_V: float, e_res_V: float, k_sat: float, n_points: int = 9):
    """A generic saturation curve through the rated point: E = E_res + a i / (b + i)
    (Froehlich's form), with b chosen so that the air-gap line at rated field lies k_sat
    above the curve there. Returns (i, E) from 0 to 1.6 x rated field current."""
    # air-gap slope a/b; ratio airgap/curve at i_r: (a i_r / b) / (a i_r / (b + i_r)) = (b + i_r)/b
    b = i_rated_A / (k_sat - 1.0)
    a = (e_rated_V - e_res_V) * (b + i_rated_A) / i_rated_A
    i = np.linspace(0.0, 1.6 * i_rated_A, n_points)
    return i, e_res_V + a * i / (b + i)


def estimate(np_: Nameplate, reference_C: float = 20.0) -> dict[str, tuple]:
    """Config values from the nameplate alone: path -> (value, origin, why)."""
    out: dict[str, tuple] = {}
    v, i, p = np_.rated_voltage_V, np_.rated_current_A, np_.rated_power_kW * 1e3
    w = np_.rated_speed_rpm * RPM
    hot = RATIOS["hot_C"][0]
    series = np_.connection == "series"
    compound = np_.connection.startswith("compound")
    vb = 2.0
    share, why = RATIOS["armature_loss_share"]
    loss = max(v * i - p, 0.02 * v * i) if np_.duty == "motor" else max(0.05 * p, 0.02 * v * i)
    r_circ_hot = max((share * loss - vb * i) / i**2, 0.002 * v / i)
    if series:
        rse_hot = r_circ_hot * RATIOS["series_to_armature"][0] / (1 + RATIOS["series_to_armature"][0])
        ra_hot = r_circ_hot - rse_hot
        out["machine.series_resistance_ohm"] = (resistance_at(rse_hot, hot, reference_C), "estimate", RATIOS["series_to_armature"][1])
    elif compound:
        k = RATIOS["compound_series_to_armature"][0]
        ra_hot = r_circ_hot / (1 + k)
        out["machine.series_resistance_ohm"] = (resistance_at(k * ra_hot, hot, reference_C), "estimate", RATIOS["compound_series_to_armature"][1])
    else:
        ra_hot = r_circ_hot
    out["machine.ra_ohm"] = (resistance_at(ra_hot, hot, reference_C), "estimate", f"{why}; {RATIOS['hot_C'][1]}")
    out["machine.la_H"] = (RATIOS["armature_tau_s"][0] * r_circ_hot, "estimate", RATIOS["armature_tau_s"][1])
    out["machine.brush_drop_V"] = (vb, "default", "total brush drop about 2 V for carbon brushes (common practice, no source)")
    sign = 1.0 if np_.duty == "motor" else -1.0
    e_rated = v - sign * (i * r_circ_hot + vb)
    if series:
        i_exc = i
    else:
        if not (np_.field_current_A and np_.field_current_A > 0):
            raise ValueError("field_current_A")
        i_exc = np_.field_current_A
        vf = np_.field_voltage_V if np_.field_voltage_V else v
        rf_hot = vf / np_.field_current_A
        out["machine.field_resistance_ohm"] = (resistance_at(rf_hot, hot, reference_C), "estimate",
                                               f"rated field voltage / rated field current, {RATIOS['hot_C'][1]}")
        out["machine.rated_field_current_A"] = (np_.field_current_A, "nameplate", "rated field current")
    r_curve_hot = (out["machine.field_resistance_ohm"][0] * (235 + hot) / (235 + reference_C)) if not series else r_circ_hot
    out["machine.field_inductance_H"] = (RATIOS["field_tau_s"][0] * r_curve_hot, "estimate", RATIOS["field_tau_s"][1])
    if compound:
        ratio = RATIOS["compound_series_share"][0] * i_exc / i
        out["machine.series_turns_ratio"] = (ratio, "estimate", RATIOS["compound_series_share"][1])
    e_res = RATIOS["residual_pu"][0] * e_rated
    ci, ce = frohlich_curve(i_exc, e_rated, e_res, RATIOS["saturation_factor"][0])
    out["machine.magnetization.speed_rpm"] = (np_.rated_speed_rpm, "estimate", "curve estimated at rated speed")
    out["machine.magnetization.field_current_A"] = ([float(x) for x in ci], "estimate",
                                                   f"Froehlich-type curve through the rated point; {RATIOS['saturation_factor'][1]}; {RATIOS['residual_pu'][1]}")
    out["machine.magnetization.emf_V"] = ([float(x) for x in ce], "estimate", "see magnetization.field_current_A")
    h = RATIOS["inertia_H_s"][0]
    out["mechanics.inertia_kgm2"] = (2 * h * p / w**2, "estimate", RATIOS["inertia_H_s"][1])
    out["mechanics.coulomb_Nm"] = (RATIOS["friction_pu"][0] * p / w, "estimate", RATIOS["friction_pu"][1])
    return out


def supply_pairing(rated_dc_V: float) -> str:
    """The NEMA MG 1 power-supply code C pairing for this rated dc voltage, as a sentence."""
    ac = nema_code_c_ac_V(rated_dc_V)
    if ac is None:
        return (f"NEMA MG 1 code C: no pairing quoted for {rated_dc_V:g} V dc (the project quotes 240 V dc - 230 V ac "
                "and 500/550 V dc - 460 V ac only, from a manufacturer's manual)")
    vdo = 3 * math.sqrt(2) / math.pi * ac
    return (f"NEMA MG 1 code C (three-phase full-wave, 6 controlled pulses): {rated_dc_V:g} V dc pairs with {ac:g} V ac "
            f"(as quoted in a manufacturer's manual); the bridge's Vdo = 1.35 x {ac:g} = {vdo:.0f} V leaves "
            f"{100 * (1 - rated_dc_V / vdo):.0f} % margin")
