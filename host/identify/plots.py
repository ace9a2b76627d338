"""One PNG per fit: the record's points, what was fitted, and what was left out.

Owns the fit plots (matplotlib, headless Agg). Reads only Fit.plot/values; no fitting here.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .fits import Fit, curve_eval


def _axes(title, n=1):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(n, 1, figsize=(8, 4.5 * n), squeeze=False)
    fig.suptitle(title, fontsize=10)
    return plt, fig, [a[0] for a in ax]


def plot_fit(fit: Fit, path: str | Path) -> Path:
    """Write the PNG of one fit; returns its path."""
    path = Path(path)
    d = fit.plot
    title = f"{fit.kind}: {Path(fit.source).name}"
    plt, fig, (ax,) = _axes(title)
    if fit.kind == "open-circuit":
        keep = d["keep"]
        ax.plot(d["i"][keep], d["e_ref"][keep], "o", ms=4, label=f"points at {d['n_ref']:g} r/min (normalised)")
        if (~keep).any():
            ax.plot(d["i"][~keep], d["e_ref"][~keep], "x", color="red", ms=8, label="flagged outliers (left out)")
        x = np.linspace(0, d["bx"][-1] * 1.05, 400)
        y, _ = curve_eval(d["bx"], d["by"], x)
        ax.plot(x, y, "-", label="curve written to the config (monotone cubic)")
        xa = x[d["e_air0"] + d["s_air"] * x <= max(d["by"]) * 1.1]
        ax.plot(xa, d["e_air0"] + d["s_air"] * xa, "--", lw=0.8, label="air-gap line")
        if d["knee"] is not None:
            ax.axvline(d["knee"], color="grey", lw=0.8, ls=":", label=f"knee {d['knee']:.3g} A (half the air-gap slope)")
        ax.set_xlabel("field current (A)")
        ax.set_ylabel("EMF (V)")
    elif fit.kind == "resistance":
        i = d["i"]
        x = np.linspace(0, i.max() * 1.05, 50)
        ax.plot(i, d["v"], "o", label="V-I points")
        ax.plot(x, d["vb"] + d["r"] * x, "-", label=f"V = {d['vb']:.3g} V + {d['r']:.5g} ohm x I")
        ax.set_xlabel("current (A)")
        ax.set_ylabel("voltage (V)")
    elif fit.kind == "temperature":
        t = d["t"]
        ax.plot(t, d["r"], "o", label="hot readings")
        ax.plot([0.0], [d["r0"]], "s", label=f"at switch-off {d['r0']:.5g} ohm")
        ax.plot([0.0, t.max()], [d["r0"], d["r"][-1] if len(t) == 1 else np.polyval(np.polyfit(t, d["r"], 1), t.max())], "-")
        ax.axhline(d["r1"], color="grey", ls="--", label=f"cold {d['r1']:.5g} ohm")
        ax.set_xlabel("time after switch-off (s)")
        ax.set_ylabel("resistance (ohm)")
    elif fit.kind == "field-step":
        ax.plot(d["t"], d["i"], lw=0.8, label="field current")
        ax.set_xlabel("time (s)")
        ax.set_ylabel("A")
        a2 = ax.twinx()
        a2.plot(np.interp(d["ic"], np.sort(d["i"][d["k0"]:]), np.sort(d["t"][d["k0"]:])), d["lc"], "o", color="tab:red",
                ms=4, label="incremental inductance dpsi/di")
        a2.set_ylabel("H")
        a2.legend(loc="lower right", fontsize=8)
    elif fit.kind == "armature-step":
        ax.plot(d["t"], d["i"], lw=0.8, label="armature current")
        ax.plot(d["t"], d["model"], "--", label="first-order response with the fitted La, R")
        ax.set_xlabel("time (s)")
        ax.set_ylabel("A")
    elif fit.kind == "losses":
        w = np.linspace(0, d["w"].max() * 1.05, 100)
        ax.plot(d["w"] * 30 / np.pi, d["p"] / 1e3, "o", label="rotational losses")
        ax.plot(w * 30 / np.pi, (d["tc"] * w + d["b"] * w * w) / 1e3, "-", label="Tc w + b w^2")
        ax.set_xlabel("speed (r/min)")
        ax.set_ylabel("kW")
    elif fit.kind == "run-down":
        ax.plot(d["t"], d["n"], lw=0.8, label="run-down record")
        ax.plot(d["t"], d["n_model"], "--", label="J dw/dt = -(Tc + b w) with the fitted J")
        ax.set_xlabel("time (s)")
        ax.set_ylabel("r/min")
    elif fit.kind == "acceleration":
        m = d["m"]
        ax.plot(d["acc"][m], d["te"] - d["tl"], ".", ms=3, label="K phi Ia - T_loss")
        a = np.linspace(0, d["acc"][m].max(), 10)
        ax.plot(a, d["j"] * a, "-", label=f"J = {d['j']:.4g} kg m^2")
        ax.set_xlabel("dw/dt (rad/s^2)")
        ax.set_ylabel("N m")
    elif fit.kind == "load-test":
        ax.plot(d["ise"], d["dnet"], "o", label="net excitation - shunt current")
        x = np.linspace(0, d["ise"].max() * 1.05, 10)
        ax.plot(x, d["ratio"] * x, "-", label=f"turns ratio {d['ratio']:.4g}")
        ax.set_xlabel("series field current (A)")
        ax.set_ylabel("equivalent shunt A")
    else:
        ax.text(0.5, 0.5, "no plot for this record", ha="center", transform=ax.transAxes)
    ax.grid(True, alpha=0.3)
    ax.legend(loc="best", fontsize=8)
    fig.tight_layout()
    fig.savefig(path, dpi=100)
    plt.close(fig)
    return path
