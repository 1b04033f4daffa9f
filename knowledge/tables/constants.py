"""Clinical constants used in more than one place, each defined once here and imported everywhere else.

Each names its source beside it (see ``/work/shared/clinical-notes.md`` for how sure each is). The case
model's bounds (``models.Patient``) and the calculators' validity ranges read the same names, so the form,
the validation and the formulas can never disagree.
"""

from __future__ import annotations

#: ACR Manual on Contrast Media (metformin): when metformin is withheld, withhold it for 48 h after
#: contrast and restart only after kidney function is re-evaluated; ESUR Guidelines on Contrast Agents
#: v10 likewise measure eGFR within 48 h. The hold and the re-check are the same 48 h.
METFORMIN_HOLD_HOURS = 48.0

#: Body weight accepted, kg (case model, calculators): a premature newborn to the heaviest adults the
#: tables are meant for (common practice plausibility bound).
WEIGHT_KG_RANGE = (0.5, 350.0)
#: Height accepted, cm (common practice plausibility bound).
HEIGHT_CM_RANGE = (30.0, 250.0)

#: IV catheter sites the access check knows (ACR Manual on Contrast Media, injection of contrast media:
#: antecubital or forearm veins for power injection, hand/wrist at most 1.5 mL/s, central lines only
#: when rated for power injection).
IV_SITES = ("antecubital", "forearm", "hand_or_wrist", "central_power_injectable", "central_not_power_rated")

#: Reaction severities, least first (ACR Manual on Contrast Media: mild, moderate, severe); "none" is
#: the rank of no reaction. Rules compare severities in this order.
SEVERITY_ORDER = ("none", "mild", "moderate", "severe")
SEVERITY_RANK = {name: rank for rank, name in enumerate(SEVERITY_ORDER)}

#: Viscosity warning: a strength this viscous at 37 °C (mPa·s), injected at least this fast (mL/s), is
#: warmed to body temperature first (J Nucl Med Technol review of iodinated agents: warming lowers the
#: injection pressure; the thresholds themselves are common practice).
VISCOUS_MPAS_37C = 8.0
VISCOUS_FLOW_ML_S = 3.0
