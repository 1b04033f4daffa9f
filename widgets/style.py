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
/* a plan for earlier inputs is not shown at all (faded text would be unreadable and still misleading) */
.ca-stale { display: none !important; }
.ca-stale-banner { background: #efe6f5; border-left: 4px solid #5b2a86; padding: 6px 10px; }
.ca-table { border-collapse: collapse; font-size: 88%; }
.ca-table th, .ca-table td { border: 1px solid #d8e0ea; padding: 2px 5px; vertical-align: top; text-align: left; }
.ca-note textarea { font-family: ui-monospace, monospace; font-size: 85%; }
/* headings: one h1, h2 per section, h3 per group */
.ca-app h1.ca-title { font-size: 1.35em; margin: 4px 0 2px 0; }
.ca-app h2 { font-size: 1.15em; margin: 6px 0 4px 0; }
.ca-app h3 { font-size: 1em; margin: 6px 0 4px 0; }
.ca-app .ca-group-head { font-size: 1em; }
.ca-section-head { border-bottom: 2px solid #0072B2; }
/* the page: inputs beside the plan down to 1024 px; on a phone the plan first, then the inputs */
.ca-app, .ca-app * { box-sizing: border-box; }
.ca-app { max-width: 100%; overflow: visible !important; overflow-x: clip !important; }
.ca-main { display: grid !important; grid-template-columns: minmax(280px, 370px) minmax(0, 1fr);
  grid-template-areas: "inputs summary" "inputs details"; grid-template-rows: auto 1fr;
  gap: 8px 16px; align-items: start; width: 100%; }
.ca-main > .ca-summary-box { grid-area: summary; min-width: 0; }
.ca-main > .ca-inputs { grid-area: inputs; min-width: 0; }
.ca-main > .ca-details { grid-area: details; min-width: 0; }
.ca-inputs .widget-text, .ca-inputs .widget-dropdown, .ca-inputs .widget-datepicker { max-width: 100%; }
.ca-summary-box { background: #f3f6fa; border: 2px solid #0072B2; border-radius: 6px; padding: 4px 10px 8px 10px; }
.ca-summary ul { margin: 2px 0 4px 18px; padding: 0; }
.ca-summary .ca-first { margin: 2px 0; color: #3a1f5c; }
.ca-plan-alert-stop { color: #3a1f5c; }
.ca-changes { background: #fff; border-left: 4px solid #CC79A7; padding: 2px 8px; margin: 4px 0; }
.ca-changes ul { margin: 0 0 0 18px; padding: 0; }
.ca-button { font: inherit; background: #0072B2; color: #fff; border: 0; border-radius: 4px; padding: 4px 10px;
  margin: 2px 4px 2px 0; cursor: pointer; }
.ca-button:hover { background: #005a8c; }
.ca-copied { color: #1f2d3d; font-size: 90%; }
.ca-short-note { white-space: pre-wrap; overflow-wrap: break-word; background: #fff; border: 1px solid #c6d6ea;
  padding: 6px 8px; font-size: 88%; max-width: 100%; }
.ca-full-note pre { white-space: pre-wrap; overflow-wrap: break-word; font-size: 85%; }
.ca-stale-lab { background: #efe6f5; border-left: 4px solid #5b2a86; padding: 2px 6px; margin-top: 2px; }
.ca-other > summary, .ca-card summary { cursor: pointer; }
.ca-cards .ca-card { width: auto; flex: 1 1 260px; max-width: 100%; }
.ca-reaction-row { flex-wrap: wrap !important; }
.ca-sr-label .widget-label { position: absolute !important; width: 1px !important; height: 1px !important;
  overflow: hidden !important; clip: rect(0 0 0 0); white-space: nowrap; }
/* the widgets' defaults: 28 px lines in HTML, fixed control widths, a low-contrast accordion header */
.ca-app .widget-html-content { line-height: 1.4; }
.ca-app .widget-html, .ca-app .widget-html-content { max-width: 100%; }
.ca-inputs .widget-inline-hbox, .ca-inputs .widget-select, .ca-inputs .widget-text { max-width: calc(100% - 4px); }
.ca-app .widget-checkbox { height: auto; min-height: var(--jp-widgets-inline-height); max-width: calc(100% - 4px); }
.ca-app .widget-checkbox .widget-label-basic { align-items: flex-start; }
.ca-app .widget-checkbox .widget-label-basic span { white-space: normal; line-height: 1.3; padding-top: 4px; }
.ca-inputs input, .ca-inputs select { min-width: 0; }
.ca-inputs .widget-hbox { max-width: 100%; }
.ca-app .jupyter-widget-Collapse-header { color: #1f2d3d; background: #eef2f7; }
.ca-app .jupyter-widget-Collapse-header span { color: #1f2d3d; }
/* a focus ring of at least 3:1 against white and the light panels (#0072B2 on #fff is about 5:1) */
.ca-app :focus-visible, .ca-app input:focus, .ca-app select:focus, .ca-app textarea:focus, .ca-app button:focus {
  outline: 3px solid #0072B2 !important; outline-offset: 1px; }
@media (max-width: 1000px) {
  .ca-main { grid-template-columns: minmax(250px, 330px) minmax(0, 1fr); gap: 8px 10px; }
}
@media (max-width: 760px) {
  /* one column, the plan first; a flex column (not a grid) so the sticky plan can follow the whole page */
  .ca-main { display: flex !important; flex-direction: column; align-items: stretch; }
  .ca-summary-box { position: sticky; top: 0; z-index: 10; max-height: 40vh; overflow-y: auto;
    box-shadow: 0 2px 6px rgba(31, 45, 61, 0.25); }
  /* sticky needs every box between the plan and the page's scroller to leave overflow visible */
  .ca-main, .jp-OutputArea, .jp-OutputArea-child, .jp-OutputArea-output { overflow: visible !important; }
  .ca-ruled-list { grid-template-columns: minmax(0, 1fr); }
  .ca-caution { font-size: 88%; }
}
@media print {
  @page { size: A4; margin: 14mm; }
  .ca-inputs, .ca-copy, .ca-button, .ca-plots, .ca-browser-box, .ca-worklist-box, .ca-downloads, .ca-copied {
    display: none !important; }
  .ca-main { display: block !important; }
  /* Voila's shell is a fixed-height panel that scrolls inside: let the page flow onto more sheets */
  html, body, .jp-LabShell, .lm-BoxPanel, .lm-BoxPanel-child, .jp-OutputArea, .jp-OutputArea-child,
  .jp-OutputArea-output, .ca-app, .ca-details { position: static !important; overflow: visible !important;
    contain: none !important;
    height: auto !important; max-height: none !important; }
  .ca-app .widget-box { overflow: visible !important; }
  .ca-summary-box { position: static; max-height: none; overflow: visible; border-width: 1px; }
  .ca-app details > *:not(summary) { display: block; }
  .ca-card { break-inside: avoid; }
}
</style>
"""
