"""Make docs/dashboard.png: the served dashboard for an invented patient (Riverside Imaging demo case).

    python docs/screenshot.py
"""

from __future__ import annotations

import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from benchmarks.bench_tti import dashboard_page  # noqa: E402

# Invented patient: 71-year-old woman, creatinine 1.9 mg/dL, takes metformin, earlier mild allergic-like
# reaction to iohexol; CT abdomen and pelvis tomorrow 09:00.
QUERY = ("exam=ct-abdomen-pelvis&at=2026-12-02T09:00&asof=2026-12-01T15:00&creatinine=1.9&unit=mg/dL&measured=2026-11-28&age=71"
         "&sex=female&weight=68&height=162&metformin=1&iv_gauge=20&iv_site=antecubital"
         "&reaction=iodinated:allergic_like:mild:iohexol")


def main() -> int:
    with dashboard_page(QUERY, {"width": 1400, "height": 2300}) as page:
        page.wait_for_function("() => document.querySelectorAll('.js-plotly-plot .main-svg').length >= 3",
                               timeout=120_000)
        height = page.evaluate("() => Math.max(...Array.from(document.querySelectorAll("
                               "'#rendered_cells, .ca-app')).map(e => e.scrollHeight))")
        page.set_viewport_size({"width": 1400, "height": min(int(height) + 40, 8000)})
        page.wait_for_timeout(600)
        out = ROOT / "docs" / "dashboard.png"
        page.screenshot(path=str(out), full_page=True)
        print(out)
    return 0


if __name__ == "__main__":
    sys.exit(main())
