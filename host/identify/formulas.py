"""The hand formulas of the trade, one function each (also behind `dcrig calc`).

Owns: the copper resistance-temperature relation and the resistance method of IEC 60034-1,
the retardation relation of IEEE Std 113, the steady armature equation, and the power-supply
code pairing of NEMA MG 1 as far as it is quoted in the project's REFERENCES.md. Pure Python,
no numpy needed. Imports nothing of the project.
"""

from __future__ import annotations

import math

# IEC 60034-1: for copper R2/R1 = (235 + theta2)/(235 + theta1) (235 from memory; IEEE
# practice uses 234.5). The model (rtmodel.kernel) uses the same constant.
COPPER_K_C = 235.0
RPM = math.pi / 30.0  # rad/s per r/min


def resistance_at(r1_ohm: float, theta1_C: float, theta2_C: float, k_C: float = COPPER_K_C) -> float:
    """Resistance of a copper winding at theta2 from a reading r1 at theta1 (IEC 60034-1).

    R2 = R1 (k + theta2) / (k + theta1), k = 235 degC for copper.
    """
    return r1_ohm * (k_C + theta2_C) / (k_C + theta1_C)


def winding_temp_C(r1_ohm: float, theta1_C: float, r2_ohm: float, k_C: float = COPPER_K_C) -> float:
    """Winding temperature from a hot resistance r2 and a cold reading r1 at theta1
    (the resistance method of IEC 60034-1): theta2 = (R2/R1)(k + theta1) - k."""
    return r2_ohm / r1_ohm * (k_C + theta1_C) - k_C


def temperature_rise_K(r1_ohm: float, theta1_C: float, r2_ohm: float, coolant_C: float,
                       k_C: float = COPPER_K_C) -> float:
    """Temperature rise over the coolant by the resistance method (IEC 60034-1):
    dtheta = (R2 - R1)/R1 (k + theta1) + theta1 - theta_a."""
    return winding_temp_C(r1_ohm, theta1_C, r2_ohm, k_C) - coolant_C


def retardation_inertia_kgm2(loss_W: float, speed_rpm: float, decel_rpm_per_s: float) -> float:
    """Inertia from a run-down (the retardation method of IEEE Std 113, from memory):

        J = P / (w dw/dt) = P / ((pi/30)^2 n dn/dt) = P / (0.010966 n dn/dt)

    with P the losses at speed n (r/min) and dn/dt the deceleration there (r/min per s,
    taken positive)."""
    return loss_W / (RPM * speed_rpm * RPM * decel_rpm_per_s)


def armature_emf_V(vt_V: float, ia_A: float, r_ohm: float, brush_V: float = 2.0, motor: bool = True) -> float:
    """EMF from the terminal values (any machines textbook): motor E = Vt - Ia R - Vb,
    generator E = Vt + Ia R + Vb (Ia taken positive out of the generator)."""
    drop = ia_A * r_ohm + (brush_V if ia_A != 0 else 0.0)
    return vt_V - drop if motor else vt_V + drop


def speed_from_emf_rpm(emf_V: float, emf_ref_V: float, speed_ref_rpm: float) -> float:
    """At one excitation E is proportional to speed: n = n_ref E / E_ref."""
    return speed_ref_rpm * emf_V / emf_ref_V


# NEMA MG 1 power-supply code C (three-phase full-wave, six controlled pulses): the ac line
# voltage paired with a rated dc armature voltage, as quoted in a motor manufacturer's
# instruction manual (REFERENCES.md). Only these pairs are quoted; no others are claimed.
NEMA_CODE_C_AC_FOR_DC_V = {240.0: 230.0, 500.0: 460.0, 550.0: 460.0}


def nema_code_c_ac_V(rated_dc_V: float) -> float | None:
    """The ac supply voltage NEMA MG 1 code C pairs with this rated dc voltage, or None."""
    for dc, ac in NEMA_CODE_C_AC_FOR_DC_V.items():
        if abs(rated_dc_V - dc) < 0.5:
            return ac
    return None
