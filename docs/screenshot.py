"""Make docs/dashboard.png: the served dashboard for an invented patient (Riverside Imaging demo case).

    python docs/screenshot.py
"""

from __future__ import annotations

import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from benchmarks.bench_tti import dashboard_page  # noqa: E402

# Invented patient: 71-year-old woman, creatinine 1.9 mg/dL, takes metformin, earlier moderate allergic-like
# reaction to iohexol; CT abdomen and pelvis tomorrow 09:00. The shot is the top of the page at 1400 x 1000
# (the plan summary beside the case form) after ticking heart failure, so the "what changed" marker shows.
QUERY = ("exam=ct-abdomen-pelvis&at=2026-12-02T09:00&asof=2026-12-01T15:00&creatinine=1.9&unit=mg/dL&measured=2026-11-28&age=71"
         "&sex=female&weight=68&height=162&metformin=1&iv_gauge=20&iv_site=antecubital"
         "&reaction=iodinated:allergic_like:moderate:iohexol")


def main() -> int:
    with dashboard_page(QUERY, {"width": 1400, "height": 1000}) as page:
        page.wait_for_function("() => document.querySelectorAll('.js-plotly-plot .main-svg').length >= 2",
                               timeout=120_000)
        page.get_by_label("Heart failure that limits IV fluids").check()
        page.wait_for_selector(".ca-changes", timeout=60_000)
        page.evaluate("() => { document.activeElement && document.activeElement.blur();"
                      " document.querySelectorAll('.lm-BoxPanel-child').forEach(e => { e.scrollTop = 0; }); }")
        page.wait_for_timeout(800)
        out = ROOT / "docs" / "dashboard.png"
        page.screenshot(path=str(out))
        print(out)
    return 0


if __name__ == "__main__":
    sys.exit(main())
