"""The fast review path gives, cell by cell, what deciding every order in full gives.

``review_rows`` decides the first order of each class in full and works out the plans of the others per order
(knowledge/review/fast.py). These tests review varied invented lists (children and adults, entered and
computed eGFR, every exam, planned agents, reactions, IV access, planned doses, urgencies, rejected cells and
times) and the bundled scenario bank as worklist rows, and compare every result column with the plain path:
each row's case decided on its own (``review_case``). Rows are repeated with nearby numbers so most of them
go the fast way, and the tests check that they did.
"""

from __future__ import annotations

import datetime as dt
import random
from pathlib import Path

import pytest

from knowledge.decision.engine import case_facts, kidney_stage
from knowledge.review import fast as fast_mod
from knowledge.review import worklist as wl
from knowledge.review.columns import CaseBuilder, case_columns
from knowledge.review.fast import CONTINUOUS, DERIVED_FACTS, FastReview, review_case
from knowledge.tables import models as m
from knowledge.tables.loader import DATA_DIR, load_knowledge
from tests.scenarios import load_vectors

ROOT = Path(__file__).resolve().parents[1]
OVERLAY = ROOT / "examples" / "department-overlay.yaml"
AS_OF = dt.datetime(2026, 12, 1, 16, 0)
COLUMNS = [c.name for c in case_columns()]
REACTIONS = ["iodinated:allergic_like:mild", "iodinated:allergic_like:moderate", "iodinated:allergic_like:severe",
             "iodinated:allergic_like:mild:iohexol", "iodinated:allergic_like:severe:iohexol",
             "iodinated:physiologic:moderate", "iodinated:allergic_like:moderate::true", "iodinated:delayed:severe",
             "gadolinium:allergic_like:moderate", "gadolinium:allergic_like:mild:gadobutrol",
             "iodinated:allergic_like:mild; gadolinium:physiologic:mild", "barium:allergic_like:mild"]
FLAGS = ["perforation_suspected", "aspiration_risk", "tracheoesophageal_fistula_suspected", "hyperthyroidism",
         "manifest_hyperthyroidism", "pheochromocytoma", "colitis_or_diverticulitis", "toxic_megacolon",
         "recent_deep_biopsy", "bowel_fistula_suspected", "obstruction_high_grade", "radioiodine_planned", "pregnant",
         "breastfeeding", "shellfish_or_iodine_allergy", "heart_failure", "myasthenia_gravis", "peg_allergy",
         "unstable_cardiopulmonary"]


def _maybe(rnd: random.Random, p: float, value) -> str:
    return str(value) if rnd.random() < p else ""


def _kidney(rnd: random.Random, row: dict[str, str], at: dt.datetime) -> None:
    if rnd.random() < 0.8:
        umol = rnd.random() < 0.25
        cr = rnd.choice([0.2, 0.45, 3.9, 8.5]) if rnd.random() < 0.05 else round(rnd.lognormvariate(0, 0.5), 2)
        row["creatinine"] = str(round(cr * 88.4)) if umol else f"{cr:.2f}"
        row["creatinine_unit"] = "umol/L" if umol else "mg/dL"
        back = dt.timedelta(days=rnd.randint(0, 90), hours=rnd.choice([0, 0, 7]))
        taken = at - back
        row["creatinine_measured_on"] = rnd.choice(["", taken.date().isoformat(), taken.isoformat(timespec="minutes")])
    row["egfr"] = _maybe(rnd, 0.15, rnd.choice([8, 25, 29.9, 30, 44, 45, 59, 61, 95, rnd.randint(1, 150)]))
    row["cystatin_c_mg_l"] = _maybe(rnd, 0.05, round(rnd.uniform(0.6, 3.0), 2))
    row["acute_kidney_injury"] = "true" if rnd.random() < 0.06 else "false"
    row["dialysis"] = rnd.choice(["none"] * 12 + ["dialysis_anuric", "dialysis_residual_function"])
    for name, p in (("takes_metformin", 0.2), ("diabetes", 0.2), ("inpatient", 0.25), ("kidney_disease_history", 0.1)):
        row[name] = "true" if rnd.random() < p else rnd.choice(["false", ""])


def _patient(rnd: random.Random, row: dict[str, str]) -> None:
    age = rnd.choice([0.5, 2, 5, 10, 16, 17.9, 18, 45, 60, 61, 85, 101]) if rnd.random() < 0.3 else rnd.randint(1, 99)
    row["age_years"] = _maybe(rnd, 0.95, age)
    row["sex"] = rnd.choice(["female", "male", "female", "male", ""])
    row["weight_kg"] = _maybe(rnd, 0.9, rnd.choice([3, 12, 30]) if age < 12 else rnd.randint(40, 160))
    row["height_cm"] = _maybe(rnd, 0.85, rnd.randint(50, 140) if age < 12 else rnd.randint(145, 200))
    for name in FLAGS:
        row[name] = "true" if rnd.random() < 0.04 else "false"
    row["obstruction"] = rnd.choice(["none"] * 10 + ["small_bowel", "large_bowel"])
    row["prior_reactions"] = rnd.choice(REACTIONS) if rnd.random() < 0.15 else ""
    if rnd.random() < 0.4:
        row["iv_access_gauge"] = str(rnd.choice([18, 20, 22, 24]))
        row["iv_access_site"] = rnd.choice(m.IV_SITES)


def _order(rnd: random.Random, i: int, k) -> dict[str, str]:
    exam = rnd.choice(sorted(k.exams))
    agents = sorted({a.id for r in range(len(k.exams[exam].roles)) for a, _, _ in k.candidates[(exam, r)]})
    at = AS_OF + dt.timedelta(minutes=rnd.choice([-30, 20, 90, 240, 600, 780, 2000, 4000, 15 * rnd.randrange(400)]))
    row = dict.fromkeys(COLUMNS, "")
    row.update({"order_id": f"V-{i:05d}", "exam": exam,
           "planned_agent": rnd.choice(agents) if agents and rnd.random() < 0.3 else
           rnd.choice(["", "", "", "", "gadobutrol", "iohexol"]),
           "scheduled_at": _maybe(rnd, 0.95, at.isoformat(timespec="minutes")),
           "urgency": rnd.choice(["elective"] * 6 + ["urgent", "emergency", ""]),
           "override_culprit": "true" if rnd.random() < 0.05 else "false",
           "planned_volume_ml": _maybe(rnd, 0.08, rnd.choice([20, 80, 150])),
           "planned_flow_ml_s": _maybe(rnd, 0.08, rnd.choice([1, 3, 5])),
           "planned_concentration_mg_i_ml": _maybe(rnd, 0.05, rnd.choice([300, 320, 350, 370]))})
    _patient(rnd, row)
    _kidney(rnd, row, at)
    return row


def _nearby(rnd: random.Random, row: dict[str, str], j: int) -> dict[str, str]:
    """The same order for another patient: nearby age, weight, height, creatinine, sample date and exam time."""
    out = dict(row, order_id=f"{row['order_id']}-{j}")
    for name, step in (("age_years", 1), ("weight_kg", 3), ("height_cm", 2)):
        if out[name] and rnd.random() < 0.8:
            out[name] = str(max(1, round(float(out[name]) + rnd.choice([-step, step]))))
    if out["creatinine"] and rnd.random() < 0.8:
        value = float(out["creatinine"]) * rnd.choice([0.97, 1.03])
        out["creatinine"] = str(round(value)) if out["creatinine_unit"] == "umol/L" else f"{value:.2f}"
    if out["scheduled_at"] and rnd.random() < 0.7:
        at = dt.datetime.fromisoformat(out["scheduled_at"]) + dt.timedelta(minutes=rnd.choice([-15, 15, 60]))
        out["scheduled_at"] = at.isoformat(timespec="minutes")
    return out


def varied_rows(k, n: int, seed: int) -> list[dict[str, str]]:
    rnd = random.Random(seed)
    rows = []
    for i in range(n):
        row = _order(rnd, i, k)
        rows += [row] + [_nearby(rnd, row, j) for j in range(3)]
    return rows


def _plain(rows: list[dict[str, str]], header: list[str], k, as_of: dt.datetime) -> list[dict]:
    builder = CaseBuilder()
    used, _ = builder.known(header)
    reviewer = FastReview(k, builder, [c for c in used if c != "order_id"], as_of)  # only for its case_dict
    out = []
    for row in rows:
        if not row.get("exam"):
            out.append(fast_mod.rejected("column exam: empty; allowed: an exam id or a local procedure code", k,
                                         as_of.isoformat()))
        else:
            out.append(review_case(reviewer.case_dict(row), k, builder))
    return out


def assert_same(rows: list[dict[str, str]], header: list[str], k, as_of: dt.datetime = AS_OF) -> wl.Review:
    review = wl.review_rows(header, rows, k, as_of)
    plain = _plain(rows, header, k, as_of)
    assert len(review.rows) == len(plain)
    diffs = [(row["order_id"], c, got[c], want[c]) for row, got, want in zip(rows, review.rows, plain)
             for c in wl.RESULT_COLUMNS if got[c] != want[c]]
    assert diffs[:5] == []
    return review


@pytest.mark.parametrize("policy", [None, OVERLAY, DATA_DIR / "policies" / "esur-v10.yaml"])
def test_varied_lists_equal_the_plain_path(policy):
    k = load_knowledge(policy=policy)
    rows = varied_rows(k, 150, seed=11)
    review = assert_same(rows, COLUMNS, k)
    statuses = {r["status"] for r in review.rows}
    assert statuses == {"ok", "flagged", "rejected"}
    assert review.decided < len(rows) * 0.7  # most rows went the fast way (one full decision per class)


def coarse_rows(k, n: int, seed: int, variants: int = 7) -> list[dict[str, str]]:
    """Varied orders, each repeated for other patients on a coarse grid of numbers (few exam times, ages,
    weights, heights, creatinine values and dates), with many reactions, metformin and low eGFRs: orders of one
    class, and of different classes, meet in every remembered plan stage (a stage remembered without one of
    its inputs gives some order another's cells)."""
    rnd = random.Random(seed)
    rows = []
    for i in range(n):
        base = _order(rnd, i, k)
        base.update(prior_reactions=rnd.choice(["", "iodinated:allergic_like:moderate", "iodinated:allergic_like:mild"]),
                    takes_metformin=rnd.choice(["true", "false"]), egfr=rnd.choice(["", "", "20", "35", "90"]))
        for j in range(variants):
            row = dict(base, order_id=f"{base['order_id']}-{j}",
                       scheduled_at=(AS_OF + dt.timedelta(minutes=rnd.choice([20, 300, 780, 2000]))).isoformat(),
                       age_years=rnd.choice(["2", "10", "17", "45", "70"]), weight_kg=rnd.choice(["", "12", "20", "80"]),
                       height_cm=rnd.choice(["", "90", "170"]))
            if row["creatinine"]:
                row.update(creatinine=rnd.choice(["0.9", "1.6", "2.4"]), creatinine_unit="mg/dL",
                           creatinine_measured_on=rnd.choice(["2026-11-29", "2026-10-20", ""]))
            rows.append(row)
    return rows


@pytest.mark.parametrize("policy", [None, OVERLAY])
def test_coarse_lists_equal_the_plain_path(policy):
    k = load_knowledge(policy=policy)
    rows = coarse_rows(k, 100, seed=5)
    review = assert_same(rows, COLUMNS, k)
    assert review.decided < len(rows) * 0.6


def test_the_benchmark_list_equals_the_plain_path():
    from benchmarks.worklist_gen import HEADER, make_rows

    k = load_knowledge(policy=OVERLAY)
    rows = [dict(zip(HEADER, r)) for r in make_rows(600, seed=5)]
    review = assert_same(rows, HEADER, k)
    assert review.decided < len(rows) / 3


def _text(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    return "" if value is None else str(value)


def scenario_row(ident: str, case: dict) -> dict[str, str]:
    """A scenario's case as a worklist row (the columns of knowledge/review/columns.py)."""
    row = {"order_id": ident}
    for col in case_columns()[1:]:
        value = case
        path = ("agent",) if col.name == "planned_agent" else col.path
        for part in path:
            value = value.get(part) if isinstance(value, dict) else None
        if col.kind == "records":
            value = "; ".join(":".join(_text(r.get(p)) for p in col.parts).rstrip(":") for r in value or [])
        row[col.name] = _text(value)
    return row


def test_scenario_bank_as_worklist_rows_equals_the_plain_path():
    vectors = load_vectors()
    groups: dict[tuple, list] = {}
    for v in vectors:
        as_of = v["case"].get("as_of") or "2026-12-01T08:00"
        groups.setdefault((v.get("policy"), as_of), []).append(v)
    rnd = random.Random(3)
    fast_rows = 0
    for (policy, as_of), vs in groups.items():
        k = load_knowledge(policy=DATA_DIR / "policies" / f"{policy}.yaml" if policy else None)
        rows = [scenario_row(v["id"], v["case"]) for v in vs]
        rows += [_nearby(rnd, r, j) for r in rows for j in range(2)]
        review = assert_same(rows, COLUMNS, k, dt.datetime.fromisoformat(str(as_of)))
        fast_rows += len(rows) - review.decided
    assert fast_rows > len(vectors)  # the nearby orders mostly went the fast way


def test_bad_cells_are_rejected_as_the_plain_path_rejects_them():
    k = load_knowledge(policy=OVERLAY)
    good = {"order_id": "B0", "exam": "ct-abdomen-pelvis", "age_years": "70", "sex": "male", "weight_kg": "80",
            "height_cm": "175", "creatinine": "1.1", "creatinine_unit": "mg/dL", "creatinine_measured_on": "2026-11-25",
            "scheduled_at": "2026-12-02T09:00"}
    bad = [("age_years", "abc"), ("age_years", "130"), ("weight_kg", "0"), ("weight_kg", "400"), ("height_cm", "-5"),
           ("creatinine", "-1"), ("creatinine", "inf"), ("creatinine_measured_on", "2026-12-05"),
           ("creatinine_measured_on", "yesterday"), ("scheduled_at", "2026-12-01T09:00"),
           ("scheduled_at", "2026-12-02T09:00+01:00"), ("scheduled_at", "2040-01-01T09:00"), ("creatinine", "0.01"),
           ("weight_kg", "0.6"), ("height_cm", "250")]
    rows = [good] + [dict(good, order_id=f"B{i}", **{name: text}) for i, (name, text) in enumerate(bad, start=1)]
    rows += [dict(good, order_id="B99", age_years="71")]
    review = assert_same(rows * 2, list(good), k)
    assert [r["status"] for r in review.rows[:3]] == ["ok" if not review.rows[0]["flags"] else "flagged",
                                                        "rejected", "rejected"]


def test_only_the_listed_facts_depend_on_the_numeric_cells():
    """The class key holds every fact a rule may test: a fact that a numeric cell changes must be one of
    DERIVED_FACTS (so a new fact worked out from, say, the exam time cannot slip past the key)."""
    k = load_knowledge()
    base = {"exam": "ct-abdomen-pelvis", "scheduled_at": "2026-12-02T09:00", "as_of": "2026-12-01T16:00",
            "patient": {"age_years": 70, "sex": "male", "weight_kg": 80, "height_cm": 175,
                        "creatinine": {"value": 1.1, "unit": "mg/dL", "measured_on": "2026-11-25"}}}
    changed = {("patient", "age_years"): 15, ("patient", "weight_kg"): 55, ("patient", "height_cm"): 150,
               ("patient", "creatinine", "value"): 2.9, ("patient", "creatinine", "measured_on"): "2026-10-01",
               ("scheduled_at",): "2026-12-03T18:30"}
    assert set(changed) == set(CONTINUOUS)

    def facts(case_dict):
        case = m.Case.model_validate(case_dict)
        egfr, _, category, _, _ = kidney_stage(case.patient, k.policy)
        return case_facts(case, egfr, category)

    before = facts(base)
    for path, value in changed.items():
        other = {**base, "patient": {**base["patient"], "creatinine": dict(base["patient"]["creatinine"])}}
        target = other
        for part in path[:-1]:
            target = target[part]
        target[path[-1]] = value
        after = facts(other)
        assert {f for f in before if before[f] != after[f]} <= DERIVED_FACTS, path


def test_an_exam_whose_rules_test_an_unknown_fact_is_decided_in_full(monkeypatch):
    k = load_knowledge()
    monkeypatch.setattr(FastReview, "_exam", lambda self, exam_id: None)
    rows = [{"order_id": str(i), "exam": "ct-chest", "age_years": str(40 + i)} for i in range(5)]
    review = assert_same(rows, ["order_id", "exam", "age_years"], k)
    assert review.decided == 5


def test_orders_that_differ_only_where_one_plan_stage_looks():
    """Orders of one class that differ in just what one plan stage reads: a child and an adult premedicated
    for the same exam time (the paediatric warning), catheter studies with the same weight and GFR but another
    creatinine (Cigarroa), hydration with and without a weight, metformin held at two exam times."""
    k = load_knowledge()
    premed = {"exam": "ct-abdomen-pelvis", "prior_reactions": "iodinated:allergic_like:moderate", "sex": "male",
              "scheduled_at": "2026-12-02T09:00", "weight_kg": "60", "height_cm": "150", "egfr": "90"}
    rows = [dict(premed, order_id=f"P{age}", age_years=age) for age in ("10", "16", "17.9", "18", "40", "40")]
    rows += [dict(premed, order_id=f"PW{w}", age_years="9", weight_kg=w) for w in ("20", "", "35")]  # per-kg doses
    angio = {"exam": "angio-visceral-renal", "planned_agent": "iohexol", "planned_volume_ml": "250", "weight_kg": "70",
             "age_years": "60",
             "sex": "female", "creatinine_unit": "mg/dL", "scheduled_at": "2026-12-02T09:00"}
    rows += [dict(angio, order_id=f"A{cr}", creatinine=cr) for cr in ("1.0", "1.01", "3.0", "3.01")]
    hydrate = {"exam": "ct-abdomen-pelvis", "egfr": "25", "age_years": "70", "sex": "male", "height_cm": "170",
               "scheduled_at": "2026-12-02T11:00"}
    rows += [dict(hydrate, order_id=f"H{w}-{hf}", weight_kg=w, heart_failure=hf)
             for w in ("", "70", "71") for hf in ("false", "true")]
    metformin = {"exam": "ct-chest", "planned_agent": "iohexol", "takes_metformin": "true", "egfr": "20",
                 "age_years": "70"}
    rows += [dict(metformin, order_id=f"M{t}-{w}", scheduled_at=f"2026-12-02T{t}:00", weight_kg=w)
             for t, w in (("09", "70"), ("13", "71"), ("09", "72"))]
    child = {"exam": "ct-abdomen-pelvis", "weight_kg": "40", "height_cm": "150", "egfr": "12", "sex": "female",
             "scheduled_at": "2026-12-02T09:00"}
    rows += [dict(child, order_id=f"C{age}", age_years=age) for age in ("40", "12", "40", "12")]
    rows += [dict(child, order_id=f"D-{d}-{sex}", age_years="40", dialysis=d, sex=sex)
             for d in ("none", "dialysis_anuric") for sex in ("female", "male")]
    urgent = {"exam": "ct-abdomen-pelvis", "age_years": "70", "sex": "male", "weight_kg": "80", "acute_kidney_injury":
              "true", "prior_reactions": "iodinated:allergic_like:moderate", "scheduled_at": "2026-12-01T18:00"}
    rows += [dict(urgent, order_id=f"U{u}{i}", urgency=u, weight_kg=str(80 + i))
             for i in range(2) for u in ("elective", "urgent", "emergency", "")]
    header = sorted({c for r in rows for c in r}, key=lambda c: (c != "order_id", c))
    full = [{c: r.get(c, "") for c in header} for r in rows]
    review = assert_same(full, header, k)
    by = {r["order_id"]: r for r in review.rows}
    assert by["P10"]["alerts"] != by["P40"]["alerts"]  # the child's premedication warning
    assert by["PW"]["alerts"] != by["PW35"]["alerts"]  # a child's premedication per kg, or "no weight was given"
    assert "Cigarroa" in by["A3.0"]["alerts"] and "Cigarroa" not in by["A1.0"]["alerts"]
    assert by["C12"]["alerts"] != by["C40"]["alerts"] and "Iodine 20 g" in by["C40"]["alerts"]  # a child's dose
    assert "Iodine 20 g" in by["D-none-male"]["alerts"] and "Iodine" not in by["D-dialysis_anuric-male"]["alerts"]
    assert "metformin hold" in by["M09-72"]["flags"] and by["M09-72"]["metformin_hold_from"] == "2026-12-02 09:00"
    assert len({by[f"U{u}1"]["alerts"] for u in ("elective", "urgent", "emergency")}) == 3  # the urgency rules
    assert review.decided < len(rows) / 2


# ----------------------------------------------------------------------------- speed changes in the engine
def test_the_fast_constructor_builds_what_model_construct_builds():
    make = m.constructor(m.Option)
    reason = m.Reason(rule="r", text="t", verdict=None, source="common practice", certainty=m.Certainty.common_practice)
    given = dict(agent="iohexol", name="Iohexol", agent_class=m.AgentClass.positive, family=m.Family.iodinated,
                 osmolality_class=m.OsmolalityClass.low, verdict=m.Verdict.suitable, rank=1, chosen=True,
                 reasons=[reason], actions=["Warm to 37 °C"])
    for values in (given, {**given, "stocked": False}, {"agent": "x"}):
        fast, slow = make(**values), m.Option.model_construct(**values)
        assert fast.__dict__ == slow.__dict__ and list(fast.__dict__) == list(slow.__dict__)
        assert fast.model_fields_set == slow.model_fields_set and repr(fast) == repr(slow) and fast == slow
    # a model with a default factory (Case.patient) or private attributes keeps pydantic's own
    case = m.constructor(m.Case)(exam="ct-chest")
    assert case == m.Case.model_construct(exam="ct-chest") and case.patient is not m.constructor(m.Case)().patient


def test_the_departments_formulary_index_agrees_with_the_overlay():
    from knowledge.decision.department import formulary

    k = load_knowledge(policy=OVERLAY)
    stock = formulary(k.overlay)
    for agent in k.agents:
        assert (agent in stock) is k.overlay.stocked(agent) and stock.get(agent) is k.overlay.item(agent)
    assert formulary(load_knowledge().overlay or k.overlay.model_copy(update={"formulary": None})) is None
