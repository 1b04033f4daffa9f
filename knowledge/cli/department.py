"""``contrast-aid policy check|diff`` and ``contrast-aid review``: a department's overlay and worklist.

Exit codes: 0 done; ``review`` 1 when some rows were rejected (the rest reviewed); 2 for unusable input
(a missing or malformed file, required columns absent, a bad flag value), with one line on stderr.
"""

from __future__ import annotations

import argparse
import datetime as dt
import sys
from pathlib import Path
from typing import Any

from ..errors import CaseError, ContrastAidError, KnowledgeError
from ..tables.loader import DATA_DIR, load_knowledge

#: the bundled scenario bank ``policy diff`` runs when no --cases are given (a source checkout)
SCENARIO_BANK = DATA_DIR.parent.parent / "tests" / "vectors" / "scenarios.yaml"


def parse_time(text: str, flag: str) -> dt.datetime:
    """An ISO 8601 date-time given to ``flag``. Raises CaseError naming the flag."""
    try:
        return dt.datetime.fromisoformat(text.strip())
    except ValueError:
        raise CaseError(f"{flag}: {text[:60]!r} is not a date-time; allowed: an ISO 8601 date-time such as "
                        "2026-12-01T15:00", field=flag) from None


def _as_of(args: argparse.Namespace) -> dt.datetime:
    """The run's "now": ``--as-of``, else the clock the command line was given (the machine's)."""
    return parse_time(args.as_of, "--as-of") if getattr(args, "as_of", None) else args.clock()


def provenance(k: Any) -> str:
    base = f" on {k.overlay.base}" if k.overlay is not None else ""
    return f"policy {k.policy.id}{base} ({k.policy_version}); knowledge {k.version}"


# ----------------------------------------------------------------------------- policy check
def cmd_policy_check(args: argparse.Namespace) -> int:
    from ..tables.overlay import changes

    k = load_knowledge(policy=args.file)
    out = sys.stdout
    if k.overlay is None:
        out.write(f"policy ok: {k.policy.id} is a plain policy (no base profile); {provenance(k)}\n")
        return 0
    lines = changes(k.base_policy, k.policy, k.overlay)
    out.write(f"overlay ok: {k.policy.id} ({k.policy.name}) on base {k.overlay.base} ({k.base_policy.id}); "
              f"{provenance(k)}\n")
    out.write(f"{len(lines)} changes from the base:\n" if lines else "no changes from the base\n")
    for line in lines:
        out.write(f"  {line}\n")
    return 0


# ----------------------------------------------------------------------------- policy diff
def _load_bank(path: Path) -> list[tuple[str, dict]]:
    import yaml

    try:
        data = yaml.safe_load(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise CaseError(f"{path}: the scenario bank is not in this installation; pass --cases FILE") from None
    return [(str(v["id"]), v["case"]) for v in data]


def _summary(d: Any) -> dict[str, Any]:
    """What a department acts on: per role the chosen agent and every verdict; the plan's blocks."""
    roles = {}
    seen: dict[str, int] = {}
    for rd in d.roles:
        n = seen[rd.route.value] = seen.get(rd.route.value, 0) + 1
        key = rd.route.value if n == 1 else f"{rd.route.value}#{n}"
        chosen = next((o for o in rd.options if o.chosen), None)
        roles[key] = {
            "chosen": chosen.agent if chosen else None,
            "verdicts": {o.agent: o.verdict.value for o in rd.options},
            "actions": [a for a in (chosen.actions if chosen else []) if not a.startswith("Stocked here as")],
            "strength": rd.dose.concentration_mg_i_ml if rd.dose else None,
        }
    r = d.renal
    blocks = {
        "hydration": r.hydration_indicated,
        "premedication": d.premedication.regimen if d.premedication.indicated else None,
        "metformin hold": d.metformin.hold,
        "creatinine stale": r.creatinine_stale,
    }
    return {"roles": roles, "blocks": blocks}


def diff_decisions(a: dict, b: dict) -> list[str]:
    """The changes between two decision summaries, one line each."""
    lines = []
    for role in sorted(set(a["roles"]) | set(b["roles"])):
        ra, rb = a["roles"].get(role), b["roles"].get(role)
        if ra is None or rb is None:
            continue
        if ra["chosen"] != rb["chosen"]:
            lines.append(f"{role}: chosen agent {ra['chosen']} -> {rb['chosen']}")
        for agent in ra["verdicts"]:
            va, vb = ra["verdicts"][agent], rb["verdicts"].get(agent)
            if va != vb:
                lines.append(f"{role}: {agent} verdict {va} -> {vb}")
        if ra["chosen"] == rb["chosen"]:
            added = [x for x in rb["actions"] if x not in ra["actions"]]
            gone = [x for x in ra["actions"] if x not in rb["actions"]]
            lines += [f"{role}: action added: {x}" for x in added]
            lines += [f"{role}: action dropped: {x}" for x in gone]
        if ra["strength"] != rb["strength"]:
            lines.append(f"{role}: strength {ra['strength']} -> {rb['strength']} mg I/mL")
    for name, va in a["blocks"].items():
        vb = b["blocks"][name]
        if va != vb:
            lines.append(f"{name}: {va} -> {vb}")
    return lines


def cmd_policy_diff(args: argparse.Namespace) -> int:
    k_new = load_knowledge(policy=args.file)
    if k_new.overlay is None:
        raise KnowledgeError(f"{Path(args.file).name}: not an overlay (no 'base'); allowed: a department overlay "
                             "file (see examples/department-overlay.yaml)")
    k_old = load_knowledge(policy=DATA_DIR / "policies" / f"{k_new.overlay.base}.yaml")
    if args.cases:
        cases = _worklist_cases(args, k_new)
        what = f"{len(cases)} orders of {Path(args.cases).name}"
    else:
        cases = [(i, {**c, "as_of": args.as_of} if args.as_of else c, None) for i, c in _load_bank(SCENARIO_BANK)]
        what = f"{len(cases)} scenarios of the bundled bank"
    out = sys.stdout
    out.write(f"policy diff: base {k_old.policy.id} ({k_old.policy_version}) -> {k_new.policy.id} "
              f"({k_new.policy_version}); knowledge {k_new.version}; {what}\n")
    changed = skipped = 0
    for ident, case, problem in cases:
        if problem is not None:
            out.write(f"- {ident}: skipped ({problem})\n")
        outcome = "skipped" if problem is not None else _diff_one(ident, case, k_old, k_new, out)
        changed += outcome == "changed"
        skipped += outcome == "skipped"
    out.write(f"{changed} of {len(cases)} changed, {len(cases) - changed - skipped} unchanged"
              + (f", {skipped} skipped" if skipped else "") + "\n")
    return 0


def _worklist_cases(args: argparse.Namespace, k_new) -> list[tuple[str, dict, str | None]]:
    """The orders of ``--cases`` as (order id, case, why the row cannot be read or None), read as the review
    reads them, as of ``--as-of``."""
    from ..decision.department import resolve_exam
    from ..review.columns import CaseBuilder, RowError
    from ..review.worklist import read_worklist

    header, rows = read_worklist(args.cases)
    builder = CaseBuilder()
    as_of = _as_of(args).isoformat()
    cases = []
    for row in rows:
        c = builder.case_dict(row, resolve_exam(row["exam"], k_new))  # local codes mean the same for both
        c["as_of"] = as_of
        problem = None
        try:  # the cells are text: read them as the review reads them
            c = builder.validate(c).model_dump(mode="json", exclude_unset=True)
        except (ContrastAidError, RowError) as exc:
            problem = exc.message if isinstance(exc, ContrastAidError) else str(exc)  # the review's own words
        cases.append((str(row.get("order_id", "")), c, problem))
    return cases


def _diff_one(ident: str, case: dict, k_old, k_new, out) -> str:
    """Decide one case under the base and under the overlay and write what differs; returns "changed",
    "skipped" (the base rejects it) or "unchanged"."""
    from ..decision.engine import decide
    from ..decision.department import resolve_exam

    try:
        old = decide(case, k_old)
    except ContrastAidError as exc:
        out.write(f"- {ident}: skipped ({exc.message})\n")
        return "skipped"
    try:
        new = decide({**case, "exam": resolve_exam(case["exam"], k_new)}, k_new)
    except ContrastAidError as exc:
        out.write(f"- {ident}: rejected under the overlay only ({exc.message})\n")
        return "changed"
    lines = diff_decisions(_summary(old), _summary(new))
    if not lines:
        return "unchanged"
    out.write(f"- {ident} ({case['exam']}):\n")
    for line in lines:
        out.write(f"    {line}\n")
    return "changed"


# ----------------------------------------------------------------------------- review
def _progress_bar(total: int, enabled: bool):
    if not enabled or total < 1:
        return None, None
    try:
        from tqdm import tqdm
    except ImportError:
        return None, None
    bar = tqdm(total=total, unit="case", file=sys.stderr, leave=False)
    return bar, bar.update


def _workers(text: str) -> int:
    """``--workers``: a whole number, 0 or more."""
    try:
        n = int(text)
    except ValueError:
        n = -1
    if n < 0:
        raise argparse.ArgumentTypeError(f"{text!r}; allowed: 0 (the cores, at most 2) or a number of processes")
    return n


def _pool(workers: int) -> Any:
    """The process pool ``--workers`` asks for (None: review in this process; 0: the cores, at most 2)."""
    if workers == 1:
        return None
    from ..review.scale import pool_reviewer

    return pool_reviewer(workers)


def cmd_review(args: argparse.Namespace) -> int:
    from ..review.worklist import WorklistError, read_worklist, review_rows, summary_lines, write_reviewed

    k = load_knowledge(policy=args.policy)
    as_of = _as_of(args)
    before = parse_time(args.before, "--before") if args.before else as_of + dt.timedelta(hours=24)
    src = Path(args.worklist)
    out = Path(args.output) if args.output else src.with_name(f"{src.stem}.reviewed{src.suffix or '.csv'}")
    if out.resolve() == src.resolve():
        raise WorklistError(f"-o {out}: the same file as the worklist; allowed: another file name")
    if args.engine == "dask":
        from ..review.scale import review_dask

        if not args.scheduler:
            raise WorklistError("--engine dask: --scheduler ADDRESS is needed (e.g. tcp://127.0.0.1:8786)")
        review = review_dask(src, args.policy, args.scheduler, as_of)
    else:
        header, rows = read_worklist(src)
        bar, tick = _progress_bar(len(rows), sys.stderr.isatty() and not args.quiet)
        try:
            review = review_rows(header, rows, k, as_of, progress=tick, review_many=_pool(args.workers))
        finally:
            if bar is not None:
                bar.close()
    write_reviewed(review, out)
    sys.stdout.write(f"reviewed {src.name} -> {out}; {provenance(k)}; as of {as_of:%Y-%m-%d %H:%M}\n")
    for line in summary_lines(review, before):
        sys.stdout.write(line + "\n")
    return review.exit_code()


def add_department_parsers(sub: Any, parser_class: type) -> None:
    pol = sub.add_parser("policy", help="check a department overlay, or see its clinical effect")
    psub = pol.add_subparsers(dest="policy_command", required=True, parser_class=parser_class)
    p = psub.add_parser("check", help="validate an overlay (or policy) and print what it changes from its base")
    p.add_argument("file", metavar="FILE")
    p.set_defaults(func=cmd_policy_check)
    p = psub.add_parser("diff", help="decide the scenario bank (or a worklist) under the base and the overlay, "
                                     "print what changes")
    p.add_argument("file", metavar="FILE")
    p.add_argument("--cases", metavar="WORKLIST", help="a worklist (csv, xlsx, parquet) instead of the bank")
    p.add_argument("--as-of", dest="as_of", metavar="T", help="the time to decide for (ISO 8601)")
    p.set_defaults(func=cmd_policy_diff)

    p = sub.add_parser("review", help="review a worklist (one order a row) and write the reviewed list")
    p.add_argument("worklist", metavar="WORKLIST", help="a .csv, .xlsx or .parquet file")
    p.add_argument("-o", "--output", metavar="OUT", help="reviewed file (default: WORKLIST.reviewed.EXT)")
    p.add_argument("--policy", metavar="FILE", help="a policy or department overlay YAML file")
    p.add_argument("--as-of", dest="as_of", metavar="T",
                   help="the time to review for (ISO 8601); default: this machine's clock")
    p.add_argument("--before", metavar="T", help="list the orders needing action before T (default: as-of + 24 h)")
    p.add_argument("--engine", choices=("local", "dask"), default="local")
    p.add_argument("--scheduler", metavar="ADDRESS", help="Dask scheduler address, with --engine dask")
    p.add_argument("--workers", type=_workers, default=0, metavar="N",
                   help="processes to split the distinct rows of a long list over (default 0: the machine's "
                        "cores, at most 2; 1: this process only). Lists under 4,000 distinct rows stay in this "
                        "process; see benchmarks/bench_review.py")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=cmd_review)
