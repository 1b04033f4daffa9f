"""``contrast-aid dose``: a dose plan on its own, from an agent and a protocol given on the command line
or taken from an exam (the decision layer's :func:`knowledge.decision.plans.dose_block`)."""

from __future__ import annotations

import argparse
import json
from typing import Any

from ..calculators import access as access_calc
from ..calculators import body, kidney
from ..calculators import dose as dose_calc
from ..calculators import ranges as R
from ..decision.plans import _dose_limits, dose_block, mg_i_strengths
from ..errors import CaseError, out_of_range
from ..tables import models as m
from ..tables.loader import load_knowledge

SITES = access_calc.SITES


def add_dose_parser(subparsers: Any) -> argparse.ArgumentParser:
    """Add the ``dose`` subcommand to an argparse ``subparsers`` object; returns its parser."""
    ps = subparsers.add_parser(
        "dose", help="work out an intravascular dose plan on its own",
        description="Dose plan for an iodinated agent: volume, grams of iodine, flow, iodine delivery rate, "
                    "duration, IV access and viscosity; with eGFR, weight and height also g iodine / GFR, and "
                    "with a creatinine the Cigarroa limit. The protocol comes from --exam or the options.")
    ps.add_argument("--agent", required=True, help="agent id (see `contrast-aid agents`)")
    ps.add_argument("--exam", help="take the protocol of this exam's first intravascular role")
    ps.add_argument("--concentration", type=float, help="strength, mg I/mL (one of the agent's strengths)")
    ps.add_argument("--weight", type=float, help="body weight, kg")
    ps.add_argument("--height", type=float, help="height, cm (for BSA and absolute GFR)")
    ps.add_argument("--g-per-kg", type=float, dest="g_per_kg", help="weight-based iodine dose, g I/kg")
    ps.add_argument("--fixed-volume", type=float, dest="fixed_volume", help="fixed protocol volume, mL")
    ps.add_argument("--max-volume", type=float, dest="max_volume", help="volume cap, mL (default 150)")
    ps.add_argument("--scan-duration", type=float, dest="scan_duration", help="angiographic CT scan time, s")
    ps.add_argument("--offset", type=float, default=None, help="seconds added to the scan duration")
    ps.add_argument("--flow", type=float, help="flow rate, mL/s")
    ps.add_argument("--volume", type=float, help="planned volume, mL (overrides the protocol)")
    ps.add_argument("--gauge", type=int, help="IV catheter gauge (14-24)")
    ps.add_argument("--site", help=f"IV catheter site: {', '.join(SITES)}")
    ps.add_argument("--egfr", type=float, help="eGFR, mL/min/1.73 m²")
    ps.add_argument("--creatinine", type=float, help="serum creatinine (for the Cigarroa limit)")
    ps.add_argument("--unit", default="mg/dL", help="creatinine unit: mg/dL (default) or umol/L")
    ps.add_argument("--catheter-study", action="store_true", dest="catheter_study",
                    help="apply the Cigarroa limit (catheter study)")
    ps.add_argument("--route", default="intravenous", help="intravenous (default) or intra_arterial")
    ps.add_argument("--policy", metavar="FILE", help="a local policy YAML file (default: the bundled one)")
    ps.set_defaults(func=dose_command)
    return ps


#: (attribute, flag, low, high, unit): the calculators' ranges, which come from the case and protocol models
_FLAG_RANGES = (
    ("weight", "--weight", *R.WEIGHT_KG_RANGE, "kg"), ("height", "--height", *R.HEIGHT_CM_RANGE, "cm"),
    ("volume", "--volume", *R.VOLUME_RANGE, "mL"), ("flow", "--flow", *R.FLOW_RANGE, "mL/s"),
    ("egfr", "--egfr", *R.field_range(m.Patient, "egfr"), "mL/min/1.73 m²"),
    ("g_per_kg", "--g-per-kg", *R.IODINE_G_PER_KG_RANGE, "g I/kg"),
    ("fixed_volume", "--fixed-volume", *R.VOLUME_RANGE, "mL"), ("max_volume", "--max-volume", *R.VOLUME_RANGE, "mL"),
    ("scan_duration", "--scan-duration", *dose_calc.SCAN_DURATION_RANGE, "s"),
    ("offset", "--offset", *dose_calc.OFFSET_RANGE, "s"),
    ("gauge", "--gauge", *R.GAUGE_RANGE, "gauge"),
    ("concentration", "--concentration", *dose_calc.CONCENTRATION_RANGE, "mg I/mL"),
)


def dose_plan(args: argparse.Namespace, knowledge: Any = None) -> dict[str, Any]:
    """The dose plan of ``contrast-aid dose`` as a JSON-ready dict. Raises CaseError/RangeError whose
    messages name the command-line flag, the value given and what is allowed."""
    check_flags(args)
    k = knowledge or load_knowledge(policy=getattr(args, "policy", None))
    agent = flag_agent(k, args.agent)
    protocol, route, catheter = flag_protocol(k, args)
    access = m.IVAccess(gauge=args.gauge, site=args.site) if args.gauge is not None else None
    block = dose_block(agent, protocol, route, weight_kg=args.weight, planned_volume_ml=args.volume,
                       planned_flow_ml_s=args.flow, concentration_mg_i_ml=args.concentration, iv_access=access,
                       cite=k.cite, concentration_field="--concentration")
    if block is None or block.volume_ml is None:
        missing = "--weight (the protocol is weight-based)" if protocol and protocol.iodine_g_per_kg else "--volume"
        raise CaseError(f"{missing.split()[0]}: missing; allowed: {missing} to work out the volume",
                        field=missing.split()[0])
    out: dict[str, Any] = {"dose": block.model_dump(mode="json")}
    agfr = None
    if args.egfr is not None and args.weight is not None and args.height is not None:
        bsa = body.bsa(args.weight, args.height, k.policy.bsa_formula)
        agfr = body.absolute_gfr(args.egfr, bsa)
        out["bsa_m2"], out["bsa_formula"] = round(bsa, 2), k.policy.bsa_formula
        out["absolute_gfr_ml_min"] = round(agfr, 1)
    patient = m.Patient(weight_kg=args.weight, creatinine=flag_creatinine(args))
    role = m.ExamRole(route=route, purpose="dose command", agents=[agent.id], catheter_study=catheter,
                      renal_exposure=m.RenalExposure.second_pass)
    out["dose_limits"] = _dose_limits([(role, block)], patient, k.policy, agfr).model_dump(mode="json")
    out.update(policy=k.policy.id, policy_version=k.policy_version, knowledge_version=k.version)
    return out


def check_flags(args: argparse.Namespace) -> None:
    """Every numeric flag in its range, and the choice flags among their values."""
    for attr, flag, lo, hi, unit in _FLAG_RANGES:
        value = getattr(args, attr, None)
        if value is not None and not (lo <= value <= hi):
            raise out_of_range(flag, value, lo, hi, unit)
    if args.site is not None and args.site not in SITES:
        raise CaseError(f"--site: {args.site!r} is not allowed; allowed: {', '.join(SITES)}", field="--site")
    if (args.gauge is None) != (args.site is None):
        raise CaseError("--gauge/--site: give both or neither; allowed: --gauge 14-24 with --site "
                        + "|".join(SITES), field="--gauge")
    if args.unit not in ("mg/dL", "umol/L"):
        raise CaseError(f"--unit: {args.unit!r} is not allowed; allowed: mg/dL, umol/L", field="--unit")
    if args.route not in {r.value for r in m.INTRAVASCULAR}:
        raise CaseError(f"--route: {args.route!r} is not allowed; allowed: intravenous, intra_arterial",
                        field="--route")


def flag_agent(k: Any, agent_id: str) -> m.Agent:
    """The ``--agent``: a known iodinated agent with strengths in mg I/mL."""
    agent = k.agents.get(agent_id)
    if agent is None:
        raise CaseError(f"--agent: {agent_id!r} is not a known agent; allowed: the ids of `contrast-aid agents`",
                        field="--agent")
    if agent.family is not m.Family.iodinated or not mg_i_strengths(agent):
        raise CaseError(f"--agent: {agent_id!r} is not an iodinated agent with strengths in mg I/mL; allowed: "
                        "an iodinated agent such as iohexol", field="--agent")
    return agent


def flag_protocol(k: Any, args: argparse.Namespace) -> tuple[m.DoseProtocol | None, m.Route, bool]:
    """The protocol (from ``--exam`` and/or the protocol flags), the route and whether it is a catheter study."""
    route = m.Route(args.route)
    protocol = None
    catheter = bool(args.catheter_study)
    if args.exam:
        exam = k.exams.get(args.exam)
        if exam is None:
            raise CaseError(f"--exam: {args.exam!r} is not a known exam; allowed: the ids of `contrast-aid exams`",
                            field="--exam")
        role = next((r for r in exam.roles if r.route in m.INTRAVASCULAR), None)
        if role is None:
            raise CaseError(f"--exam: {args.exam!r} has no intravascular role; allowed: an exam with an "
                            "intravenous or intra-arterial role", field="--exam")
        protocol, route, catheter = role.protocol, role.route, catheter or role.catheter_study
    own = {k2: v for k2, v in dict(iodine_g_per_kg=args.g_per_kg, fixed_volume_ml=args.fixed_volume,
                                   max_volume_ml=args.max_volume, scan_duration_s=args.scan_duration,
                                   duration_offset_s=args.offset).items() if v is not None}
    if protocol is None and args.flow is None and not own and args.volume is not None:
        return None, route, catheter  # a hand injection of a planned volume (catheter study): no rate
    if own or protocol is None:
        if args.flow is None and protocol is None:
            raise CaseError("--flow: missing; allowed: a flow in mL/s (0.1-10), or --exam with a protocol, or "
                            "--volume alone for a hand injection", field="--flow")
        base = protocol.model_dump() if protocol else {}
        base.update(own)
        if args.flow is not None:
            base["flow_ml_s"] = args.flow
        protocol = m.DoseProtocol.model_validate(base)  # every value was range-checked above
    return protocol, route, catheter


def flag_creatinine(args: argparse.Namespace) -> m.Creatinine | None:
    """``--creatinine`` with ``--unit``, in the equations' range (for the Cigarroa limit)."""
    if args.creatinine is None:
        return None
    lo, hi = (kidney.creatinine_from_mg_dl(b, args.unit) for b in kidney.CREATININE_MG_DL_RANGE)
    if not (lo <= args.creatinine <= hi):
        raise out_of_range("--creatinine", args.creatinine, round(lo, 2), round(hi, 2), args.unit)
    return m.Creatinine(value=args.creatinine, unit=args.unit)


def dose_command(args: argparse.Namespace) -> int:
    """Print the dose plan as JSON; returns 0. Bad input raises CaseError/RangeError (the CLI exits 2)."""
    print(json.dumps(dose_plan(args), indent=2, ensure_ascii=False))
    return 0
