"""Invented worklists for the review benchmark: a department's day of orders, drawn at random.

The draw mimics what a scheduling system exports: whole years of age, whole kilograms and centimetres,
creatinine to two decimals in mg/dL (one site in five reports umol/L), a sample date within the last
sixty days, exams on a quarter-hour grid over a week, a few planned agents, metformin, diabetes, earlier
reactions. Nothing here is a real patient or a real department.
"""

from __future__ import annotations

import datetime as dt
import random

HEADER = ["order_id", "exam", "planned_agent", "scheduled_at", "age_years", "sex", "weight_kg", "height_cm",
          "creatinine", "creatinine_unit", "creatinine_measured_on", "takes_metformin", "diabetes", "inpatient",
          "dialysis", "perforation_suspected", "aspiration_risk", "pregnant", "prior_reactions"]

EXAMS = [("ct-abdomen-pelvis", 30), ("ct-chest", 15), ("ct-pulmonary-angiography", 8), ("ct-angiography-aorta", 4),
         ("ct-urography", 3), ("ct-liver-multiphase", 3), ("ct-head-noncontrast", 10), ("ct-trauma", 3),
         ("fluoro-esophagram", 4), ("fluoro-upper-gi", 2), ("fluoro-contrast-enema", 2), ("fluoro-cystogram", 1),
         ("angio-visceral-renal", 1), ("angio-aortoiliac-runoff", 1), ("ct-enterography", 2), ("ct-kub-stone", 5)]
NO_CONTRAST = ("ct-head-noncontrast", "ct-kub-stone")
PLANNED = ["", "", "", "", "iohexol", "iopamidol", "iodixanol"]
REACTIONS = ["iodinated:allergic_like:mild", "iodinated:allergic_like:moderate", "iodinated:allergic_like:mild:iohexol",
             "iodinated:physiologic:mild", "iodinated:allergic_like:severe"]


def make_rows(n: int, seed: int = 12, start: dt.datetime = dt.datetime(2026, 12, 2, 7, 0)) -> list[list[str]]:
    rnd = random.Random(seed)
    exams, weights = zip(*EXAMS)
    rows = []
    for i in range(n):
        age = rnd.randint(18, 95)
        sex = rnd.choice(("female", "male"))
        at = start + dt.timedelta(minutes=15 * rnd.randrange(7 * 48))
        has_cr = rnd.random() < 0.8
        umol = rnd.random() < 0.2
        cr = round(rnd.lognormvariate(0, 0.35), 2)
        exam = rnd.choices(exams, weights)[0]
        # a planned agent on some contrast CT orders; one order in 500 carries one by mistake elsewhere
        planned = rnd.choice(PLANNED) if (exam.startswith("ct-") and exam not in NO_CONTRAST) or \
            rnd.random() < 0.002 else ""
        rows.append([
            f"ORD-{i:07d}", exam, planned, at.isoformat(timespec="minutes"),
            str(age), sex, str(rnd.randint(45, 130)), str(rnd.randint(150, 195)),
            (str(round(cr * 88.4)) if umol else f"{cr:.2f}") if has_cr else "",
            ("umol/L" if umol else "mg/dL") if has_cr else "",
            (at.date() - dt.timedelta(days=rnd.randint(0, 60))).isoformat() if has_cr else "",
            "true" if rnd.random() < 0.15 else "false", "true" if rnd.random() < 0.2 else "false",
            "true" if rnd.random() < 0.25 else "false",
            "dialysis_anuric" if rnd.random() < 0.01 else "none",
            "true" if rnd.random() < 0.02 else "false", "true" if rnd.random() < 0.03 else "false",
            "true" if (sex == "female" and age < 45 and rnd.random() < 0.03) else "false",
            rnd.choice(REACTIONS) if rnd.random() < 0.06 else "",
        ])
    return rows
