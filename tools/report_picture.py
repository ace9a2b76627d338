"""A picture of a suite report for the README: the summary table as the HTML page shows it, next
to one scenario's plot. Reads a `dcrig suite` output folder (runs/*/verdict.json, junit.xml).

    python tools/report_picture.py SUITE_OUT_DIR [--scenario NAME] --out docs/img/suite_report.png
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("folder")
    ap.add_argument("--scenario", default="f3_field_rheostat")
    ap.add_argument("--out", required=True)
    args = ap.parse_args(argv)
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.image as mpimg
    import matplotlib.pyplot as plt
    from junitparser import Failure, JUnitXml

    folder = Path(args.folder)
    xml = JUnitXml.fromfile(str(folder / "junit.xml"))
    rows = []
    for case in next(iter(xml)):
        v = json.loads((folder / "runs" / case.name / "verdict.json").read_text())
        failed = any(isinstance(x, Failure) for x in case.result)
        must = "must fail" in (case.system_out or "")
        outcome = "expected fail" if must else ("FAIL" if failed else "pass")
        n_ok = sum(e["passed"] for e in v["expectations"])
        harm = ", ".join(h["check"] for h in v["harm"] if h["flagged"]) or "-"
        rows.append([case.name, outcome, f"{n_ok}/{len(v['expectations'])}", harm[:44]])
    fig = plt.figure(figsize=(15, 6.4))
    ax = fig.add_axes([0.005, 0.0, 0.49, 0.93])
    ax.axis("off")
    ax.set_title(f"dcrig suite report: {len(rows)} scenarios", fontsize=11, loc="left")
    tab = ax.table(cellText=rows, colLabels=["scenario", "outcome", "expectations", "harm flagged"],
                   loc="upper left", cellLoc="left", colWidths=[0.34, 0.15, 0.13, 0.36])
    tab.auto_set_font_size(False)
    tab.set_fontsize(7.5)
    tab.scale(1.0, 1.25)
    for (r, c), cell in tab.get_celld().items():
        if r == 0:
            cell.set_facecolor("#eeeeee")
        else:
            good = rows[r - 1][1] in ("pass", "expected fail")
            cell.set_facecolor("#dff3df" if good else "#f8d8d8")
    img = mpimg.imread(str(folder / "runs" / args.scenario / "overview.png"))
    ax2 = fig.add_axes([0.5, 0.0, 0.5, 1.0])
    ax2.imshow(img)
    ax2.axis("off")
    fig.savefig(args.out, dpi=90)
    print(args.out)
    return 0


if __name__ == "__main__":
    sys.exit(main())
