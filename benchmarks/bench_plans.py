"""Benchmark of decide with the plans in (dose, renal limits, premedication and metformin timelines).

Target (issue 3): decide <= 1 ms per case with the calculators in. Prints figures; asserts nothing.
Cases: plan-heavy cases of tests/test_plans.py (premedication, metformin with hydration, CTA with an access
check, a warmed 370 mg I/mL agent, a catheter study with a Cigarroa limit) plus the scenario vectors.
Run: python benchmarks/bench_plans.py
"""

from __future__ import annotations

import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from knowledge.decision.engine import parse_case  # noqa: E402
from knowledge.tables.loader import load_knowledge  # noqa: E402
from knowledge.decision.engine import decide  # noqa: E402
from knowledge.decision.plans import add_plans  # noqa: E402

ADULT = {"age_years": 66, "sex": "female", "weight_kg": 70, "height_cm": 165,
         "creatinine": {"value": 1.3, "unit": "mg/dL", "measured_on": "2025-03-01"}}
ALLERGY = [{"agent_family": "iodinated", "kind": "allergic_like", "severity": "moderate"}]
PLAN_CASES = {
    "premedication, exam tomorrow 09:00": {
        "exam": "ct-angiography-head-neck", "as_of": "2025-03-10T14:00", "scheduled_at": "2025-03-11T09:00",
        "patient": {**ADULT, "prior_reactions": ALLERGY}},
    "premedication, exam in 3 h": {
        "exam": "ct-angiography-head-neck", "as_of": "2025-03-10T10:00", "scheduled_at": "2025-03-10T13:00",
        "patient": {**ADULT, "prior_reactions": ALLERGY}},
    "metformin, eGFR 25, hydration": {
        "exam": "ct-abdomen-pelvis", "as_of": "2025-03-10T10:00", "scheduled_at": "2025-03-10T16:30",
        "patient": {"age_years": 70, "sex": "male", "weight_kg": 80, "height_cm": 178, "egfr": 25,
                    "takes_metformin": True}},
    "CTA 5 mL/s, 22-gauge hand vein": {
        "exam": "ct-angiography-head-neck", "as_of": "2025-03-10T10:00",
        "patient": {**ADULT, "iv_access": {"gauge": 22, "site": "hand_or_wrist"}}},
    "warmed 370 mg I/mL": {
        "exam": "ct-angiography-aorta", "agent": "iopamidol", "planned_concentration_mg_i_ml": 370,
        "as_of": "2025-03-10T10:00", "patient": {**ADULT, "iv_access": {"gauge": 18, "site": "antecubital"}}},
    "catheter study, Cigarroa": {
        "exam": "angio-coronary", "planned_volume_ml": 200, "as_of": "2025-03-10T10:00",
        "scheduled_at": "2025-03-11T08:00",
        "patient": {"age_years": 70, "sex": "male", "weight_kg": 80, "height_cm": 175, "takes_metformin": True,
                    "creatinine": {"value": 221, "unit": "umol/L", "measured_on": "2025-03-10"}}},
}


def _per_call_ms(fn, rounds: int) -> float:
    t = time.perf_counter()
    for _ in range(rounds):
        fn()
    return (time.perf_counter() - t) * 1000 / rounds


def main() -> None:
    k = load_knowledge()
    print("decide with plans, ms per case (median of 5 runs x 200 calls; target <= 1 ms):")
    worst = 0.0
    for name, raw in PLAN_CASES.items():
        case = parse_case(raw)
        decide(case, k)
        runs = [_per_call_ms(lambda: decide(case, k), 200) for _ in range(5)]
        decision = decide(case, k)
        plans = statistics.median(_per_call_ms(lambda: add_plans(case, k, decision), 200) for _ in range(5))
        med = statistics.median(runs)
        worst = max(worst, med)
        print(f"  {name:<38} decide {med:.3f} ms  (of which plans {plans:.3f} ms)")
    try:
        from tests.scenarios import load_vectors

        cases = [parse_case(v["case"]) for v in load_vectors()]
    except Exception as exc:  # the vectors belong to another part of the project
        print(f"scenario vectors not loaded ({exc})")
        cases = []
    if cases:
        for c in cases:
            decide(c, k)
        rounds = 20
        t = time.perf_counter()
        for _ in range(rounds):
            for c in cases:
                decide(c, k)
        mean = (time.perf_counter() - t) * 1000 / (rounds * len(cases))
        print(f"scenario vectors: mean {mean:.3f} ms per case over {len(cases)} cases x {rounds}")
    print(f"slowest plan case: {worst:.3f} ms (target <= 1 ms)")


if __name__ == "__main__":
    main()
