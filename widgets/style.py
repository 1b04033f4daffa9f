"""Look of the dashboard: verdict marks (text + glyph + colour), the KDIGO band colours and the CSS.

Colours are from the Okabe–Ito colour-blind-safe set, used as a blue → sky → purple → near-black ramp
(never red/amber/green), and every verdict always carries its words and its own glyph, so colour is
never the only cue.
"""

from __future__ import annotations

from knowledge.tables import models as m

#: verdict -> (glyph, colour, words)
VERDICT_MARK: dict[m.Verdict, tuple[str, str, str]] = {
    m.Verdict.suitable: ("●", "#0072B2", "suitable"),
    m.Verdict.suitable_with_precautions: ("◐", "#56B4E9", "suitable with precautions"),
    m.Verdict.not_advised: ("○", "#CC79A7", "not advised"),
    m.Verdict.contraindicated: ("⊘", "#3a3a3a", "contraindicated"),
}

#: KDIGO G categories, light (G1) to dark (G5): a single-hue ramp readable without colour vision
BAND_COLOUR = {"G1": "#e8eef6", "G2": "#c6d6ea", "G3a": "#98b6d8", "G3b": "#6a92c2", "G4": "#3f6ca6", "G5": "#1f4480"}
BAND_TEXT = {"G1": "#1f2d3d", "G2": "#1f2d3d", "G3a": "#1f2d3d", "G3b": "#ffffff", "G4": "#ffffff", "G5": "#ffffff"}

TIMELINE_COLOUR = {"premedication": "#0072B2", "contrast": "#000000", "hydration": "#56B4E9", "metformin": "#CC79A7"}


def verdict_badge(verdict: m.Verdict) -> str:
    glyph, colour, words = VERDICT_MARK[verdict]
    return (f'<span class="ca-verdict ca-v-{verdict.value}" style="border-color:{colour}">'
            f'<span class="ca-glyph" style="color:{colour}" aria-hidden="true">{glyph}</span> {words}</span>')


CSS = """
<style>
.ca-app { font-family: system-ui, -apple-system, "Segoe UI", sans-serif; color: #1f2d3d; }
.ca-app h3, .ca-app h4 { margin: 6px 0 4px 0; }
.ca-caution { background: #f3f6fa; border-left: 4px solid #0072B2; padding: 6px 10px; margin: 4px 0 8px 0; }
.ca-group-head { font-weight: 600; margin-top: 8px; border-bottom: 1px solid #c6d6ea; }
.ca-hint { color: #4a5a6a; font-size: 90%; }
.ca-error { color: #5b2a86; font-weight: 600; }
.ca-error::before { content: "✎ "; }
.ca-egfr { background: #f3f6fa; padding: 2px 8px; }
.ca-card { border: 1px solid #c6d6ea; border-radius: 6px; padding: 6px 8px; background: #fff; }
.ca-card.ca-chosen { border: 2px solid #0072B2; }
.ca-card ul { margin: 2px 0 2px 18px; padding: 0; }
.ca-card .ca-meta, .ca-source { color: #4a5a6a; font-size: 88%; }
.ca-verdict { border: 1px solid; border-radius: 10px; padding: 0 6px; white-space: nowrap; }
.ca-glyph { font-size: 115%; }
.ca-cards { display: flex; flex-flow: row wrap; gap: 6px; align-items: flex-start; }
.ca-cards .ca-card { width: 310px; box-sizing: border-box; }
.ca-ruled-list { display: grid; grid-template-columns: repeat(2, minmax(0, 1fr)); gap: 2px 6px; }
.ca-card.ca-compact { background: #f7f7f7; padding: 2px 8px; }
.ca-card.ca-compact summary { cursor: pointer; }
.ca-stale { opacity: 0.4; filter: grayscale(100%); }
.ca-stale-banner { background: #efe6f5; border-left: 4px solid #5b2a86; padding: 6px 10px; }
.ca-table { border-collapse: collapse; font-size: 88%; }
.ca-table th, .ca-table td { border: 1px solid #d8e0ea; padding: 2px 5px; vertical-align: top; text-align: left; }
.ca-note textarea { font-family: ui-monospace, monospace; font-size: 85%; }
</style>
"""
