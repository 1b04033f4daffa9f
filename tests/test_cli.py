"""The `contrast-aid` command-line contract: outputs, exit codes and one-line errors."""

from __future__ import annotations

import datetime as dt
import json
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from knowledge.cli import main

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE = ROOT / "examples" / "case-ct-low-egfr.json"


#: the command line's "now" in these tests: a fixed time, never the wall clock
NOW = dt.datetime(2026, 3, 10, 14, 0)


def fixed_clock() -> dt.datetime:
    return NOW


def run(capsys, *argv):
    code = main(list(argv), clock=fixed_clock)
    out, err = capsys.readouterr()
    return code, out, err


def run_exit(capsys, *argv):
    """For argparse errors, which raise SystemExit."""
    with pytest.raises(SystemExit) as exc:
        main(list(argv), clock=fixed_clock)
    out, err = capsys.readouterr()
    return exc.value.code, out, err


def test_decide_prints_the_decision_contract(capsys):
    code, out, err = run(capsys, "decide", str(EXAMPLE))
    assert code == 0 and err == ""
    d = json.loads(out)
    assert {"exam", "contrast_needed", "roles", "renal", "premedication", "metformin", "cautions",
            "knowledge_version"} <= set(d)
    assert d["exam"] == "ct-abdomen-pelvis"
    # CKD-EPI 2021, female 71 y, Scr 1.9 mg/dL: 142 * (1.9/0.7)^-1.200 * 0.9938^71 * 1.012 = 27.9
    # (computed by hand from the published equation)
    assert d["renal"]["egfr"] == pytest.approx(27.9, abs=0.05)
    assert d["renal"]["category"] == "G4" and d["renal"]["hydration_indicated"] is True
    assert d["metformin"]["hold"] is True
    iv = next(r for r in d["roles"] if r["route"] == "intravenous")
    opt = iv["options"][0]
    assert {"agent", "agent_class", "family", "osmolality_class", "verdict", "rank", "reasons", "actions"} <= set(opt)
    assert opt["agent"] != "iohexol"  # the culprit of the earlier reaction is not first
    assert all({"rule", "text", "source"} <= set(r) for o in iv["options"] for r in o["reasons"])


def test_decide_from_stdin(monkeypatch, capsys):
    import io
    monkeypatch.setattr(sys, "stdin", io.StringIO('{"exam": "ct-kub-stone"}'))
    code, out, _ = run(capsys, "decide", "-")
    assert code == 0 and json.loads(out)["contrast_needed"] is False


@pytest.mark.parametrize("payload, message", [
    ('{"exam": "ct-abdomen-pelvis", "patient": {"weight": 70}}',
     "contrast-aid: patient.weight: unknown field (did you mean weight_kg?); allowed: age_years, sex, weight_kg"),
    ('{"exam": "ct-abdomen-pelvis", "patient": {"creatinine": {"value": 1.2, "unit": "mmol/L"}}}',
     "contrast-aid: patient.creatinine.unit: 'mmol/L' is not allowed; allowed: 'mg/dL' or 'umol/L'\n"),
    ('{"exam": "ct-abdomen-pelvis", "patient": {"age_years": 140}}',
     "contrast-aid: patient.age_years: 140 is out of range; allowed: at most 120\n"),
    ('{"exam": "ct-abdomen-pelvis", "patient": {"dialysis": "yes"}}',
     "contrast-aid: patient.dialysis: 'yes' is not allowed; allowed: 'none', 'dialysis_anuric' or "
     "'dialysis_residual_function'\n"),
    ('{"exam": "ct-abdomen-pelvis", "patient": {"prior_reactions": [{"agent_family": "iodinated", '
     '"kind": "allergic_like", "severity": "awful"}]}}',
     "contrast-aid: patient.prior_reactions[0].severity: 'awful' is not allowed; allowed: 'mild', 'moderate' or "
     "'severe'\n"),
    ('{"exam": "ct-abdomen-pelvis", "agent": "iohexal"}',
     "contrast-aid: agent: 'iohexal' is not a known agent (did you mean iohexol?); allowed: the ids of `contrast-aid agents`\n"),
    ('{"exam": "ct-abdomen-pelvi"}',
     "contrast-aid: exam: 'ct-abdomen-pelvi' is not a known exam (did you mean ct-abdomen-pelvis?); "
     "allowed: the ids of `contrast-aid exams`\n"),
    ('{"patient": {}}', "contrast-aid: exam: required field is missing\n"),
    ('{"exam": "ct-chest", "patient": []}',
     "contrast-aid: patient: [] is not an object; allowed: an object with the fields of patient\n"),
    ('{"exam": "ct-chest", "agent": "barium-thin"}',
     "contrast-aid: agent: 'barium-thin' cannot be given in any role of ct-chest; allowed: carbon-dioxide, "),
    ('{"exam": "ct-chest", "scheduled_at": "tomorrow"}',
     "contrast-aid: scheduled_at: 'tomorrow' is not a date; allowed: an ISO 8601 date"),
    ('[1, 2]', "contrast-aid: case: must be a JSON object with 'exam' and 'patient'; got list\n"),
    ('{"exam": "ct-chest",', "contrast-aid: CASE: not valid JSON at line 1, column 21: Expecting property name "
     "enclosed in double quotes\n"),
])
def test_decide_bad_input_is_one_line_exit_2(tmp_path, capsys, payload, message):
    case = tmp_path / "case.json"
    case.write_text(payload)
    code, out, err = run(capsys, "decide", str(case))
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and "Traceback" not in err
    assert err.replace(str(case), "CASE").startswith(message)


def test_decide_missing_file(capsys):
    code, _, err = run(capsys, "decide", "/no/such/case.json")
    assert (code, err) == (2, "contrast-aid: /no/such/case.json: file not found\n")


def test_exams_and_agents_lists(capsys):
    code, out, _ = run(capsys, "exams", "--json")
    exams = {e["id"]: e for e in json.loads(out)}
    assert code == 0 and len(exams) >= 36
    assert exams["ct-head-noncontrast"]["contrast"] == "none" and exams["ct-head-noncontrast"]["routes"] == []
    code, out, _ = run(capsys, "agents", "--json")
    agents = {a["id"]: a for a in json.loads(out)}
    assert agents["iodixanol"]["osmolality_class"] == "iso"
    assert agents["diatrizoate"]["ionicity"] == "ionic"
    code, out, _ = run(capsys, "exams")
    assert "fluoro-myelogram" in out and "intrathecal" in out


def test_egfr_worked_values(capsys):
    # CKD-EPI 2021 (N Engl J Med 2021): male 60 y, Scr 1.4 mg/dL -> 57.54 (clinical notes worked value)
    code, out, _ = run(capsys, "egfr", "--creatinine", "1.4", "--unit", "mg/dL", "--age", "60", "--sex", "male",
                       "--json")
    assert code == 0 and json.loads(out) == {"egfr": 57.5, "unit": "mL/min/1.73 m2", "equation": "ckd_epi_2021",
                                             "category": "G3a"}
    # bedside Schwartz (J Am Soc Nephrol 2009): 120 cm, Scr 0.6 -> 82.6
    code, out, _ = run(capsys, "egfr", "--creatinine", "0.6", "--unit", "mg/dL", "--age", "8", "--sex", "female",
                       "--height-cm", "120")
    assert code == 0 and out.startswith("eGFR 82.6 mL/min/1.73 m2") and "G2" in out


@pytest.mark.parametrize("argv, message", [
    (["--unit", "mmol/L", "--age", "60", "--sex", "male"],
     "contrast-aid: --unit: 'mmol/L' is not allowed; allowed: 'mg/dL' or 'umol/L'\n"),
    (["--unit", "mg/dL", "--age", "200", "--sex", "male"],
     "contrast-aid: --age: 200 is out of range; allowed: at most 120\n"),
    (["--unit", "mg/dL", "--age", "60", "--sex", "other"],
     "contrast-aid: --sex: 'other' is not allowed; allowed: 'female' or 'male'\n"),
    (["--unit", "mg/dL", "--age", "9", "--sex", "male"],
     "contrast-aid: --height-cm: missing; allowed: a height in cm (the bedside Schwartz equation needs it under 18 "
     "years)\n"),
])
def test_egfr_bad_input(capsys, argv, message):
    code, out, err = run(capsys, "egfr", "--creatinine", "1.4", *argv)
    assert (code, out, err) == (2, "", message)


def test_egfr_creatinine_out_of_range(capsys):
    code, _, err = run(capsys, "egfr", "--creatinine", "45", "--unit", "mg/dL", "--age", "60", "--sex", "male")
    assert (code, err) == (2, "contrast-aid: --creatinine: 45 is out of range; allowed: from 0.1 to 20 mg/dL\n")


def test_usage_error_is_one_line(capsys):
    code, out, err = run_exit(capsys, "egfr", "--creatinine", "x")
    assert code == 2 and err.count("\n") == 1 and "invalid float value: 'x'" in err


def test_knowledge_check_prints_counts(capsys):
    code, out, _ = run(capsys, "knowledge", "check")
    assert code == 0
    # the counts are those of the tables themselves, not a number pinned here
    import yaml
    from knowledge.tables.loader import DATA_DIR
    n = {t: len(yaml.safe_load((DATA_DIR / f"{t}.yaml").read_text(encoding="utf-8")))
         for t in ("exams", "agents", "rules", "sources")}
    assert out.startswith(f"knowledge ok: {n['exams']} exams, {n['agents']} agents, {n['rules']} rules, "
                          f"{n['sources']} sources; ")
    assert " sources; version " in out


def test_knowledge_check_broken_policy(tmp_path, capsys):
    bad = tmp_path / "policy.yaml"
    bad.write_text("id: x\n")
    code, _, err = run(capsys, "knowledge", "check", "--policy", str(bad))
    assert code == 2 and err.startswith("contrast-aid: policy.yaml: policy.name: required field is missing")


def test_knowledge_schema_covers_tables_case_decision(capsys):
    code, out, _ = run(capsys, "knowledge", "schema")
    schema = json.loads(out)
    assert set(schema) == {"tables", "policy", "case", "decision"}
    assert schema["case"]["additionalProperties"] is False
    assert "exam" in schema["case"]["properties"]
    assert schema["decision"]["properties"]["roles"]["type"] == "array"


def test_console_script_has_no_traceback_on_bad_input(tmp_path):
    exe = shutil.which("contrast-aid")
    cmd = [exe] if exe else [sys.executable, "-m", "knowledge"]
    bad = tmp_path / "c.json"
    bad.write_text("{not json")
    res = subprocess.run([*cmd, "decide", str(bad)], capture_output=True, text=True, timeout=60)
    assert res.returncode == 2 and "Traceback" not in res.stderr and res.stderr.count("\n") == 1
