"""The campaign report: statistics over the results table, one self-contained HTML page
(jinja2, plots embedded as PNG data), and a JUnit XML summary for CI systems.

Owns: pass rate per scenario and controller, the worst run of each, and the sensitivity
measures. The margin of a run is `margin_pu`: its worst verdict margin as a fraction of that
verdict's bound (negative: failed). Sensitivity of a (scenario, controller) group to each
parameter, two named measures:
- Spearman rank correlation of margin_pu with the parameter (Spearman 1904; ties get average
  ranks): +1 means a larger value always gives more margin, -1 always less; robust to any
  monotone nonlinearity. The parameter with the largest |rho| is "the one the failures
  depend on most".
- pass-rate split: pass rate of the runs above the parameter's median minus that of the
  runs at or below it; directly "how much more often does it fail on the high side".
Reads rows (dicts) only; never imports dask or the kernel.
"""

from __future__ import annotations

import base64
import io
import math
import time
import xml.etree.ElementTree as ET
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

SENSITIVITY_NAME = "Spearman rank correlation of the run margin (margin_pu) with the parameter"


def rankdata(a) -> np.ndarray:
    """Ranks 1..n with ties given their average rank (as scipy.stats.rankdata 'average')."""
    a = np.asarray(a, dtype=float)
    sorter = np.argsort(a, kind="mergesort")
    inv = np.empty(len(a), dtype=np.intp)
    inv[sorter] = np.arange(len(a))
    s = a[sorter]
    new = np.r_[True, s[1:] != s[:-1]]
    dense = np.cumsum(new)[inv]
    starts = np.r_[np.nonzero(new)[0], len(a)]
    return 0.5 * (starts[dense] + starts[dense - 1] + 1)


def spearman(x, y) -> float:
    """Pearson correlation of the ranks; nan when either side is constant or n < 3."""
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    ok = np.isfinite(x) & np.isfinite(y)
    x, y = x[ok], y[ok]
    if len(x) < 3:
        return math.nan
    rx, ry = rankdata(x), rankdata(y)
    rx -= rx.mean()
    ry -= ry.mean()
    den = math.sqrt(float(np.dot(rx, rx) * np.dot(ry, ry)))
    return float(np.dot(rx, ry) / den) if den > 0 else math.nan


def pass_rate_split(x, passed) -> float:
    """Pass rate above the median of x minus pass rate at or below it (nan if a side is empty)."""
    x = np.asarray(x, dtype=float)
    passed = np.asarray(passed, dtype=bool)
    med = np.median(x)
    hi, lo = x > med, x <= med
    if not hi.any() or not lo.any():
        return math.nan
    return float(passed[hi].mean() - passed[lo].mean())


@dataclass
class Group:
    scenario: str
    controller: str
    rows: list
    params: list[str]
    n_pass: int = 0
    n_fail: int = 0
    n_error: int = 0
    worst: dict | None = None
    rho: dict = field(default_factory=dict)
    split: dict = field(default_factory=dict)
    most: str | None = None

    @property
    def n(self) -> int:
        return len(self.rows)

    @property
    def pass_rate(self) -> float:
        judged = self.n_pass + self.n_fail + self.n_error
        return self.n_pass / judged if judged else math.nan


def param_columns(rows) -> list[str]:
    cols = []
    for r in rows:
        for k in r:
            if k.startswith("param:") and k not in cols:
                cols.append(k)
    return cols


def analyse(rows) -> list[Group]:
    """Groups by (scenario, controller) with counts, worst run and sensitivities."""
    params = param_columns(rows)
    keyed: dict[tuple, list] = {}
    for r in rows:
        keyed.setdefault((r["scenario"], r["controller"]), []).append(r)
    groups = []
    for (scen, ctrl), rs in sorted(keyed.items()):
        g = Group(scen, ctrl, rs, params)
        g.n_pass = sum(r["status"] == "pass" for r in rs)
        g.n_fail = sum(r["status"] == "fail" for r in rs)
        g.n_error = sum(r["status"] == "error" for r in rs)
        judged = [r for r in rs if r["status"] in ("pass", "fail") and r.get("margin_pu") is not None]
        if judged:
            g.worst = min(judged, key=lambda r: r["margin_pu"])
        for pc in params:
            xs = [r.get(pc) for r in judged]
            if any(v is None for v in xs):
                continue
            g.rho[pc] = spearman(xs, [r["margin_pu"] for r in judged])
            g.split[pc] = pass_rate_split(xs, [r["status"] == "pass" for r in judged]) if judged else math.nan
        finite = {k: abs(v) for k, v in g.rho.items() if math.isfinite(v)}
        if finite:
            g.most = max(finite, key=finite.get)
        groups.append(g)
    return groups


def most_influential(rows, scenario: str, controller: str) -> str | None:
    for g in analyse(rows):
        if g.scenario == scenario and g.controller == controller:
            return g.most
    return None


def _plots(rows, groups, params) -> list[tuple[str, str]]:
    """One PNG per scenario: margin_pu against each parameter, a colour per controller."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.ticker import MaxNLocator

    out = []
    scenarios = sorted({g.scenario for g in groups})
    for scen in scenarios:
        if not params:
            break
        n = len(params)
        ncols = min(n, 3)
        nrows = math.ceil(n / ncols)
        fig, axes = plt.subplots(nrows, ncols, figsize=(4.2 * ncols, 3.2 * nrows), squeeze=False)
        for j, pc in enumerate(params):
            ax = axes[j // ncols][j % ncols]
            for k, g in enumerate(x for x in groups if x.scenario == scen):
                pts = [(r[pc], r["margin_pu"], r["status"]) for r in g.rows
                       if r["status"] in ("pass", "fail") and r.get("margin_pu") is not None and r.get(pc) is not None]
                if not pts:
                    continue
                xs, ms, st = zip(*pts)
                col = f"C{k % 10}"
                ok = [s == "pass" for s in st]
                # a shape per controller, hollow: builds with the same result stay visible
                ax.scatter([x for x, o in zip(xs, ok) if o], [m for m, o in zip(ms, ok) if o], s=30 - 8 * (k % 3),
                           marker="osD^v"[k % 5], facecolors="none", edgecolors=col, label=f"{g.controller} pass")
                ax.scatter([x for x, o in zip(xs, ok) if not o], [m for m, o in zip(ms, ok) if not o], s=40,
                           color=col, marker="x+1234"[k % 6], label=f"{g.controller} fail")
            ax.xaxis.set_major_locator(MaxNLocator(4))
            ax.ticklabel_format(axis="x", style="sci", scilimits=(-2, 4))
            ax.axhline(0.0, color="k", lw=0.8)
            ax.set_xlabel(pc[len("param:"):])
            ax.set_ylabel("margin (fraction of bound)")
            ax.grid(True, alpha=0.3)
            if j == 0:
                ax.legend(fontsize=7)
        for j in range(n, nrows * ncols):
            axes[j // ncols][j % ncols].axis("off")
        fig.suptitle(f"{scen}: margin against each parameter (below 0: failed)")
        fig.tight_layout()
        buf = io.BytesIO()
        fig.savefig(buf, format="png", dpi=90)
        plt.close(fig)
        out.append((scen, base64.b64encode(buf.getvalue()).decode()))
    return out


TEMPLATE = """<!doctype html>
<html><head><meta charset="utf-8"><title>dcrig campaign {{ name }}</title>
<style>
body { font-family: sans-serif; margin: 1.5em; color: #222; }
table { border-collapse: collapse; margin: 0.6em 0 1.4em; }
th, td { border: 1px solid #bbb; padding: 0.25em 0.6em; text-align: right; }
th { background: #eee; } td.l, th.l { text-align: left; }
.bad { background: #f6d0cc; } .good { background: #d6ecd2; } .most { font-weight: bold; }
.note { color: #555; font-size: 0.9em; max-width: 60em; }
</style></head><body>
<h1>Campaign {{ name }}</h1>
{% if description %}<p>{{ description }}</p>{% endif %}
<p>{{ total }} runs: {{ n_pass }} passed, {{ n_fail }} failed, {{ n_error }} errors.
Results table: <code>{{ table }}</code>. Written {{ when }}.</p>
<p class="note">This is a model: a parameter spread that passes proves the controller's logic over the
modelled plant, not the real machine, its wiring or its sensors. Energise real drives only under local
electrical codes, licensed practice and a qualified person.</p>

<h2>Pass rate per scenario and controller</h2>
<table><tr><th class="l">scenario</th><th class="l">controller</th><th>runs</th><th>pass</th><th>fail</th>
<th>error</th><th>pass rate</th><th>worst margin</th><th class="l">worst run</th><th class="l">margin depends most on</th></tr>
{% for g in groups %}
<tr class="{{ 'good' if g.n_fail + g.n_error == 0 else 'bad' }}"><td class="l">{{ g.scenario }}</td>
<td class="l">{{ g.controller }}</td><td>{{ g.n }}</td><td>{{ g.n_pass }}</td><td>{{ g.n_fail }}</td>
<td>{{ g.n_error }}</td><td>{{ pct(g.pass_rate) }}</td>
<td>{{ num(g.worst.margin_pu) if g.worst else '-' }}</td>
<td class="l">{% if g.worst %}{% if g.worst.record %}<a href="{{ g.worst.record }}/">{{ g.worst.run_id }}</a>{% else %}{{ g.worst.run_id }}{% endif %}
{{ worst_params(g) }}{% else %}-{% endif %}</td>
<td class="l">{{ g.most[6:] if g.most else '-' }}</td></tr>
{% endfor %}</table>

<h2>Sensitivity</h2>
<p class="note">rho: {{ sensitivity_name }} (+1: more of the parameter always gives more margin, -1: always
less). split: pass rate above the parameter's median minus the pass rate at or below it. The parameter with
the largest |rho| is in bold.</p>
<table><tr><th class="l">scenario</th><th class="l">controller</th>
{% for p in params %}<th>{{ p[6:] }}<br>rho</th><th>split</th>{% endfor %}</tr>
{% for g in groups %}<tr><td class="l">{{ g.scenario }}</td><td class="l">{{ g.controller }}</td>
{% for p in params %}<td class="{{ 'most' if p == g.most else '' }}">{{ num(g.rho.get(p)) }}</td>
<td>{{ pct(g.split.get(p)) }}</td>{% endfor %}</tr>{% endfor %}</table>

<h2>Margin against each parameter</h2>
{% for scen, png in plots %}<h3>{{ scen }}</h3><img alt="margin of {{ scen }}" src="data:image/png;base64,{{ png }}">
{% endfor %}

{% if errors %}<h2>Runs with errors ({{ errors|length }}{% if n_error > errors|length %} of {{ n_error }}{% endif %})</h2>
<table><tr><th class="l">run</th><th class="l">scenario</th><th class="l">controller</th><th class="l">error</th></tr>
{% for r in errors %}<tr><td class="l">{{ r.run_id }}</td><td class="l">{{ r.scenario }}</td>
<td class="l">{{ r.controller }}</td><td class="l">{{ r.error }}</td></tr>{% endfor %}</table>{% endif %}
</body></html>
"""


def _num(v) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    return f"{v:+.3f}"


def _pct(v) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    return f"{100 * v:.1f} %" if v >= 0 else f"{100 * v:+.1f} %"


def write_html(path: Path, rows, *, name: str, description: str = "", table: str = "") -> None:
    import jinja2

    groups = analyse(rows)
    params = param_columns(rows)
    env = jinja2.Environment(autoescape=True, undefined=jinja2.StrictUndefined)
    tpl = env.from_string(TEMPLATE)

    def worst_params(g):
        return "(" + ", ".join(f"{p[6:]}={g.worst[p]:.4g}" for p in params if g.worst.get(p) is not None) + ")"

    page = tpl.render(
        name=name, description=description, table=table, when=time.strftime("%Y-%m-%d %H:%M:%S UTC", time.gmtime()),
        total=len(rows), n_pass=sum(r["status"] == "pass" for r in rows),
        n_fail=sum(r["status"] == "fail" for r in rows), n_error=sum(r["status"] == "error" for r in rows),
        groups=groups, params=params, plots=_plots(rows, groups, params), sensitivity_name=SENSITIVITY_NAME,
        errors=[r for r in rows if r["status"] == "error"][:50], num=_num, pct=_pct, worst_params=worst_params)
    tmp = Path(path).with_name(Path(path).name + ".tmp")
    tmp.write_text(page, encoding="utf-8")
    tmp.replace(path)


def write_junit(path: Path, rows, *, name: str) -> None:
    """JUnit XML: a testsuite per controller, a testcase per scenario across the whole spread;
    a testcase fails when any run of it failed and errs when any run erred."""
    groups = analyse(rows)
    root = ET.Element("testsuites", name=f"dcrig campaign {name}")
    for ctrl in sorted({g.controller for g in groups}):
        gs = [g for g in groups if g.controller == ctrl]
        suite = ET.SubElement(root, "testsuite", name=f"{name}.{ctrl}", tests=str(len(gs)),
                              failures=str(sum(1 for g in gs if g.n_fail and not g.n_error)),
                              errors=str(sum(1 for g in gs if g.n_error)),
                              time=f"{sum(r.get('wall_s') or 0.0 for g in gs for r in g.rows):.3f}")
        for g in gs:
            case = ET.SubElement(suite, "testcase", classname=f"{name}.{ctrl}", name=g.scenario,
                                 time=f"{sum(r.get('wall_s') or 0.0 for r in g.rows):.3f}")
            worst = ""
            if g.worst is not None:
                worst = (f"; worst margin {g.worst['margin_pu']:+.3f} at run {g.worst['run_id']}"
                         + (f" ({g.worst['record']})" if g.worst.get("record") else ""))
            if g.n_error:
                first = next(r for r in g.rows if r["status"] == "error")
                el = ET.SubElement(case, "error", message=f"{g.n_error} of {g.n} runs erred", type="run_error")
                el.text = f"run {first['run_id']}: {first.get('error', '')}"
            elif g.n_fail:
                el = ET.SubElement(case, "failure", message=f"{g.n_fail} of {g.n} runs failed{worst}",
                                   type="verdict")
                el.text = f"pass rate {g.pass_rate:.1%}; depends most on {g.most[6:] if g.most else '-'}"
            ET.SubElement(case, "system-out").text = f"{g.n_pass} of {g.n} runs passed{worst}"
    ET.indent(root)
    tmp = Path(path).with_name(Path(path).name + ".tmp")
    ET.ElementTree(root).write(tmp, encoding="utf-8", xml_declaration=True)
    tmp.replace(path)
