"""No answer depends on the date the tests run: "now" is always an explicit as-of time.

1. Time translation: every time-dependent case (the scenario bank with an exam time and a creatinine
   date added, and the premedication, metformin, hydration and creatinine-age cases below) is decided at
   two fixed "now"s 1,000 days apart (the exam time and sample date move with it). The two decisions must
   be the same once their clock times are moved back, and some of them must carry clock times at all —
   so the test fails if anything in the core reads today's date.
2. The core never reads a clock: with no as_of the time left is not checked, and says so.
3. The command line and the dashboard take their "now" from an injected clock, and say which they used.
"""

from __future__ import annotations

import copy
import datetime as dt
import json

import pytest

from knowledge.cli import main
from knowledge.decision.engine import decide
from knowledge.present.links import case_from_query, query_from_case
from knowledge.tables.loader import load_knowledge
from tests.scenarios import load_vectors

SHIFT = dt.timedelta(days=1000)
NOWS = [dt.datetime(2025, 3, 10, 14, 0), dt.datetime(2025, 3, 10, 14, 0) + SHIFT]
MODERATE = [{"agent_family": "iodinated", "kind": "allergic_like", "severity": "moderate"}]
ADULT = {"age_years": 64, "sex": "male", "weight_kg": 82, "height_cm": 178, "takes_metformin": True,
         "creatinine": {"value": 2.6, "unit": "mg/dL", "measured_on": "2025-03-01"}}


@pytest.fixture(scope="module")
def k():
    return load_knowledge()


def _timed_cases() -> list[dict]:
    """(as_of, scheduled_at, measured_on) relative to NOWS[0]: evening before, same day, 3 h, 12 h 45 min."""
    cases = []
    for hours in (19, 12.75, 3, 0.5):
        for exam in ("ct-angiography-aorta", "ct-abdomen-pelvis", "angio-coronary"):
            cases.append({"exam": exam, "as_of": NOWS[0].isoformat(),
                          "scheduled_at": (NOWS[0] + dt.timedelta(hours=hours)).isoformat(),
                          "patient": {**ADULT, "prior_reactions": MODERATE}})
    for v in load_vectors():
        case = copy.deepcopy(v["case"])
        case["as_of"] = NOWS[0].isoformat()
        case["scheduled_at"] = (NOWS[0] + dt.timedelta(hours=19)).isoformat()
        cr = case.get("patient", {}).get("creatinine")
        if cr is not None:
            cr["measured_on"] = "2025-03-01"
        cases.append(case)
    return cases


def _shift_case(case: dict, delta: dt.timedelta) -> dict:
    case = copy.deepcopy(case)
    for key in ("as_of", "scheduled_at"):
        case[key] = (dt.datetime.fromisoformat(case[key]) + delta).isoformat()
    cr = case.get("patient", {}).get("creatinine")
    if cr is not None and cr.get("measured_on"):
        cr["measured_on"] = (dt.date.fromisoformat(cr["measured_on"]) + delta).isoformat()
    return case


def _texts_unshift(text: str, delta: dt.timedelta) -> str:
    # warnings may quote a date-time or a date (YYYY-MM-DD HH:MM, YYYY-MM-DDTHH:MM:SS)
    import re

    def back(mt):
        raw = mt.group(0)
        when = dt.datetime.fromisoformat(raw.replace(" ", "T"))
        out = when - delta
        return out.strftime("%Y-%m-%d %H:%M") if " " in raw else out.isoformat()

    return re.sub(r"\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}(:\d{2})?", back, text)


def test_every_timed_case_gives_the_same_answer_at_two_fixed_nows(k):
    cases = _timed_cases()
    with_clock_times = 0
    for case in cases:
        first = decide(case, k).model_dump(mode="json")
        second = decide(_shift_case(case, SHIFT), k).model_dump(mode="json")
        back = json.loads(_texts_unshift(json.dumps(second), SHIFT))
        assert back == first, case["exam"]
        with_clock_times += bool(first["premedication"]["schedule"] or first["metformin"]["hold_from"])
    print(f"{len(cases)} time-dependent cases decided at {NOWS[0]:%Y-%m-%d %H:%M} and {NOWS[1]:%Y-%m-%d %H:%M}; "
          f"{with_clock_times} carry clock times")
    assert len(cases) > 60 and with_clock_times >= 12


def test_the_regimen_follows_the_given_now_not_the_wall_clock(k):
    # ACR Manual: 13 h oral prednisone regimen when the time allows, else the accelerated IV regimen.
    # Exam 09:00; decided at 15:00 the day before (18 h left) and at 20:30 (12.5 h left).
    exam = {"exam": "ct-angiography-aorta", "scheduled_at": "2026-12-02T09:00",
            "patient": {**ADULT, "prior_reactions": MODERATE}}
    early = decide({**exam, "as_of": "2026-12-01T15:00"}, k).premedication
    late = decide({**exam, "as_of": "2026-12-01T20:30"}, k).premedication
    assert early.regimen == "prednisone-13h" and early.lead_hours == 18.0
    assert late.regimen != "prednisone-13h" and late.lead_hours == 12.5


def test_the_core_reads_no_clock(k):
    d = decide({"exam": "ct-angiography-aorta", "scheduled_at": "2026-12-02T09:00",
                "patient": {**ADULT, "prior_reactions": MODERATE}}, k)
    assert d.as_of is None and d.premedication.lead_hours is None
    assert d.premedication.regimen == "prednisone-13h"
    assert any("No as-of time given" in w for w in d.premedication.warnings)


def test_the_command_line_says_which_now_it_used(tmp_path, capsys):
    case = tmp_path / "case.json"
    case.write_text(json.dumps({"exam": "ct-abdomen-pelvis"}), encoding="utf-8")
    assert main(["decide", str(case)], clock=lambda: dt.datetime(2031, 7, 4, 8, 15)) == 0
    assert json.loads(capsys.readouterr().out)["as_of"] == "2031-07-04T08:15:00"
    assert main(["decide", str(case), "--as-of", "2030-01-02T03:04"], clock=lambda: NOWS[0]) == 0
    assert json.loads(capsys.readouterr().out)["as_of"] == "2030-01-02T03:04:00"
    case.write_text(json.dumps({"exam": "ct-abdomen-pelvis", "as_of": "2029-05-05T05:05"}), encoding="utf-8")
    assert main(["decide", str(case), "--as-of", "2030-01-02T03:04"], clock=lambda: NOWS[0]) == 0
    assert json.loads(capsys.readouterr().out)["as_of"] == "2029-05-05T05:05:00"  # the case's own wins
    assert main(["decide", str(case), "--as-of", "soon"], clock=lambda: NOWS[0]) == 2
    assert "--as-of: 'soon' is not a date-time" in capsys.readouterr().err


def test_a_link_carries_the_now_it_was_made_for():
    case = {"exam": "ct-abdomen-pelvis", "scheduled_at": "2026-12-02T09:00", "as_of": "2026-12-01T15:00"}
    query = query_from_case(case)
    assert "asof=2026-12-01T15:00" in query
    assert case_from_query(query)["as_of"] == "2026-12-01T15:00"


def test_the_dashboard_uses_its_clock_or_the_links_now_and_says_which():
    from widgets.app import ContrastAidApp

    app = ContrastAidApp(clock=lambda: dt.datetime(2031, 7, 4, 8, 15))
    assert app.case.as_of == dt.datetime(2031, 7, 4, 8, 15)
    assert "this page's clock" in app.exam.as_of_source.value
    app = ContrastAidApp(query="exam=ct-abdomen-pelvis&asof=2026-12-01T15:00",
                         clock=lambda: dt.datetime(2031, 7, 4, 8, 15))
    assert app.case.as_of == dt.datetime(2026, 12, 1, 15, 0)
    assert "the time in the link" in app.exam.as_of_source.value
    assert "asof=2026-12-01T15:00" in app.query
