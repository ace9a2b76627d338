"""The fits of each commissioning test: records in, parameters with their fit quality out.

Owns the numerical identification (numpy only). Every function takes a checked Record
(host.identify.records) and returns a result dataclass with the values, a fit-quality dict
(residuals, spreads, point counts), warnings, and what a plot needs. Inconsistent data that
cannot give a value (a falling curve) raises ConfigError naming file, column and rule.
Imports nothing of the step kernel; rtmodel.magnetization.pchip_slopes is the same monotone
curve the model uses, so a fitted table means here what it means in a run.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from rtmodel.magnetization import pchip_slopes

from ..errors import ConfigError
from .formulas import RPM, resistance_at
from .records import Record, check_positive

MAX_CURVE_POINTS = 24  # written to the config (the schema allows 32)


@dataclass
class Fit:
    """A fit result: values (unit-suffixed names), quality, warnings, plot data."""

    kind: str
    source: str
    values: dict[str, float] = field(default_factory=dict)
    quality: dict[str, float | int | str] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    plot: dict = field(default_factory=dict)
    extra: dict = field(default_factory=dict)  # tables (curve points, flagged points)


# ------------------------------------------------------------------ curve helpers

def hermite_eval(x_k, y_k, d_k, x):
    """Cubic Hermite curve through (x_k, y_k) with slopes d_k, linear past the ends.

    Returns (y, dy/dx) at x (array). The same curve as rtmodel.magnetization.curve_emf for
    x >= 0."""
    x_k = np.asarray(x_k, float)
    y_k = np.asarray(y_k, float)
    d_k = np.asarray(d_k, float)
    x = np.atleast_1d(np.asarray(x, float))
    y = np.empty_like(x)
    dy = np.empty_like(x)
    hi = x >= x_k[-1]
    lo = x <= x_k[0]
    y[hi] = y_k[-1] + d_k[-1] * (x[hi] - x_k[-1])
    dy[hi] = d_k[-1]
    y[lo] = y_k[0] + d_k[0] * (x[lo] - x_k[0])
    dy[lo] = d_k[0]
    mid = ~(hi | lo)
    if mid.any():
        xm = x[mid]
        k = np.clip(np.searchsorted(x_k, xm, side="right") - 1, 0, len(x_k) - 2)
        h = x_k[k + 1] - x_k[k]
        t = (xm - x_k[k]) / h
        t2, t3 = t * t, t * t * t
        y[mid] = ((2 * t3 - 3 * t2 + 1) * y_k[k] + (t3 - 2 * t2 + t) * h * d_k[k]
                  + (-2 * t3 + 3 * t2) * y_k[k + 1] + (t3 - t2) * h * d_k[k + 1])
        dy[mid] = ((6 * t2 - 6 * t) / h * y_k[k] + (3 * t2 - 4 * t + 1) * d_k[k]
                   + (-6 * t2 + 6 * t) / h * y_k[k + 1] + (3 * t2 - 2 * t) * d_k[k + 1])
    return y, dy


def curve_eval(i_A, e_V, x):
    """The model's open-circuit curve (monotone cubic) at x >= 0: (E, dE/di)."""
    return hermite_eval(i_A, e_V, pchip_slopes(i_A, e_V), x)


def curve_inverse(i_A, e_V, e):
    """Excitation that gives EMF e on the curve (bisection on the monotone curve)."""
    e = np.atleast_1d(np.asarray(e, float))
    lo = np.zeros_like(e)
    hi = np.full_like(e, float(i_A[-1]))
    # widen past the last point where needed (the curve is linear there)
    for _ in range(60):
        top, _ = curve_eval(i_A, e_V, hi)
        grow = top < e
        if not grow.any():
            break
        hi[grow] *= 2.0
    for _ in range(80):
        mid = 0.5 * (lo + hi)
        val, _ = curve_eval(i_A, e_V, mid)
        below = val < e
        lo = np.where(below, mid, lo)
        hi = np.where(below, hi, mid)
    return 0.5 * (lo + hi)


def _pava(y, w):
    """Pool-adjacent-violators: the non-decreasing fit of y (weights w) as blocks.

    Returns a list of (start, end_exclusive, value)."""
    blocks = []
    for k in range(len(y)):
        blocks.append([k, k + 1, float(y[k]), float(w[k])])
        while len(blocks) > 1 and blocks[-2][2] >= blocks[-1][2]:
            b = blocks.pop()
            a = blocks[-1]
            wt = a[3] + b[3]
            a[2] = (a[2] * a[3] + b[2] * b[3]) / wt
            a[3] = wt
            a[1] = b[1]
    return [(a, b, v) for a, b, v, _ in blocks]


def _local_quadratic_residuals(x, y):
    """Residual of each point against a quadratic through its (up to) four nearest
    neighbours in x, the point itself left out (robust to the curve's bend)."""
    n = len(x)
    r = np.zeros(n)
    for k in range(n):
        idx = [j for j in np.argsort(np.abs(x - x[k])) if j != k][:4]
        xs, ys = x[idx], y[idx]
        if len(set(np.round(xs, 12))) < 3:
            r[k] = 0.0
            continue
        c = np.polyfit(xs - x[k], ys, 2)
        r[k] = y[k] - c[-1]
    return r


# ------------------------------------------------------------------ open-circuit curve

def fit_open_circuit(rec: Record, reference_speed_rpm: float | None = None) -> Fit:
    """Open-circuit saturation curve at one reference speed (IEEE Std 113, IEC 60034-4).

    Each point is normalised to the reference speed, E_ref = E n_ref / n (E is proportional
    to speed at one excitation); points far off their neighbours are flagged as outliers
    and left out; the rest is made monotone (pool-adjacent-violators, merging points that
    disagree within noise) and written as the table the model interpolates. The residual
    EMF is the point at zero field current (extrapolated, with a warning, when not measured).

    Knee: the field current where the curve's slope has fallen to half the air-gap slope
    (our definition; the air-gap slope is a straight-line fit through the points below 60 %
    of the top EMF). The knee region runs from 3/4 to 1/4 of the air-gap slope; fewer than
    three measured points in it is "thin data".
    """
    src = rec.source
    fit = Fit("open-circuit", src)
    check_positive(rec, "field_current_A")
    check_positive(rec, "emf_V")
    i = rec["field_current_A"].copy()
    e = rec["emf_V"].copy()
    # a reading within 0.2 % of the top current is the field-open residual point (meter offset)
    i[i <= 0.002 * i.max()] = 0.0
    if rec.has("speed_rpm"):
        check_positive(rec, "speed_rpm", allow_zero=False)
        n = rec["speed_rpm"].copy()
    elif "speed_rpm" in rec.meta:
        n = np.full_like(i, rec.meta["speed_rpm"])
    else:
        raise ConfigError(f"{src}: speed_rpm: give a speed_rpm column or a '# speed_rpm = VALUE' line, got neither")
    # default reference: the test speed with the most points (the highest on a tie), rounded
    rounded = np.round(n, -1 if np.median(n) > 200 else 0)
    vals_, counts_ = np.unique(rounded, return_counts=True)
    mode = float(vals_[counts_ == counts_.max()].max())
    n_ref = reference_speed_rpm or rec.meta.get("reference_speed_rpm") or mode
    speeds = sorted(set(np.round(n, 6)))
    e_ref = e * n_ref / n
    order = np.argsort(i, kind="stable")
    i, e_ref, n, lines = i[order], e_ref[order], n[order], np.asarray(rec.lines)[order]
    top = float(np.max(e_ref))
    if top <= 0:
        raise ConfigError(f"{src}: emf_V: an open-circuit curve needs some EMF above zero, got max {top:g}")
    # --- outliers
    keep = np.ones(len(i), bool)
    flagged = []
    if len(i) >= 6:
        # one point at a time, worst first: its residual against a quadratic through its
        # neighbours, compared with the scatter of the others once it is left out (an outlier
        # spoils its neighbours' residuals, so the scale is taken without it)
        sigma = 0.0
        for _ in range(max(1, len(i) // 5)):
            idx = np.nonzero(keep)[0]
            r = _local_quadratic_residuals(i[idx], e_ref[idx])
            r[0] = r[-1] = 0.0  # the end points have neighbours on one side only
            k = int(np.argmax(np.abs(r)))
            rest = np.delete(idx, k)
            r_rest = _local_quadratic_residuals(i[rest], e_ref[rest])[1:-1]
            sigma = 1.4826 * float(np.median(np.abs(r_rest))) if r_rest.size else 0.0
            if abs(r[k]) <= max(6.0 * sigma, 0.01 * top):
                break
            j = idx[k]
            keep[j] = False
            flagged.append({"line": int(lines[j]), "field_current_A": float(i[j]), "emf_V_at_ref": float(e_ref[j]),
                            "off_by_V": float(r[k])})
        fit.quality["noise_V"] = sigma
    else:
        fit.warnings.append(f"{src}: only {len(i)} points: too few to flag outliers (6 or more needed)")
        sigma = 0.0
    for f in flagged:
        fit.warnings.append(
            f"{src}: line {f['line']}: point at {f['field_current_A']:g} A is {f['off_by_V']:+.1f} V off its "
            f"neighbours: flagged as an outlier and left out")
    ik, ek, nk, lk = i[keep], e_ref[keep], n[keep], lines[keep]
    # --- a falling curve: a drop that noise cannot explain
    tol = max(3.0 * sigma, 0.005 * top)
    run_max = np.maximum.accumulate(ek)
    drop = run_max - ek
    if np.any(drop > tol):
        k = int(np.argmax(drop > tol))
        raise ConfigError(
            f"{src}: emf_V: the open-circuit curve falls (line {lk[k]}: {ek[k]:.1f} V at {ik[k]:g} A after "
            f"{run_max[k]:.1f} V at a lower field current, normalised to {n_ref:g} r/min); "
            f"a curve must rise with field current, got a drop of {drop[k]:.1f} V")
    # --- merge readings at (nearly) the same current, e.g. the same set point at two speeds,
    # then pool violators
    gap = 0.01 * float(ik.max())
    cluster = np.concatenate([[0], np.cumsum(np.diff(ik) > gap)])
    cluster[ik == 0.0] = -1  # the residual point stays on its own
    _, inv = np.unique(cluster, return_inverse=True)
    ux = np.array([ik[inv == j].mean() for j in range(inv.max() + 1)])
    uy = np.array([ek[inv == j].mean() for j in range(len(ux))])
    uw = np.array([(inv == j).sum() for j in range(len(ux))], float)
    blocks = _pava(uy, uw)
    bx = np.array([np.average(ux[a:b], weights=uw[a:b]) for a, b, _ in blocks])
    by = np.array([v for _, _, v in blocks])
    pooled = len(ux) - len(blocks)
    if pooled:
        fit.quality["points_pooled"] = pooled
    # --- residual point
    if bx[0] > 0.0:
        if len(bx) >= 2:
            e0 = by[0] - (by[1] - by[0]) / (bx[1] - bx[0]) * bx[0]
        else:
            e0 = 0.0
        e0 = float(min(max(e0, 0.0), 0.5 * by[0]))
        fit.warnings.append(
            f"{src}: no point at zero field current: residual EMF extrapolated to {e0:.1f} V "
            "(measure it with the field open)")
        bx = np.concatenate([[0.0], bx])
        by = np.concatenate([[e0], by])
        fit.quality["residual"] = "extrapolated"
    else:
        fit.quality["residual"] = "measured"
    # --- thin out to the table size, keeping the residual point
    if len(bx) > MAX_CURVE_POINTS:
        groups = np.array_split(np.arange(1, len(bx)), MAX_CURVE_POINTS - 1)
        bx = np.concatenate([[bx[0]], [bx[g].mean() for g in groups]])
        by = np.concatenate([[by[0]], [by[g].mean() for g in groups]])
    if len(bx) < 2 or not np.all(np.diff(by) > 0):
        raise ConfigError(f"{src}: emf_V: fewer than two distinct rising points remain after pooling, got {len(bx)}")
    # --- fit quality: how far the kept points lie from the table curve
    ev, _ = curve_eval(bx, by, ik)
    res = ek - ev
    fit.quality["rms_residual_V"] = float(np.sqrt(np.mean(res**2)))
    fit.quality["max_residual_V"] = float(np.max(np.abs(res)))
    # scatter: each kept reading against a quadratic through its neighbours (itself left out);
    # unlike the residual above it is not zero when the table keeps every reading
    if len(ik) >= 6:
        loo = _local_quadratic_residuals(ik, ek)[1:-1]
        fit.quality["scatter_V"] = float(np.sqrt(np.mean(loo**2)))
    fit.quality["points_used"] = int(keep.sum())
    fit.quality["points_flagged"] = len(flagged)
    fit.quality["speeds_rpm"] = ", ".join(f"{s:g}" for s in speeds)
    # --- air gap and knee
    low = (ik > 0) & (ek < 0.6 * top)
    if low.sum() >= 2 and len(set(ik[low])) >= 2:
        s_air, e_air0 = np.polyfit(ik[low], ek[low], 1)
    else:
        seg = np.diff(by) / np.diff(bx)
        s_air, e_air0 = float(seg.max()), float(by[0])
        fit.warnings.append(f"{src}: fewer than two points below 60 % of the top EMF: air-gap line from the steepest segment")
    grid = np.linspace(0.0, bx[-1], 2001)
    _, slope = curve_eval(bx, by, grid)
    past_steep = np.arange(len(grid)) >= int(np.argmax(slope))

    def where_slope(frac):
        hit = np.nonzero(past_steep & (slope <= frac * s_air))[0]
        return float(grid[hit[0]]) if hit.size else None

    knee = where_slope(0.5)
    k_lo, k_hi = where_slope(0.75), where_slope(0.25)
    if knee is None:
        fit.warnings.append(f"{src}: the curve never bends to half the air-gap slope within the test: knee not reached (thin data at saturation)")
    else:
        ke, _ = curve_eval(bx, by, [knee])
        fit.values["knee_field_current_A"] = knee
        fit.values["knee_emf_V"] = float(ke[0])
        hi = k_hi if k_hi is not None else bx[-1]
        n_knee = int(np.sum((ik >= (k_lo or 0.0)) & (ik <= hi)))
        fit.quality["points_in_knee_region"] = n_knee
        if n_knee < 3:
            fit.warnings.append(
                f"{src}: thin data around the knee: {n_knee} point(s) between {k_lo or 0:.3g} A and {hi:.3g} A "
                "(3 or more recommended)")
    fit.values["reference_speed_rpm"] = float(n_ref)
    fit.values["residual_emf_V"] = float(by[0])
    fit.values["air_gap_slope_V_per_A"] = float(s_air)
    fit.values["critical_field_ohm_at_reference_speed"] = float(s_air)
    fit.extra["field_current_A"] = [float(v) for v in bx]
    fit.extra["emf_V"] = [float(v) for v in by]
    fit.extra["flagged"] = flagged
    fit.plot = {"i": i, "e_ref": e_ref, "keep": keep, "n": n, "bx": bx, "by": by, "s_air": s_air,
                "e_air0": e_air0, "knee": knee, "n_ref": n_ref}
    return fit


# ------------------------------------------------------------------ resistance

def fit_resistance(rec: Record, reference_C: float = 20.0, winding: str = "armature") -> Fit:
    """Resistance from standstill V-I points: V = Vb + R I (least squares).

    With brushes the intercept is the brush contact drop, separated from the resistance;
    a field winding is fitted through the origin. R is corrected to reference_C by the
    copper relation of IEC 60034-1 (235 degC, from memory)."""
    src = rec.source
    fit = Fit("resistance", src)
    i = rec["current_A"]
    v = rec["voltage_V"]
    check_positive(rec, "current_A", allow_zero=False)
    brushes = rec.meta["brushes"] >= 0.5
    theta = rec.meta["winding_temp_C"]
    if brushes:
        if len(set(np.round(i, 9))) < 2:
            raise ConfigError(f"{src}: current_A: separating the brush drop needs points at two or more different currents, got {sorted(set(i.tolist()))}")
        A = np.column_stack([i, np.ones_like(i)])
        (r, vb), *_ = np.linalg.lstsq(A, v, rcond=None)
    else:
        r = float(np.dot(i, v) / np.dot(i, i))
        vb = 0.0
    pred = vb + r * i
    res = v - pred
    dof = max(len(i) - (2 if brushes else 1), 1)
    s2 = float(np.sum(res**2) / dof)
    sxx = float(np.sum((i - i.mean()) ** 2)) if brushes else float(np.sum(i**2))
    r_se = math.sqrt(s2 / sxx) if sxx > 0 else math.nan
    if r <= 0:
        raise ConfigError(f"{src}: voltage_V: the fitted resistance is not positive (voltage does not rise with current), got {r:.4g} ohm")
    fit.values["resistance_at_test_ohm"] = float(r)
    fit.values["test_temp_C"] = float(theta)
    fit.values["resistance_ohm"] = resistance_at(float(r), theta, reference_C)
    fit.values["reference_temp_C"] = float(reference_C)
    if brushes:
        fit.values["brush_drop_V"] = float(vb)
        if not 0.3 <= vb <= 4.0:
            fit.warnings.append(f"{src}: brush drop {vb:.2f} V is outside the usual 0.3-4 V (about 2 V for carbon brushes, common practice): check the low-current points")
    fit.quality["rms_residual_V"] = float(np.sqrt(np.mean(res**2)))
    fit.quality["resistance_std_error_pct"] = 100.0 * r_se / r if math.isfinite(r_se) else "n/a"
    fit.quality["points_used"] = len(i)
    if len(i) < 4:
        fit.warnings.append(f"{src}: only {len(i)} points: the fit has little redundancy (4 or more recommended)")
    fit.extra["winding"] = winding
    fit.plot = {"i": i, "v": v, "r": r, "vb": vb}
    return fit


# ------------------------------------------------------------------ temperature

def fit_temperature(rec: Record) -> Fit:
    """Winding temperature and rise by the resistance method (IEC 60034-1).

    Hot readings taken after switch-off are extrapolated back to the instant of switch-off
    (a straight line through the readings against time; one reading is taken as it is).
    theta2 = R2/R1 (235 + theta1) - 235, rise = theta2 - theta_coolant (235 from memory)."""
    src = rec.source
    fit = Fit("temperature", src)
    check_positive(rec, "resistance_ohm", allow_zero=False)
    t = rec["t_after_stop_s"]
    r = rec["resistance_ohm"]
    if np.any(t < 0):
        raise ConfigError(f"{src}: t_after_stop_s: must be >= 0 (time after switch-off), got {float(t.min())!r}")
    r1 = rec.meta["cold_resistance_ohm"]
    th1 = rec.meta["cold_temp_C"]
    tha = rec.meta["coolant_temp_C"]
    if len(t) >= 2:
        slope, r0 = np.polyfit(t, r, 1)
        res = r - (r0 + slope * t)
        fit.quality["rms_residual_ohm"] = float(np.sqrt(np.mean(res**2)))
        fit.quality["extrapolated_from_s"] = float(t[0])
        if slope > 0:
            fit.warnings.append(f"{src}: resistance_ohm: the hot readings rise with time after switch-off (the winding should cool): check the readings")
    else:
        r0 = float(r[0])
        if t[0] > 30.0:
            fit.warnings.append(f"{src}: one hot reading {t[0]:g} s after switch-off, not extrapolated: the temperature at switch-off is underestimated")
    r0 = float(r0)
    theta2 = r0 / r1 * (235.0 + th1) - 235.0
    fit.values["hot_resistance_ohm"] = r0
    fit.values["winding_temp_C"] = float(theta2)
    fit.values["rise_K"] = float(theta2 - tha)
    fit.values["coolant_temp_C"] = float(tha)
    if "test_current_A" in rec.meta:
        fit.values["test_current_A"] = rec.meta["test_current_A"]
    if r0 < r1:
        fit.warnings.append(
            f"{src}: resistance_ohm: the hot resistance ({r0:.5g} ohm) is below the cold one ({r1:.5g} ohm): "
            "inconsistent readings (swapped, or a different winding or bridge lead); the rise is not used")
        fit.quality["consistent"] = "no"
    else:
        fit.quality["consistent"] = "yes"
    fit.quality["points_used"] = len(t)
    fit.plot = {"t": t, "r": r, "r0": r0, "r1": r1}
    return fit


# ------------------------------------------------------------------ field step

def _tail(x, frac=0.1):
    m = max(3, int(len(x) * frac))
    return x[-m:]


def _step_start(t, v):
    """Index of the first sample after the voltage step (v crosses half its final value)."""
    v0 = float(np.median(v[: max(2, len(v) // 50)]))
    v1 = float(np.mean(_tail(v)))
    hit = np.nonzero(np.abs(v - v0) > 0.5 * abs(v1 - v0))[0]
    return (int(hit[0]) if hit.size else 0), v0, v1


def fit_field_step(rec: Record, reference_C: float = 20.0, curve: tuple | None = None) -> Fit:
    """Field resistance and inductance from a field-voltage step at rest.

    R = V/I_final (settled tail). The flux linkage psi(t) = integral (v - R i) dt against i
    gives the incremental inductance L(i) = dpsi/di. With the open-circuit curve (curve =
    (i_A, e_V)) the inductance is split as the model has it, L(i) = L_m0 E'(i)/E'_max + L_leak
    (least squares); otherwise L(i) on the lowest third of the rise is L_m0 and the leakage
    is left at its default. Time constant tau = (L_m0 + L_leak)/R (unsaturated) and the
    63.2 % time read off the record."""
    src = rec.source
    fit = Fit("field-step", src)
    t = rec["t_s"]
    v = rec["field_voltage_V"]
    i = rec["field_current_A"]
    k0, v0, v1 = _step_start(t, v)
    if abs(v1 - v0) <= 0:
        raise ConfigError(f"{src}: field_voltage_V: no voltage step found, got a constant {v1:g} V")
    i0 = float(np.mean(i[max(0, k0 - 5):k0])) if k0 > 0 else float(i[0])
    i_end = float(np.mean(_tail(i, 0.05)))
    tail = _tail(i, 0.1)
    tail_t = _tail(t, 0.1)
    drift = float(np.polyfit(tail_t, tail, 1)[0] * (tail_t[-1] - tail_t[0]))
    if abs(drift) > 0.005 * abs(i_end - i0):
        fit.warnings.append(f"{src}: field_current_A: still changing at the end of the record ({drift:+.3g} A over the last tenth): record longer for a settled resistance")
    if i_end <= 0:
        raise ConfigError(f"{src}: field_current_A: the current after the step must be > 0, got {i_end:g}")
    r_hot = (v1 - 0.0) / i_end
    theta = rec.meta["winding_temp_C"]
    psi = np.concatenate([[0.0], np.cumsum(0.5 * (v[1:] + v[:-1] - r_hot * (i[1:] + i[:-1])) * np.diff(t))])
    psi -= psi[max(k0 - 1, 0)]
    seg = slice(k0, None)
    ts, isg, ps = t[seg], i[seg], psi[seg]
    span = i_end - i0
    frac = (isg - i0) / span
    # incremental inductance over bins of the rise (5 % .. 90 % of the step)
    edges = np.linspace(0.05, 0.9, 18)
    ic, lc = [], []
    for a, b in zip(edges[:-1], edges[1:]):
        m = (frac >= a) & (frac < b)
        if m.sum() >= 4 and np.ptp(isg[m]) > 0:
            lc.append(float(np.polyfit(isg[m], ps[m], 1)[0]))
            ic.append(float(np.mean(isg[m])))
    if len(lc) < 3:
        raise ConfigError(f"{src}: t_s: too few samples during the current rise to fit an inductance (sample faster), got {len(lc)} usable bins")
    ic, lc = np.array(ic), np.array(lc)
    if curve is not None:
        ci, ce = curve
        _, de = curve_eval(ci, ce, ic)
        s_max = float(np.max(np.diff(ce) / np.diff(ci)))
        ratio = de / s_max
        A = np.column_stack([ratio, np.ones_like(ratio)])
        (lm0, lleak), *_ = np.linalg.lstsq(A, lc, rcond=None)
        if lleak < 0:
            lm0, lleak = float(np.dot(ratio, lc) / np.dot(ratio, ratio)), 0.0
        pred = lm0 * ratio + lleak
        fit.values["field_inductance_H"] = float(lm0)
        fit.values["field_leakage_H"] = float(lleak)
        fit.quality["inductance_split"] = "from the open-circuit curve slope"
        fit.quality["inductance_rms_residual_pct"] = float(100 * np.sqrt(np.mean((lc - pred) ** 2)) / np.mean(lc))
        if np.ptp(ratio) < 0.2:
            fit.warnings.append(f"{src}: the step stays on the curve's straight part: magnetizing and leakage inductance cannot be told apart well (step to rated field current)")
        l_unsat = lm0 + lleak
    else:
        low = ic <= i0 + 0.35 * span
        l_unsat = float(np.median(lc[low])) if low.any() else float(lc[0])
        fit.values["field_inductance_H"] = l_unsat
        fit.quality["inductance_split"] = "none (no open-circuit curve): leakage left at its default"
    fit.values["field_resistance_at_test_ohm"] = float(r_hot)
    fit.values["field_resistance_ohm"] = resistance_at(float(r_hot), theta, reference_C)
    fit.values["reference_temp_C"] = float(reference_C)
    fit.values["test_temp_C"] = float(theta)
    fit.values["field_time_constant_unsaturated_s"] = float(l_unsat / r_hot)
    hit = np.nonzero(frac >= 1 - math.exp(-1))[0]
    if hit.size:
        fit.values["field_63pct_time_s"] = float(ts[hit[0]] - t[k0])
    fit.quality["points_used"] = int(len(ts))
    fit.quality["inductance_bins"] = int(len(lc))
    fit.plot = {"t": t, "i": i, "ic": ic, "lc": lc, "k0": k0}
    return fit


# ------------------------------------------------------------------ armature step / autotune

def fit_armature_step(rec: Record, brush_drop_V: float = 2.0, r_ohm: float | None = None) -> Fit:
    """Armature circuit inductance from the current rise after a voltage step (rotor
    locked, field off, so no EMF): La di/dt = v - Vb - R i, so La = integral(v - Vb - R i) dt
    / (I_final - I_0) (flux linkage at the end over the current step); R from the settled
    tail (or given). The brush drop is the 2 V of common practice unless given."""
    src = rec.source
    fit = Fit("armature-step", src)
    t = rec["t_s"]
    v = rec["armature_voltage_V"]
    i = rec["armature_current_A"]
    k0, v0, v1 = _step_start(t, v)
    i0 = float(np.mean(i[max(0, k0 - 5):k0])) if k0 > 0 else float(i[0])
    i_end = float(np.mean(_tail(i, 0.05)))
    if i_end <= i0:
        raise ConfigError(f"{src}: armature_current_A: the current must rise after the voltage step, got {i0:g} -> {i_end:g} A")
    r = r_ohm if r_ohm is not None else (v1 - brush_drop_V) / i_end
    if r <= 0:
        raise ConfigError(f"{src}: armature_voltage_V: the step is below the brush drop ({brush_drop_V:g} V), got {v1:g} V")
    vb = np.where(i > 0, brush_drop_V, 0.0)
    drive = v - vb - r * i
    psi = np.concatenate([[0.0], np.cumsum(0.5 * (drive[1:] + drive[:-1]) * np.diff(t))])
    psi -= psi[max(k0 - 1, 0)]
    psi_end = float(np.mean(_tail(psi, 0.05)))
    la = psi_end / (i_end - i0)
    if la <= 0:
        raise ConfigError(f"{src}: armature_current_A: the fitted inductance is not positive (does the current lag the voltage?), got {la:.3g} H")
    frac = (i - i0) / (i_end - i0)
    hit = np.nonzero((np.arange(len(t)) >= k0) & (frac >= 1 - math.exp(-1)))[0]
    tau63 = float(t[hit[0]] - t[k0]) if hit.size else math.nan
    fit.values["la_H"] = float(la)
    fit.values["armature_circuit_ohm"] = float(r)
    fit.values["armature_time_constant_s"] = float(la / r)
    fit.values["armature_63pct_time_s"] = tau63
    # quality: the first-order response with these values against the record
    model = i0 + (i_end - i0) * (1 - np.exp(-np.clip(t - t[k0], 0, None) * r / la))
    after = np.arange(len(t)) >= k0
    fit.quality["rms_residual_pct"] = float(100 * np.sqrt(np.mean((i[after] - model[after]) ** 2)) / (i_end - i0))
    fit.quality["points_used"] = int(after.sum())
    if after.sum() < 50 or (t[-1] - t[k0]) < 4 * la / r:
        fit.warnings.append(f"{src}: the record covers {(t[-1] - t[k0]) / (la / r):.1f} time constants with {after.sum()} samples: record 5 or more time constants")
    fit.plot = {"t": t, "i": i, "model": model}
    return fit


def fit_autotune(rec: Record) -> Fit:
    """A drive's current-loop autotune: the drive's own values taken as they are (last row)."""
    fit = Fit("autotune", rec.source)
    check_positive(rec, "armature_inductance_H", allow_zero=False)
    fit.values["la_H"] = float(rec["armature_inductance_H"][-1])
    if rec.has("armature_resistance_ohm"):
        fit.values["armature_circuit_ohm"] = float(rec["armature_resistance_ohm"][-1])
    fit.quality["method"] = "the drive's autotune (its own identification, not checked here)"
    fit.quality["points_used"] = rec.n
    return fit


# ------------------------------------------------------------------ losses, run-down, acceleration

def _local_slope(t, y, half_width_s):
    """dy/dt by a straight-line fit over +-half_width_s around each sample."""
    out = np.empty_like(y)
    for k in range(len(t)):
        m = np.abs(t - t[k]) <= half_width_s
        if m.sum() < 3:
            m = np.argsort(np.abs(t - t[k]))[:3]
        out[k] = np.polyfit(t[m], y[m], 1)[0]
    return out


def fit_losses(rec: Record, armature_circuit_ohm: float | None = None) -> Fit:
    """Rotational losses at speed: P = E Ia = (V - Ia R - Vb) Ia at steady no load (the
    armature input less armature copper and brush loss), and the friction law
    P = T_c w + b w^2 (least squares: coulomb T_c, viscous b)."""
    src = rec.source
    fit = Fit("losses", src)
    check_positive(rec, "speed_rpm", allow_zero=False)
    w = rec["speed_rpm"] * RPM
    if rec.has("loss_W"):
        p = rec["loss_W"].copy()
        fit.quality["losses"] = "as given (loss_W)"
    else:
        if not rec.has("armature_current_A"):
            raise ConfigError(f"{src}: armature_current_A: required with armature_voltage_V (to compute the losses), got no such column")
        r = rec.meta.get("armature_circuit_ohm", armature_circuit_ohm)
        if r is None:
            r = 0.0
            fit.warnings.append(f"{src}: no armature_circuit_ohm: the armature copper loss is neglected")
        vb = rec.meta["brush_drop_V"]
        ia = rec["armature_current_A"]
        p = (rec["armature_voltage_V"] - ia * r - vb) * ia
        fit.quality["losses"] = f"(V - Ia R - Vb) Ia with R {r:.5g} ohm, Vb {vb:g} V"
    if np.any(p <= 0):
        k = int(np.argmax(p <= 0))
        raise ConfigError(f"{src}: loss_W: rotational losses must be > 0 (line {rec.lines[k]}), got {float(p[k]):.4g}")
    if len(w) >= 2 and np.ptp(w) > 0.05 * w.max():
        A = np.column_stack([w, w * w])
        (tc, b), *_ = np.linalg.lstsq(A, p, rcond=None)
        if tc < 0:
            tc, b = 0.0, float(np.dot(w * w, p) / np.dot(w * w, w * w))
        if b < 0:
            tc, b = float(np.dot(w, p) / np.dot(w, w)), 0.0
        fit.quality["rms_residual_W"] = float(np.sqrt(np.mean((p - tc * w - b * w * w) ** 2)))
    else:
        tc, b = float(np.mean(p / w)), 0.0
        fit.warnings.append(f"{src}: losses at one speed only: all taken as dry (coulomb) friction")
    fit.values["coulomb_Nm"] = float(tc)
    fit.values["viscous_Nm_per_rad_s"] = float(b)
    fit.quality["points_used"] = len(w)
    fit.extra["speed_rpm"] = rec["speed_rpm"].tolist()
    fit.extra["loss_W"] = p.tolist()
    fit.plot = {"w": w, "p": p, "tc": tc, "b": b}
    return fit


def fit_run_down(rec: Record, losses: Fit) -> Fit:
    """Inertia by the retardation method (IEEE Std 113, from memory): J = P/(w dw/dt) at each
    speed where the losses P are known; dw/dt from a straight-line fit of the run-down over
    +-5 % of that speed. The spread over the loss points is the fit quality."""
    src = rec.source
    fit = Fit("run-down", src)
    t = rec["t_s"]
    n = rec["speed_rpm"]
    w = n * RPM
    speeds = np.asarray(losses.extra["speed_rpm"]) * RPM
    p = np.asarray(losses.extra["loss_W"])
    js, used = [], []
    for wk, pk in zip(speeds, p):
        m = np.abs(w - wk) <= 0.05 * wk
        if m.sum() < 5 or not (w.min() < 0.95 * wk and 1.05 * wk < w.max()):
            fit.warnings.append(f"{src}: the run-down does not pass {wk / RPM:.0f} r/min with 5 or more samples nearby: that loss point is not used")
            continue
        slope = np.polyfit(t[m], w[m], 1)[0]
        if slope >= 0:
            raise ConfigError(f"{src}: speed_rpm: the speed must fall during a run-down (near {wk / RPM:.0f} r/min), got a rise")
        js.append(pk / (wk * -slope))
        used.append(wk / RPM)
    if not js:
        raise ConfigError(f"{src}: speed_rpm: the run-down passes none of the loss record's speeds ({', '.join(f'{s / RPM:.0f}' for s in speeds)} r/min), got {n.min():.0f}..{n.max():.0f} r/min")
    js = np.array(js)
    j = float(np.mean(js))
    fit.values["inertia_total_kgm2"] = j
    fit.values["coupled"] = float(rec.meta["coupled"])
    fit.quality["points_used"] = len(js)
    fit.quality["spread_pct"] = float(100 * np.ptp(js) / j) if len(js) > 1 else 0.0
    if len(js) > 1 and np.ptp(js) > 0.05 * j:
        fit.warnings.append(f"{src}: the inertia from the loss points spreads {100 * np.ptp(js) / j:.0f} %: losses or run-down inconsistent")
    # quality: the run-down predicted with J and the friction law against the record
    tc, b = losses.values["coulomb_Nm"], losses.values["viscous_Nm_per_rad_s"]
    wp = np.empty_like(w)
    wp[0] = w[0]
    for k in range(1, len(t)):
        h = t[k] - t[k - 1]
        wp[k] = max(wp[k - 1] - h * (tc + b * wp[k - 1]) / j, 0.0)
    fit.quality["rms_residual_rpm"] = float(np.sqrt(np.mean((wp - w) ** 2)) / RPM)
    fit.extra["per_point_kgm2"] = js.tolist()
    fit.extra["at_speed_rpm"] = used
    fit.plot = {"t": t, "n": n, "n_model": wp / RPM}
    return fit


def fit_acceleration(rec: Record, losses: Fit | None = None) -> Fit:
    """Inertia from an acceleration at known armature current: J dw/dt = K phi Ia - T_loss(w),
    K phi = (V - Ia R - Vb)/w (median over the record above 20 % of its top speed), dw/dt by
    local straight-line fits. T_loss from the losses record when given, else neglected (a
    warning says so: J is then overestimated by the friction share)."""
    src = rec.source
    fit = Fit("acceleration", src)
    t = rec["t_s"]
    w = rec["speed_rpm"] * RPM
    ia = rec["armature_current_A"]
    v = rec["armature_voltage_V"]
    r = rec.meta["armature_circuit_ohm"]
    vb = rec.meta["brush_drop_V"]
    fast = w > 0.2 * w.max()
    if fast.sum() < 10:
        raise ConfigError(f"{src}: speed_rpm: the motor must reach speed during the record (10 samples above 20 % of the top speed), got {int(fast.sum())}")
    kphi = float(np.median((v[fast] - ia[fast] * r - vb) / w[fast]))
    if kphi <= 0:
        raise ConfigError(f"{src}: armature_voltage_V: no EMF found (V - Ia R - Vb <= 0), got K phi {kphi:.4g} V s/rad")
    acc = _local_slope(t, w, 0.03 * (t[-1] - t[0]))
    m = (acc > 0.05 * acc.max()) & (w > 0.05 * w.max())
    te = kphi * ia[m]
    tl = np.zeros(m.sum())
    if losses is not None:
        tl = losses.values["coulomb_Nm"] + losses.values["viscous_Nm_per_rad_s"] * w[m]
    else:
        fit.warnings.append(f"{src}: no losses record: friction neglected, the inertia is overestimated by the friction share")
    a = acc[m]
    j = float(np.dot(te - tl, a) / np.dot(a, a))
    if j <= 0:
        raise ConfigError(f"{src}: armature_current_A: the fitted inertia is not positive, got {j:.4g} kg m^2")
    fit.values["inertia_total_kgm2"] = j
    fit.values["flux_constant_Vs"] = kphi
    fit.values["coupled"] = float(rec.meta["coupled"])
    fit.quality["rms_residual_Nm"] = float(np.sqrt(np.mean((te - tl - j * a) ** 2)))
    fit.quality["points_used"] = int(m.sum())
    fit.plot = {"t": t, "w": w, "acc": acc, "m": m, "te": te, "tl": tl, "j": j}
    return fit


# ------------------------------------------------------------------ series-field turns ratio

def fit_turns_ratio(rec: Record, curve: tuple, curve_speed_rpm: float) -> Fit:
    """Series-field turns per shunt turn from steady load points of a series or compound
    machine: E = V - Ia Ra - I_se R_se - Vb; the curve read backwards at E n_ref / n gives the
    net excitation; net - I_shunt = N I_se (least squares through the origin). N > 0 is
    cumulative, N < 0 differential (motor convention). Armature reaction, if the machine has
    much, shows up as a smaller N (it is not separated here)."""
    src = rec.source
    fit = Fit("load-test", src)
    v = rec["armature_voltage_V"]
    ia = rec["armature_current_A"]
    ish = rec["field_current_A"]
    check_positive(rec, "speed_rpm", allow_zero=False)
    n = rec["speed_rpm"]
    ra = rec.meta["armature_circuit_ohm"]
    rse = rec.meta["series_ohm"]
    vb = rec.meta["brush_drop_V"]
    short = rec.meta["short_shunt"] >= 0.5
    ise = ia + ish if short else ia
    e = v - ia * ra - ise * rse - vb
    e_ref = e * curve_speed_rpm / n
    net = curve_inverse(curve[0], curve[1], e_ref)
    if np.ptp(ise) <= 0:
        raise ConfigError(f"{src}: armature_current_A: load points at two or more different currents are needed, got one current")
    num = float(np.dot(net - ish, ise))
    ratio = num / float(np.dot(ise, ise))
    res = net - ish - ratio * ise
    fit.values["series_turns_ratio"] = abs(ratio)
    fit.values["compound_sign"] = 1.0 if ratio >= 0 else -1.0
    fit.extra["compound"] = "cumulative" if ratio >= 0 else "differential"
    fit.quality["rms_residual_A"] = float(np.sqrt(np.mean(res**2)))
    fit.quality["points_used"] = len(v)
    if len(v) < 3:
        fit.warnings.append(f"{src}: {len(v)} load points: a turns ratio from fewer than 3 points has no check")
    fit.plot = {"ise": ise, "dnet": net - ish, "ratio": ratio}
    return fit
