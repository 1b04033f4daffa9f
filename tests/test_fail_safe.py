"""Fail safe on every input (issue 9): no stale plan shown as current, no silent coercion, bounded errors.

Each test here failed on main before the fix it guards (see the issue's sections 1 and 2). The checks are
invariants of the program's contract (DEVELOPERS.md: "Bad input never yields a traceback ... one clear
message"), not clinical values.
"""

from __future__ import annotations

import datetime as dt
import json
import logging
import os
import subprocess
import sys
from pathlib import Path

import pytest

from knowledge import CaseError, ContrastAidError, decide, load_knowledge, parse_case
from knowledge.cli import main
from knowledge.decision.engine import parse_form_case
from knowledge.errors import MAX_LINE
from knowledge.tables import models as m

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE = ROOT / "examples" / "case-ct-low-egfr.json"
NOW = dt.datetime(2026, 3, 10, 14, 0)
AS_OF = "2026-03-10T14:00"


@pytest.fixture(scope="module")
def k():
    return load_knowledge()


def run(capsys, *argv):
    code = main(list(argv), clock=lambda: NOW)
    out, err = capsys.readouterr()
    return code, out, err


def one_line_exit_2(code, out, err):
    assert code == 2, err
    assert out == "" and err.count("\n") == 1 and "Traceback" not in err
    assert len(err) <= MAX_LINE + len("contrast-aid: \n")


# ---------------------------------------------------------------------------------------------- 1
def test_extreme_exam_times_are_refused_with_a_clear_error(k):
    # main: 9999-12-31 20:00 raised OverflowError inside the plans (not a ContrastAidError)
    for when in ("9999-12-31T20:00", "0001-01-01T00:30"):
        with pytest.raises(CaseError) as e:
            decide({"exam": "ct-angiography-aorta", "scheduled_at": when, "as_of": AS_OF,
                    "patient": {"prior_reactions": [{"agent_family": "iodinated", "kind": "allergic_like",
                                                     "severity": "moderate"}]}}, k)
        assert e.value.field == "scheduled_at" and "year" in e.value.message


def test_dashboard_greys_out_the_plan_on_any_unexpected_error(monkeypatch, caplog):
    import widgets.app as app_module

    app = app_module.ContrastAidApp(clock=lambda: NOW)
    assert app.decision is not None and not app.stale

    def broken(case, knowledge):
        raise OverflowError(f"date value out of range for {case.exam}")

    monkeypatch.setattr(app_module, "decide", broken)
    with caplog.at_level(logging.ERROR, logger="widgets.app"):
        app.recompute()  # what every input change runs
    assert app.decision is None and app.stale
    assert app.panel.stale and "Not updated" in app.panel.banner.value
    assert "ca-stale" in app.panel.body._dom_classes and "ca-stale" in app.plots_box._dom_classes
    assert any("OverflowError" in e for e in app.errors)
    logged = " ".join(r.getMessage() for r in caplog.records)
    assert "OverflowError" in logged and app.knowledge.exams[app.exam.select.value].id not in logged  # no values


def test_dashboard_shows_the_year_bound_next_to_the_exam_time():
    from widgets.app import ContrastAidApp

    app = ContrastAidApp(clock=lambda: NOW)
    app.exam.select.value = "ct-angiography-aorta"
    app.exam.scheduled.value = "9999-12-31 20:00"
    assert app.decision is None and app.stale
    # the message names the field by its form label (issue 10: the user's words, not code paths)
    assert any("Exam time" in e and "year 9999" in e for e in app.errors)


# ---------------------------------------------------------------------------------------------- 2
@pytest.mark.parametrize("patient, field", [
    ({"age_years": True}, "patient.age_years"),            # main: an adult read as a 1-year-old
    ({"age_years": "71"}, "patient.age_years"),
    ({"takes_metformin": "yes"}, "patient.takes_metformin"),
    ({"takes_metformin": 1}, "patient.takes_metformin"),
    ({"creatinine": {"value": 1.2, "unit": "mg/dL", "measured_on": 1764547200}}, "patient.creatinine.measured_on"),
    ({"iv_access": {"gauge": 20.0, "site": "antecubital"}}, "patient.iv_access.gauge"),
])
def test_json_types_are_strict_in_the_api(k, patient, field):
    with pytest.raises(CaseError) as e:
        parse_case({"exam": "ct-abdomen-pelvis", "patient": patient})
    assert e.value.field == field


def test_epoch_integer_for_a_date_time_is_refused():
    with pytest.raises(CaseError) as e:
        parse_case({"exam": "ct-abdomen-pelvis", "scheduled_at": 1764662400})
    assert e.value.field == "scheduled_at"


def test_the_form_path_still_parses_typed_strings():
    case = parse_form_case({"exam": "ct-abdomen-pelvis", "scheduled_at": "2026-12-02 09:00",
                            "patient": {"age_years": "71", "creatinine": {"value": "1.9", "unit": "mg/dL"}}})
    assert case.patient.age_years == 71 and case.scheduled_at == dt.datetime(2026, 12, 2, 9, 0)


def test_strict_cli_refuses_true_as_an_age(tmp_path, capsys):
    case = tmp_path / "case.json"
    case.write_text('{"exam": "ct-abdomen-pelvis", "patient": {"age_years": true}}')
    code, out, err = run(capsys, "decide", str(case))
    one_line_exit_2(code, out, err)
    assert err.startswith("contrast-aid: patient.age_years: True is not a number")


def test_duplicate_json_keys_are_refused(tmp_path, capsys):
    # main: the second value won and dropped the metformin hold silently
    case = tmp_path / "case.json"
    case.write_text('{"exam": "ct-abdomen-pelvis", "patient": {"takes_metformin": true, "takes_metformin": false}}')
    code, out, err = run(capsys, "decide", str(case))
    one_line_exit_2(code, out, err)
    assert "takes_metformin: appears twice" in err


def test_exam_in_the_past_and_creatinine_after_now_are_refused(k):
    with pytest.raises(CaseError) as e:
        decide({"exam": "ct-abdomen-pelvis", "as_of": AS_OF, "scheduled_at": "2026-03-09T09:00"}, k)
    assert e.value.field == "scheduled_at" and "already past" in e.value.message
    with pytest.raises(CaseError) as e:
        decide({"exam": "ct-abdomen-pelvis", "as_of": AS_OF, "scheduled_at": "2026-03-11T09:00",
                "patient": {"creatinine": {"value": 1.0, "unit": "mg/dL", "measured_on": "2026-03-11"}}}, k)
    assert e.value.field == "patient.creatinine.measured_on" and "after as_of" in e.value.message
    with pytest.raises(CaseError):  # more than MAX_YEARS_AHEAD ahead
        decide({"exam": "ct-abdomen-pelvis", "as_of": AS_OF, "scheduled_at": "2040-03-11T09:00"}, k)


def test_a_utc_offset_is_refused_not_mixed_with_local_times(k):
    with pytest.raises(CaseError) as e:
        decide({"exam": "ct-abdomen-pelvis", "as_of": AS_OF, "scheduled_at": "2026-03-11T09:00+01:00"}, k)
    assert e.value.field == "scheduled_at" and "offset" in e.value.message


def test_error_lines_are_bounded(tmp_path, capsys):
    case = tmp_path / "case.json"
    case.write_text(json.dumps({"exam": "x" * 1_000_000}))
    code, out, err = run(capsys, "decide", str(case))
    one_line_exit_2(code, out, err)
    assert len(err) < 400


def test_errors_carry_field_value_allowed_and_a_suggestion(k):
    with pytest.raises(CaseError) as e:
        decide({"exam": "ct-abdomen-pelvi"}, k)
    assert (e.value.field, e.value.value, e.value.suggestion) == ("exam", "ct-abdomen-pelvi", "ct-abdomen-pelvis")
    assert e.value.allowed == "the ids of `contrast-aid exams`"
    with pytest.raises(CaseError) as e:
        decide({"exam": "ct-abdomen-pelvis", "patient": {"age_years": 140}}, k)
    assert (e.value.field, e.value.value, e.value.allowed) == ("patient.age_years", 140, "at most 120")
    with pytest.raises(CaseError) as e:
        decide({"exam": "ct-abdomen-pelvis", "patient": {"prior_reactions": [
            {"agent_family": "iodinated", "kind": "allergic_like", "severity": "mild", "agent": "iohexal"}]}}, k)
    assert e.value.field == "patient.prior_reactions[0].agent" and e.value.suggestion == "iohexol"


def test_egfr_flags_come_from_the_field_not_the_message(capsys):
    code, out, err = run(capsys, "egfr", "--creatinine", "1.4", "--unit", "mg/dL", "--age", "60", "--sex",
                         "male", "--cystatin-c", "99")
    one_line_exit_2(code, out, err)
    assert err.startswith("contrast-aid: --cystatin-c: 99 is out of range")


@pytest.mark.parametrize("make", ["dev_zero", "fifo", "huge", "folder"])
def test_only_regular_files_under_the_limit_are_read(tmp_path, capsys, make):
    if make == "dev_zero":
        path = "/dev/zero"
    elif make == "fifo":
        path = str(tmp_path / "pipe")
        os.mkfifo(path)  # main: opening it blocked for ever
    elif make == "huge":
        path = str(tmp_path / "big.json")
        Path(path).write_text('{"exam": "ct-chest", "x": "' + "a" * 1_100_000 + '"}')
    else:
        path = str(tmp_path)
    code, out, err = run(capsys, "decide", path)
    one_line_exit_2(code, out, err)


@pytest.mark.parametrize("payload", [
    '{"exam": "ct-chest", "patient": {"age_years": ' + "9" * 5000 + "}}",
    '{"exam": "ct-chest", "patient": {"age_years": 1' + "0" * 5000 + ".5}}",
    "[" * 100_000 + "]" * 100_000,
    '{"exam": "ct-chest", "patient": {"egfr": NaN}}',
    '{"exam": "ct-chest", "patient": {"weight_kg": 1e400}}',
])
def test_hostile_json_gives_one_line_and_exit_2(tmp_path, capsys, payload):
    case = tmp_path / "case.json"
    case.write_text(payload)
    code, out, err = run(capsys, "decide", str(case))
    one_line_exit_2(code, out, err)


def test_full_output_disk_is_one_line_and_exit_2():
    if not os.path.exists("/dev/full"):
        pytest.skip("no /dev/full on this system")
    with open("/dev/full", "w") as full:
        proc = subprocess.run([sys.executable, "-m", "knowledge", "decide", str(EXAMPLE)], stdout=full,
                              stderr=subprocess.PIPE, text=True, timeout=60, cwd=ROOT)
    assert proc.returncode == 2, proc.stderr
    assert proc.stderr.count("\n") == 1 and "Traceback" not in proc.stderr
    assert "output: cannot be written (No space left on device)" in proc.stderr


# ---- the published schema agrees with what the tool accepts and emits
def _validator(schema):
    jsonschema = pytest.importorskip("jsonschema")
    cls = jsonschema.Draft202012Validator
    return cls(schema, format_checker=cls.FORMAT_CHECKER)


def _schema(capsys, part):
    code, out, _ = run(capsys, "knowledge", "schema")
    assert code == 0
    return json.loads(out)[part]


def test_readme_example_case_validates_against_the_published_schema(capsys):
    # main: its naive date-times failed the schema's "date-time" format (which needs an offset)
    v = _validator(_schema(capsys, "case"))
    case = json.loads(EXAMPLE.read_text())
    assert list(v.iter_errors(case)) == []
    readme = (ROOT / "README.md").read_text()
    block = readme.split("### The case", 1)[1].split("```json", 1)[1].split("```", 1)[0]
    assert list(v.iter_errors(json.loads(block))) == []


def test_schema_refuses_what_the_tool_refuses(capsys, k):
    v = _validator(_schema(capsys, "case"))
    for when in ("2026-12-02T09:00+01:00", "2026-12-02T09:00Z", "tomorrow"):
        assert list(v.iter_errors({"exam": "ct-chest", "scheduled_at": when}))
        with pytest.raises(ContrastAidError):
            parse_case({"exam": "ct-chest", "scheduled_at": when})
    for when in ("2026-12-02T09:00", "2026-12-02 09:00", "2026-12-02T09:00:30"):
        assert not list(v.iter_errors({"exam": "ct-chest", "scheduled_at": when}))
        assert parse_case({"exam": "ct-chest", "scheduled_at": when}).scheduled_at.hour == 9


def test_decision_output_validates_against_the_published_schema(capsys):
    v = _validator(_schema(capsys, "decision"))
    code, out, _ = run(capsys, "decide", str(EXAMPLE))
    assert code == 0
    decision = json.loads(out)
    assert decision["premedication"]["schedule"] or decision["metformin"]["hold_from"]  # date-times present
    assert list(v.iter_errors(decision)) == []


def test_time_zone_rule_is_documented():
    text = (ROOT / "README.md").read_text() + (ROOT / "DEVELOPERS.md").read_text()
    assert "without a UTC offset" in text
    assert m.LOCAL_DATE_TIME_PATTERN in (ROOT / "knowledge" / "tables" / "models.py").read_text().replace("\\\\", "\\")
