"""Views of a suite's rows: JUnit XML for CI systems, one self-contained HTML page for people.

JUnit XML is written by the junit-xml package (one <testsuite> per suite, one <testcase> per
scenario, a <failure> with the verdict's problems for a failed one, <error> for a run that
could not be made); its element names are the schema CI servers read. A must-fail scenario that
failed is a passing test case whose output says so. The HTML page is a jinja2 template with the
PNG plots embedded as data URIs, so the page is one file that can be mailed or archived.
"""

from __future__ import annotations

import base64
import html
from pathlib import Path

GOOD = ("pass", "expected_fail")


def write_junit(rows: list[dict], suite_name: str, path: Path) -> Path:
    from junit_xml import TestCase, TestSuite, to_xml_report_string

    cases = []
    for r in rows:
        lines = []
        v = r.get("verdict")
        if v:
            for e in v["expectations"]:
                lines.append(f"{'PASS' if e['passed'] else 'FAIL'} {e['name']}: {e['text']}")
            for h in v["harm"]:
                if h["flagged"]:
                    lines.append(f"HARM {h['check']}{' (accepted)' if h['accepted'] else ''}: {h['text']}")
        if r["outcome"] == "expected_fail":
            lines.insert(0, "must fail: the verdict failed, as it must for this deliberately wrong controller")
        tc = TestCase(r["name"], classname=f"{suite_name}.{r.get('controller', 'scenario')}",
                      elapsed_sec=r.get("wall_s", r.get("total_s", 0.0)), stdout="\n".join(lines),
                      file=r.get("scenario_file"))
        if r["outcome"] == "fail":
            tc.add_failure_info(message="; ".join(v["problems"])[:500], output="\n".join(v["problems"]))
        elif r["outcome"] == "unexpected_pass":
            tc.add_failure_info(message="must fail, but the verdict passed: the check does not catch the mistake")
        elif r["outcome"] == "error":
            tc.add_error_info(message=r.get("error", "error"), output=r.get("detail", ""))
        cases.append(tc)
    text = to_xml_report_string([TestSuite(suite_name, cases)], prettyprint=True, encoding="utf-8")
    path = Path(path)
    path.write_text(text, encoding="utf-8")
    return path


_TEMPLATE = """<!doctype html>
<html lang="en"><head><meta charset="utf-8"><title>{{ suite }}: {{ good }}/{{ rows|length }} as expected</title>
<style>
body { font-family: sans-serif; margin: 1.5em; max-width: 1100px; color: #222; }
table { border-collapse: collapse; margin: 0.5em 0 1em 0; font-size: 13px; }
td, th { border: 1px solid #ccc; padding: 3px 7px; text-align: left; vertical-align: top; }
th { background: #eee; }
.pass { background: #dff3df; } .fail { background: #f8d8d8; } .warn { background: #fff0c8; }
.caution { border: 2px solid #b00; padding: 0.6em; background: #fff5f5; }
img { max-width: 100%; border: 1px solid #ddd; margin: 4px 0; }
h2 { border-top: 2px solid #888; padding-top: 0.5em; }
</style></head><body>
<h1>Suite {{ suite }}</h1>
<p>{{ description }}</p>
<p class="caution">{{ caution }}</p>
<p>{{ good }} of {{ rows|length }} scenarios as expected{% if regressions %}; <b>{{ regressions|length }} regression(s) against the baseline</b>{% endif %}.
Wall time {{ "%.1f"|format(wall) }} s, {{ jobs }} worker process(es).</p>
<table><tr><th>scenario</th><th>controller</th><th>outcome</th><th>expectations</th><th>harm flagged</th><th>model s</th><th>wall s</th></tr>
{% for r in rows %}<tr class="{{ 'pass' if r.outcome in good_set else 'fail' }}">
<td><a href="#{{ r.name }}">{{ r.name }}</a></td><td>{{ r.controller }}</td><td>{{ r.outcome|replace('_', ' ') }}</td>
<td>{% if r.verdict %}{{ r.verdict.expectations|selectattr('passed')|list|length }}/{{ r.verdict.expectations|length }}{% endif %}</td>
<td>{% if r.verdict %}{{ r.verdict.harm|selectattr('flagged')|map(attribute='check')|join(', ') }}{% endif %}</td>
<td>{{ "%.2f"|format(r.model_s or 0) }}</td><td>{{ "%.2f"|format(r.wall_s or 0) }}</td></tr>
{% endfor %}</table>
{% if regressions %}<h2>Regressions against the baseline</h2><table><tr><th>scenario</th><th>figure</th><th>baseline</th><th>now</th><th>change</th><th>tolerance</th></tr>
{% for g in regressions %}<tr class="fail"><td>{{ g.scenario }}</td><td>{{ g.figure }}</td><td>{{ "%.4g"|format(g.old) }}</td><td>{{ "%.4g"|format(g.new) }}</td><td>{{ "%+.4g"|format(g.new - g.old) }}</td><td>{{ "%.4g"|format(g.tolerance) }}</td></tr>{% endfor %}</table>{% endif %}
{% for r in rows %}
<h2 id="{{ r.name }}">{{ r.name }}: {{ r.outcome|replace('_', ' ') }}</h2>
<p>{{ r.description }}</p>
{% if r.error %}<pre class="fail">{{ r.error }}</pre>{% endif %}
{% if r.verdict %}
<table><tr><th>expectation</th><th>verdict</th><th>measured</th><th>limit</th><th>margin</th><th>detail</th></tr>
{% for e in r.verdict.expectations %}<tr class="{{ 'pass' if e.passed else 'fail' }}"><td>{{ e.name }}</td><td>{{ 'PASS' if e.passed else 'FAIL' }}</td>
<td>{{ fmt(e.measured) }} {{ e.unit }}</td><td>{{ fmt(e.limit) }} {{ e.unit }}</td><td>{{ fmt(e.margin) }} {{ e.unit }}</td><td>{{ e.text }}</td></tr>{% endfor %}
</table>
<table><tr><th>machine-harm check</th><th>flagged</th><th>first at</th><th>worst</th><th>limit</th><th>detail</th></tr>
{% for h in r.verdict.harm %}<tr class="{{ ('warn' if h.accepted else 'fail') if h.flagged else 'pass' }}"><td>{{ h.check }}</td>
<td>{{ ('yes (accepted: inherent in the fault)' if h.accepted else 'YES') if h.flagged else 'no' }}</td><td>{{ fmt(h.t_s) }} s</td>
<td>{{ fmt(h.value) }} {{ h.unit }}</td><td>{{ fmt(h.limit) }} {{ h.unit }}</td><td>{{ h.text }}</td></tr>{% endfor %}
</table>{% endif %}
{% for img in r.images %}<img alt="plot of {{ r.name }}" src="data:image/png;base64,{{ img }}">{% endfor %}
{% endfor %}
</body></html>
"""


def _fmt(v) -> str:
    try:
        v = float(v)
    except (TypeError, ValueError):
        return ""
    if v != v:  # NaN: no figure
        return ""
    return f"{v:.4g}"


def write_html(rows: list[dict], suite, path: Path, *, wall_s: float, jobs: int, regressions=(),
               caution: str = "") -> Path:
    import jinja2

    env = jinja2.Environment(autoescape=True, undefined=jinja2.ChainableUndefined)
    tpl = env.from_string(_TEMPLATE)
    view = []
    for r in rows:
        r2 = dict(r)
        r2["images"] = [base64.b64encode(Path(p).read_bytes()).decode("ascii") for p in r.get("plots", [])
                        if Path(p).is_file()]
        view.append(r2)
    text = tpl.render(suite=suite.name, description=suite.description, rows=view, good_set=GOOD,
                      good=sum(1 for r in rows if r["outcome"] in GOOD), wall=wall_s, jobs=jobs,
                      regressions=list(regressions), fmt=_fmt, caution=html.unescape(caution))
    path = Path(path)
    path.write_text(text, encoding="utf-8")
    return path
