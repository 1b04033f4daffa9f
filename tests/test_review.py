"""Worklist review: columns generated from the case model, good / mixed / unusable files and their exit
codes, formula-injection protection, atomic output, XLSX and Parquet, the process pool and the summary.

Invented orders of an invented department. Expected clinical values come from the bundled default profile
(ACR Manual: metformin withheld from the time of contrast, re-checked 48 h later; premedication regimens
laid out from the exam time) and the overlay in examples/.
"""

from __future__ import annotations

import csv
import datetime as dt
from pathlib import Path

import pytest

from knowledge.cli.main import main
from knowledge.review import worklist as wl
from knowledge.review.columns import CaseBuilder, case_columns
from knowledge.tables import models as m
from knowledge.tables.loader import load_knowledge

ROOT = Path(__file__).resolve().parents[1]
SAMPLE = ROOT / "examples" / "worklist.csv"
OVERLAY = ROOT / "examples" / "department-overlay.yaml"
AS_OF = "2026-12-01T16:00"


def clock():
    raise AssertionError("review must not read the clock when --as-of is given")


def run(args, capsys):
    code = main(args, clock=clock)
    out = capsys.readouterr()
    return code, out.out, out.err


def read_csv(path: Path) -> list[dict[str, str]]:
    with path.open(encoding="utf-8", newline="") as fh:
        return list(csv.DictReader(fh))


def write_csv(path: Path, header: list[str], rows: list[list[str]]) -> Path:
    with path.open("w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        w.writerows(rows)
    return path


# ----------------------------------------------------------------------------- columns from the model
def test_columns_follow_the_case_model():
    names = [c.name for c in case_columns()]
    assert names[:2] == ["order_id", "exam"]
    assert "planned_agent" in names and "agent" not in names and "as_of" not in names
    assert {"creatinine", "creatinine_unit", "creatinine_measured_on", "iv_access_gauge", "iv_access_site"} <= set(names)
    # every scalar field of Patient and Case appears under its own name (a new field needs no edit here)
    for name, f in m.Patient.model_fields.items():
        if name not in ("creatinine", "iv_access"):
            assert name in names, name
    for name in m.Case.model_fields:
        if name not in ("exam", "patient", "as_of", "agent"):
            assert name in names, name
    reactions = next(c for c in case_columns() if c.name == "prior_reactions")
    assert reactions.parts[:4] == ("agent_family", "kind", "severity", "agent")
    assert reactions.parts == tuple(m.PriorReaction.model_fields)  # a field added to the model is a part


def test_row_to_case_flattening():
    b = CaseBuilder()
    case = b.validate(b.case_dict({
        "order_id": "X1", "exam": "ct-chest", "planned_agent": "iohexol", "age_years": "70", "sex": "male",
        "creatinine": "1.2", "creatinine_unit": "mg/dL", "creatinine_measured_on": "2026-11-30",
        "takes_metformin": "true", "prior_reactions": "iodinated:allergic_like:mild:iohexol; barium:physiologic:moderate",
        "iv_access_gauge": "20", "iv_access_site": "antecubital", "weight_kg": "",
    }, "ct-chest"))
    assert case.agent == "iohexol" and case.patient.age_years == 70 and case.patient.weight_kg is None
    assert case.patient.creatinine == m.Creatinine(value=1.2, unit="mg/dL", measured_on=dt.date(2026, 11, 30))
    assert case.patient.takes_metformin is True
    assert [(r.agent_family.value, r.kind.value, r.severity, r.agent) for r in case.patient.prior_reactions] == [
        ("iodinated", "allergic_like", "mild", "iohexol"), ("barium", "physiologic", "moderate", None)]
    assert case.patient.iv_access == m.IVAccess(gauge=20, site="antecubital")


# ----------------------------------------------------------------------------- the sample list (mixed)
def test_sample_worklist_mixed_exit_1_and_rows_in_order(tmp_path, capsys):
    out = tmp_path / "reviewed.csv"
    code, stdout, _ = run(["review", str(SAMPLE), "-o", str(out), "--policy", str(OVERLAY), "--as-of", AS_OF], capsys)
    assert code == 1  # two rows rejected, the rest reviewed
    rows = read_csv(out)
    src = read_csv(SAMPLE)
    assert [r["order_id"] for r in rows] == [r["order_id"] for r in src]
    by = {r["order_id"]: r for r in rows}
    assert [by[i]["status"] for i in ("HS-1005", "HS-1006", "HS-1007")] == ["ok", "rejected", "rejected"]
    # suspected perforation: the engine's warning that the gas-distension role is not used flags the order
    assert by["HS-1004"]["status"] == "flagged" and by["HS-1004"]["alerts"].startswith("WARN: No agent can be used")
    assert by["HS-1006"]["reason"] == "column creatinine_unit: 'mmol' is not allowed; allowed: 'mg/dL' or 'umol/L'"
    assert by["HS-1007"]["reason"].startswith("column exam: 'ct-mystery' is not a known exam")
    # local code HSCT-AP mapped by the overlay; metformin held from the exam time, re-check 48 h later (ACR Manual)
    r1 = by["HS-1001"]
    assert r1["exam_id"] == "ct-abdomen-pelvis" and r1["status"] == "flagged"
    assert r1["planned_agent_verdict"] == "not_advised"  # the culprit agent (rule reaction-culprit-agent)
    assert r1["best_agent"] == "iodixanol" and r1["best_agent_label"] == "Iodixanol 320 (angiography suite)"
    assert r1["metformin_hold_from"] == "2026-12-02 08:30"
    assert "re-check kidney function 2026-12-04 08:30" in r1["actions"]
    # moderate allergic-like reaction: premedication; the overlay's elective regimen is methylprednisolone 12 h
    # (ACR Manual), so it starts 12 h before the 10:15 exam
    r3 = by["HS-1003"]
    assert r3["premedication_start_at"] == "2026-12-01 22:15"
    assert "planned agent not stocked here" in r3["flags"] and "creatinine needed" in r3["flags"]
    assert r3["creatinine_needed_by"] == "2026-12-02 10:15"
    for r in rows:
        assert r["policy"] == "harbourside-radiology" and len(r["policy_version"]) == 12
        assert r["knowledge_version"] and r["as_of"] == "2026-12-01 16:00"
    assert "8 orders: 1 ok, 5 flagged, 2 rejected" in stdout
    assert "2026-12-01 22:15  order HS-1003: premedication (methylprednisolone-12h) from 2026-12-01 22:15" in stdout
    assert "columns not read (passed through): urgency" in stdout or "urgency" in {c.name for c in case_columns()}


def test_good_list_exits_0(tmp_path, capsys):
    src = write_csv(tmp_path / "good.csv", ["order_id", "exam", "age_years", "sex", "egfr", "scheduled_at"],
                    [["G1", "ct-chest", "40", "female", "95", "2026-12-02T09:00"],
                     ["G2", "fluoro-esophagram", "30", "male", "", "2026-12-02T10:00"]])
    code, stdout, _ = run(["review", str(src), "--as-of", AS_OF], capsys)
    assert code == 0
    rows = read_csv(tmp_path / "good.reviewed.csv")
    assert [r["status"] for r in rows] == ["ok", "ok"]
    assert [r["best_agent"] for r in rows] == ["iohexol", "barium-thin"]  # exams.yaml preference orders
    assert "2 orders: 2 ok, 0 flagged, 0 rejected" in stdout


@pytest.mark.parametrize("content, name, message", [
    (None, "missing.csv", "missing.csv: file not found"),  # the path as given, then this
    ("order_id,patient\n1,x\n", "nocols.csv", "nocols.csv: required column exam is missing; found: order_id, patient"),
    ("hello", "list.txt", "list.txt: .txt is not a worklist format; allowed: .csv, .xlsx, .parquet"),
    ("not a spreadsheet", "fake.xlsx", "fake.xlsx: not a readable XLSX table"),
    ("", "empty.csv", "empty.csv: not a readable CSV table"),
])
def test_unusable_files_exit_2_and_write_nothing(tmp_path, capsys, content, name, message):
    src = tmp_path / name
    if content is not None:
        src.write_text(content, encoding="utf-8")
    code, stdout, err = run(["review", str(src), "-o", str(tmp_path / "out.csv"), "--as-of", AS_OF], capsys)
    assert code == 2 and stdout == ""
    assert err.startswith("contrast-aid: ") and message in err and err.count("\n") == 1
    assert not (tmp_path / "out.csv").exists()
    assert [p.name for p in tmp_path.iterdir()] == ([name] if content is not None else [])


def test_formula_injection_is_neutralised(tmp_path, capsys):
    evil = ['=HYPERLINK("http://example.invalid","x")', "+1+1", "-2+3", "@SUM(A1)", "\tTAB", "\rCR"]
    src = write_csv(tmp_path / "evil.csv", ["order_id", "exam", "note"],
                    [[e, "ct-chest", e] for e in evil] + [["=1+1", "=cmd|' /C calc'!A0", ""]])
    out = tmp_path / "out.csv"
    code, _, _ = run(["review", str(src), "-o", str(out), "--as-of", AS_OF], capsys)
    assert code == 1  # the last row's exam is not an exam
    rows = read_csv(out)
    # cells are read without surrounding blanks, so a leading tab or CR is dropped on reading
    expected = ["'" + e if not e.startswith(("\t", "\r")) else e.strip() for e in evil]
    assert [r["order_id"] for r in rows[:-1]] == expected
    assert [r["note"] for r in rows[:-1]] == expected
    assert rows[-1]["exam"] == "'=cmd|' /C calc'!A0"
    # no cell of the file starts with a formula character
    for r in rows:
        for v in r.values():
            assert not v.startswith(("=", "+", "-", "@", "\t", "\r")), v
    # XLSX too
    xout = tmp_path / "out.xlsx"
    run(["review", str(src), "-o", str(xout), "--as-of", AS_OF], capsys)
    import openpyxl

    ws = openpyxl.load_workbook(xout).active
    values = [c.value for row in ws.iter_rows() for c in row if isinstance(c.value, str)]
    assert "'" + evil[0] in values
    assert all(c.data_type != "f" for row in ws.iter_rows() for c in row)


def test_safe_cell():
    assert wl.safe_cell("=A1") == "'=A1" and wl.safe_cell("ok") == "ok" and wl.safe_cell(3) == 3
    assert wl.safe_cell("\tx") == "'\tx" and wl.safe_cell("\rx") == "'\rx" and wl.safe_cell("-1") == "'-1"
    assert wl.safe_cell("") == ""


def test_interrupted_write_leaves_no_half_file(tmp_path, capsys):
    """A write that dies half-way leaves the old file untouched and no temporary file behind."""
    k = load_knowledge()
    header, rows = wl.read_worklist(SAMPLE)
    review = wl.review_rows(header, rows, k, dt.datetime(2026, 12, 1, 16))
    target = tmp_path / "reviewed.csv"
    target.write_text("previous complete file\n", encoding="utf-8")

    def dies_half_way(frame, path, ext):
        path.write_text("order_id,exam\nHS-1001,", encoding="utf-8")
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        wl.write_reviewed(review, target, writer=dies_half_way)
    assert target.read_text(encoding="utf-8") == "previous complete file\n"
    assert [p.name for p in tmp_path.iterdir()] == ["reviewed.csv"]
    wl.write_reviewed(review, target)
    assert len(read_csv(target)) == 8 and [p.name for p in tmp_path.iterdir()] == ["reviewed.csv"]


def test_xlsx_and_parquet_round_trip_give_the_same_review(tmp_path, capsys):
    import pandas as pd

    frame = pd.read_csv(SAMPLE, dtype=str, keep_default_na=False)
    frame.to_excel(tmp_path / "list.xlsx", index=False)
    frame.to_parquet(tmp_path / "list.parquet", index=False)
    outs = {}
    for ext in ("csv", "xlsx", "parquet"):
        src = SAMPLE if ext == "csv" else tmp_path / f"list.{ext}"
        out = tmp_path / f"out-{ext}.csv"
        code, _, _ = run(["review", str(src), "-o", str(out), "--as-of", AS_OF], capsys)
        assert code == 1
        outs[ext] = read_csv(out)
    assert outs["csv"] == outs["xlsx"] == outs["parquet"]


@pytest.mark.parametrize("workers", [2, 3])
def test_process_pool_gives_the_same_rows(workers):
    from knowledge.review.scale import pool_reviewer

    k = load_knowledge(policy=OVERLAY)
    header, rows = wl.read_worklist(SAMPLE)
    rows = [{**r, "age_years": str(40 + i % 40)} if r["age_years"] else r for i, r in enumerate(rows * 30)]
    as_of = dt.datetime(2026, 12, 1, 16)
    plain = wl.review_rows(header, rows, k, as_of)
    pooled = wl.review_rows(header, rows, k, as_of, review_many=pool_reviewer(workers=workers, min_rows=1))
    assert pooled.rows == plain.rows
    assert plain.unique_cases < len(rows)  # identical cases decided once


def test_pool_parts_share_no_class():
    from knowledge.review.scale import parts_of

    rows = [{"exam": e, "planned_agent": a} for e, a, n in (("ct-chest", "", 50), ("ct-chest", "iohexol", 30),
                                                             ("fluoro-upper-gi", "", 40), ("ct-urography", "", 20))
            for _ in range(n)]
    parts = parts_of(rows, 2)
    assert sorted(i for part in parts for i in part) == list(range(len(rows))) and len(parts) == 2
    assert all(part == sorted(part) for part in parts)
    groups = [{(rows[i]["exam"], rows[i]["planned_agent"]) for i in part} for part in parts]
    assert not groups[0] & groups[1] and sorted(len(p) for p in parts) == [70, 70]
    one = [{"exam": "ct-chest"}] * 9  # one group: cut by position
    assert parts_of(one, 2) == [[0, 1, 2, 3, 4], [5, 6, 7, 8]] and parts_of(one[:1], 2) == [[0]]


def test_workers_2_writes_the_same_file(tmp_path, capsys, monkeypatch):
    from knowledge.review import scale

    header, rows = wl.read_worklist(SAMPLE)
    many = [{**r, "order_id": f"{r['order_id']}-{i}", "age_years": str(30 + i % 50) if r["age_years"] else ""}
            for i, r in enumerate(rows * 40)]
    src = write_csv(tmp_path / "many.csv", header, [[r[h] for h in header] for r in many])
    monkeypatch.setattr(scale, "POOL_MIN_ROWS", 1)
    outs = []
    for workers in ("1", "2"):
        out = tmp_path / f"out-{workers}.csv"
        code, stdout, _ = run(["review", str(src), "-o", str(out), "--policy", str(OVERLAY), "--as-of", AS_OF,
                               "--workers", workers], capsys)
        assert code == 1 and "320 orders:" in stdout
        outs.append(out.read_bytes())
    assert outs[0] == outs[1]


def test_workers_default_is_the_cores_and_bad_counts_are_refused(tmp_path, capsys, monkeypatch):
    from knowledge.review import scale

    asked = []
    monkeypatch.setattr(scale, "pool_reviewer", lambda workers=None: asked.append(workers) or None)
    src = write_csv(tmp_path / "l.csv", ["order_id", "exam"], [["A", "ct-chest"]])
    code, _, _ = run(["review", str(src), "--as-of", AS_OF], capsys)
    assert code == 0 and asked == [0]  # no --workers: 0, pool_reviewer's "the cores, at most 2"
    code, _, _ = run(["review", str(src), "--as-of", AS_OF, "--workers", "1"], capsys)
    assert code == 0 and asked == [0]  # 1: this process only, no pool asked for
    for bad in ("-2", "two"):
        with pytest.raises(SystemExit) as stop:
            main(["review", str(src), "--as-of", AS_OF, "--workers", bad], clock=clock)
        err = capsys.readouterr().err
        assert stop.value.code == 2 and f"--workers: '{bad}'; allowed: 0 (the cores, at most 2)" in err
    with pytest.raises(SystemExit):
        main(["review", "--help"], clock=clock)
    words = " ".join(capsys.readouterr().out.split())
    assert f"Lists under {scale.POOL_MIN_ROWS:,} distinct rows stay in this process" in words


def test_identical_cases_are_decided_once():
    k = load_knowledge()
    header = ["order_id", "exam", "egfr"]
    rows = [{"order_id": str(i), "exam": "ct-chest", "egfr": "50"} for i in range(50)]
    review = wl.review_rows(header, rows, k, dt.datetime(2026, 12, 1, 16))
    assert review.unique_cases == 1 and [r["order_id"] for r in review.rows] == [str(i) for i in range(50)]


def test_as_of_defaults_to_the_injected_clock(tmp_path, capsys):
    src = write_csv(tmp_path / "l.csv", ["order_id", "exam"], [["A", "ct-chest"]])
    code = main(["review", str(src)], clock=lambda: dt.datetime(2026, 12, 3, 7, 45))
    capsys.readouterr()
    assert code == 0 and read_csv(tmp_path / "l.reviewed.csv")[0]["as_of"] == "2026-12-03 07:45"


def test_needs_action_before():
    k = load_knowledge(policy=OVERLAY)
    header, rows = wl.read_worklist(SAMPLE)
    review = wl.review_rows(header, rows, k, dt.datetime(2026, 12, 1, 16))
    due = wl.needs_action_before(review, dt.datetime(2026, 12, 2, 0, 0))
    # the overlay's methylprednisolone 12 h regimen (ACR Manual) before the 10:15 exam starts at 22:15 tonight
    assert [(r["order_id"], r["premedication_start_at"]) for r in due] == [("HS-1003", "2026-12-01 22:15")]
    # the same list under the default profile: the local codes are not exams, and prednisone 13 h starts 21:15
    plain = wl.review_rows(header, [{**r, "exam": "ct-angiography-aorta"} for r in rows], load_knowledge(),
                           dt.datetime(2026, 12, 1, 16))
    assert [r["premedication_start_at"] for r in plain.rows if r["order_id"] == "HS-1003"] == ["2026-12-01 21:15"]


def test_output_same_as_input_is_refused(tmp_path, capsys):
    src = write_csv(tmp_path / "l.csv", ["order_id", "exam"], [["A", "ct-chest"]])
    code, _, err = run(["review", str(src), "-o", str(src), "--as-of", AS_OF], capsys)
    assert code == 2 and "the same file as the worklist" in err
    assert src.read_text(encoding="utf-8") == "order_id,exam\r\nA,ct-chest\r\n" or "status" not in src.read_text()


def test_no_progress_bar_when_not_a_terminal(tmp_path, capsys):
    src = write_csv(tmp_path / "l.csv", ["order_id", "exam"], [[str(i), "ct-chest"] for i in range(5)])
    code, _, err = run(["review", str(src), "--as-of", AS_OF], capsys)
    assert code == 0 and err == ""


def test_failed_write_is_one_line_and_leaves_nothing(tmp_path, capsys):
    """A disk error while writing (simulated) is a one-line message, exit 2, and no file or temporary file."""
    k = load_knowledge()
    header, rows = wl.read_worklist(SAMPLE)
    review = wl.review_rows(header, rows, k, dt.datetime(2026, 12, 1, 16))

    def disk_full(frame, path, ext):
        path.write_text("order_id", encoding="utf-8")
        raise OSError(28, "No space left on device")

    with pytest.raises(wl.WorklistError) as err:
        wl.write_reviewed(review, tmp_path / "out.csv", writer=disk_full)
    assert str(err.value) == f"-o {tmp_path / 'out.csv'}: not written (No space left on device); nothing was changed"
    assert list(tmp_path.iterdir()) == []


def test_progress_reaches_the_row_count_and_windows_csv_reads():
    k = load_knowledge()
    header, rows = wl.read_worklist(SAMPLE)
    ticks: list[int] = []
    wl.review_rows(header, rows * 3, k, dt.datetime(2026, 12, 1, 16), progress=ticks.append)
    assert sum(ticks) == 24  # 8 distinct cases, 24 rows


def test_cp1252_csv(tmp_path):
    p = tmp_path / "win.csv"
    p.write_bytes("order_id,exam,ward\nW1,ct-chest,Salle \xe9t\xe9\n".encode("latin-1"))
    header, rows = wl.read_worklist(p)
    assert rows[0]["ward"] == "Salle \u00e9t\u00e9"
