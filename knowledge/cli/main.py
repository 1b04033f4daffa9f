"""The ``contrast-aid`` command line.

Every subcommand prints its result on stdout. Bad input exits 2 with one line on stderr naming the
field, the value given and what is allowed; there is never a traceback for bad input.
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import sys
from pathlib import Path
from typing import Any, Sequence

from ..tables import models as m
from ..errors import CaseError, ContrastAidError
from .dose import add_dose_parser
from .department import add_department_parsers

EXIT_BAD_INPUT = 2


class _Parser(argparse.ArgumentParser):
    """argparse, but a usage error is one line on stderr and exit 2."""

    def error(self, message: str) -> None:  # type: ignore[override]
        sys.stderr.write(f"{self.prog}: {message} (see `{self.prog} --help`)\n")
        raise SystemExit(EXIT_BAD_INPUT)


def _knowledge(args: argparse.Namespace):
    from ..tables.loader import load_knowledge

    return load_knowledge(getattr(args, "data", None), getattr(args, "policy", None))


#: Largest case file read (bytes): a case is a few kB; /dev/zero or a 1 GB file is refused, not read for ever.
MAX_CASE_BYTES = 1_000_000
#: Most digits of a whole number in a case file (no case value needs more than a handful).
MAX_INT_DIGITS = 20


def _no_duplicates(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    """JSON object hook: a key given twice is refused (the last no longer wins silently)."""
    out: dict[str, Any] = {}
    for key, value in pairs:
        if key in out:
            raise CaseError(field=key, problem="appears twice in the same object",
                            allowed="each field once")
        out[key] = value
    return out


def _int(text: str) -> int:
    if len(text.lstrip("-")) > MAX_INT_DIGITS:
        raise CaseError(field="case", value=text, problem=f"is a number of {len(text)} digits",
                        allowed=f"at most {MAX_INT_DIGITS} digits")
    return int(text)


def _float(text: str) -> float:
    if len(text) > 100:
        raise CaseError(field="case", value=text, problem=f"is a number of {len(text)} characters",
                        allowed="at most 100 characters")
    return float(text)


def _constant(text: str) -> Any:
    raise CaseError(field="case", value=text, problem="is not a JSON number", allowed="a finite number")


def parse_case_json(text: str, where: str) -> Any:
    """JSON text of a case as Python data: duplicate keys, NaN/Infinity, 5,000-digit numbers and very
    deep nesting are each refused with one line (CaseError)."""
    try:
        return json.loads(text, object_pairs_hook=_no_duplicates, parse_int=_int, parse_float=_float,
                          parse_constant=_constant)
    except json.JSONDecodeError as exc:
        raise CaseError(f"{where}: not valid JSON at line {exc.lineno}, column {exc.colno}: {exc.msg}",
                        field=where) from None
    except RecursionError:
        raise CaseError(field=where, problem="is nested too deeply", allowed="a case object a few levels deep") from None
    except CaseError as exc:
        raise CaseError(f"{where}: {exc.message}", field=exc.field, value=exc.value, allowed=exc.allowed) from None
    except ValueError as exc:  # e.g. Python's integer-string length limit
        raise CaseError(field=where, problem=f"holds a value that cannot be read ({exc})", allowed="a JSON case") from None


def read_case_file(path: str) -> Any:
    """Read a case from a JSON file (``-`` for stdin). Raises CaseError with a one-line message.

    Only a regular file under MAX_CASE_BYTES is opened (a device or a named pipe is refused before it is
    opened, so nothing hangs); stdin is read up to the same limit."""
    from ..tables.loader import _read_text

    if path == "-":
        text = sys.stdin.read(MAX_CASE_BYTES + 1)
        if len(text) > MAX_CASE_BYTES:
            raise CaseError(field="-", problem="standard input is too big", allowed=f"at most {MAX_CASE_BYTES} bytes")
    else:
        blob = _read_text(Path(path), CaseError, MAX_CASE_BYTES)
        try:
            text = blob.decode("utf-8")
        except UnicodeDecodeError as exc:
            raise CaseError(f"{path}: not UTF-8 text (byte {exc.start + 1}); allowed: a UTF-8 JSON file",
                            field=path) from None
    return parse_case_json(text, path)


def _print_json(data: Any) -> None:
    sys.stdout.write(json.dumps(data, indent=2, ensure_ascii=False, default=str) + "\n")


# ----------------------------------------------------------------------------- subcommands
def wall_clock() -> dt.datetime:
    """The machine's local time to the minute: the command line's "now" when a case gives no as_of."""
    return dt.datetime.now().replace(second=0, microsecond=0)


def parse_as_of(text: str) -> dt.datetime:
    """``--as-of`` as an ISO 8601 date-time. Raises CaseError naming the flag."""
    try:
        return dt.datetime.fromisoformat(text.strip())
    except ValueError:
        raise CaseError(f"--as-of: {text[:60]!r} is not a date-time; allowed: an ISO 8601 date-time such as "
                        "2026-12-01T15:00", field="--as-of") from None


def with_as_of(case: Any, args: argparse.Namespace) -> Any:
    """The case with its "now" set: the case's own ``as_of``, else ``--as-of``, else the wall clock."""
    given = parse_as_of(args.as_of) if getattr(args, "as_of", None) else None
    if isinstance(case, dict) and case.get("as_of") is None:
        case = {**case, "as_of": (given or args.clock()).isoformat()}
    return case


def cmd_decide(args: argparse.Namespace) -> int:
    from ..decision.engine import decide

    k = _knowledge(args)
    case = with_as_of(read_case_file(args.case), args)
    if isinstance(case, dict) and isinstance(case.get("exam"), str):  # a local procedure code of an overlay
        from ..decision.department import resolve_exam

        case = {**case, "exam": resolve_exam(case["exam"], k)}
    decision = decide(case, k)
    _print_json(decision.model_dump(mode="json"))
    return 0


def cmd_exams(args: argparse.Namespace) -> int:
    k = _knowledge(args)
    rows = [
        {
            "id": e.id,
            "name": e.name,
            "modality": e.modality.value,
            "region": e.region,
            "contrast": e.contrast.value,
            "purpose": e.purpose,
            "routes": [r.route.value for r in e.roles],
            "notes": e.notes,
        }
        for e in k.tables.exams
    ]
    if args.json:
        _print_json(rows)
    else:
        width = max(len(r["id"]) for r in rows)
        for r in rows:
            routes = ", ".join(r["routes"]) or "no contrast"
            sys.stdout.write(f"{r['id']:<{width}}  {r['modality']:<12} {r['contrast']:<9} {r['name']} ({routes})\n")
    return 0


def cmd_agents(args: argparse.Namespace) -> int:
    k = _knowledge(args)
    rows = []
    for a in k.tables.agents:
        rows.append({
            "id": a.id,
            "name": a.name,
            "agent_class": a.agent_class.value,
            "family": a.family.value,
            "form": a.form.value,
            "osmolality_class": a.osmolality_class.value if a.osmolality_class else None,
            "ionicity": a.ionicity.value if a.ionicity else None,
            "concentrations": [f"{c.value:g} {c.unit.value}" for c in a.concentrations],
            "routes": [r.value for r in a.routes],
        })
    if args.json:
        _print_json(rows)
    else:
        width = max(len(r["id"]) for r in rows)
        for r in rows:
            osm = f"{r['osmolality_class']}-osmolar {r['ionicity'].replace('_', '-')}" if r["osmolality_class"] else ""
            sys.stdout.write(
                f"{r['id']:<{width}}  {r['agent_class']:<8} {r['family']:<9} {osm:<22} {', '.join(r['routes'])}\n"
            )
    return 0


_EGFR_FLAGS = {"patient.age_years": "--age", "patient.sex": "--sex", "patient.height_cm": "--height-cm",
               "patient.creatinine.value": "--creatinine", "patient.creatinine.unit": "--unit",
               "patient.creatinine": "--creatinine", "patient.cystatin_c_mg_l": "--cystatin-c"}


def cmd_egfr(args: argparse.Namespace) -> int:
    from ..decision.engine import parse_case, renal_block

    patient: dict[str, Any] = {
        "age_years": args.age,
        "sex": args.sex,
        "creatinine": {"value": args.creatinine, "unit": args.unit},
    }
    if args.height_cm is not None:
        patient["height_cm"] = args.height_cm
    if args.cystatin_c is not None:
        patient["cystatin_c_mg_l"] = args.cystatin_c
    try:
        case = parse_case({"exam": "none", "patient": patient})
        egfr, equation, category, note = renal_block(case.patient)
    except ContrastAidError as exc:
        flags = {**_EGFR_FLAGS, **{k.removeprefix("patient."): v for k, v in _EGFR_FLAGS.items()}}
        raise exc.at("", rename=flags) from None
    if egfr is None:
        raise CaseError("--height-cm: missing; allowed: a height in cm (the bedside Schwartz equation needs it "
                        "under 18 years)")
    result = {"egfr": round(egfr, 1), "unit": "mL/min/1.73 m2", "equation": equation, "category": category}
    if args.json:
        _print_json(result)
    else:
        sys.stdout.write(f"eGFR {egfr:.1f} mL/min/1.73 m2 ({note}); KDIGO category {category}\n")
    return 0


def cmd_knowledge_check(args: argparse.Namespace) -> int:
    k = _knowledge(args)
    c = k.counts()
    sys.stdout.write(
        f"knowledge ok: {c['exams']} exams, {c['agents']} agents, {c['rules']} rules, {c['sources']} sources; "
        f"version {k.version}; policy {k.policy.id} ({k.policy_version})\n"
    )
    if getattr(args, "lint", False):
        _write_lint(k, getattr(args, "json", False))
    return 0


def cmd_knowledge_lint(args: argparse.Namespace) -> int:
    _write_lint(_knowledge(args), args.json)
    return 0


def _write_lint(k, as_json: bool) -> None:
    from ..tables.lint import lint, patient_factors

    report = lint(k)
    if as_json:
        _print_json(report.as_dict())
        return
    out = sys.stdout.write
    out(f"rules that can never fire: {', '.join(report.never_fire) or 'none'}\n")
    if report.undecided:
        out(f"rules too large to decide: {', '.join(report.undecided)}\n")
    out(f"sources no table record cites (calculators may cite them in their docstrings): {', '.join(report.sources_never_cited) or 'none'}\n")
    out(f"agents never offered: {', '.join(report.agents_never_offered) or 'none'}\n")
    out("coverage (exam x patient factor -> the rules that consider it):\n")
    factors = patient_factors()
    for exam_id, row in report.coverage.items():
        out(f"  {exam_id}\n")
        for fact, rules in row.items():
            out(f"    {fact:<44} {', '.join(rules)}\n")
        missing = [f for f in factors if f not in row]
        if missing:
            out(f"    {'(considered by no rule)':<44} {', '.join(missing)}\n")


def cmd_knowledge_schema(args: argparse.Namespace) -> int:
    _print_json({
        "tables": m.Tables.model_json_schema(),
        "policy": m.Policy.model_json_schema(),
        "case": m.Case.model_json_schema(),
        "decision": m.Decision.model_json_schema(),
    })
    return 0


def cmd_knowledge_facts(args: argparse.Namespace) -> int:
    from ..tables.facts import catalogue_rows

    for row in catalogue_rows():
        values = f" [{row['values']}]" if row["values"] else ""
        sys.stdout.write(f"{row['fact']:<42} {row['kind']:<7} {row['scope']:<6} {row['description']}{values}\n")
    return 0


def cmd_serve(args: argparse.Namespace) -> int:
    from widgets.serve import serve  # lazy: the domain core never imports the UI

    return serve(args.port, args.policy, cull_idle_seconds=args.cull_idle_seconds,
                 cull_interval_seconds=args.cull_interval_seconds, base_url=args.base_url,
                 secure_cookies=args.secure_cookies, pool_size=args.pool_size)


# ----------------------------------------------------------------------------- parser
def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="contrast-aid", description="Decision aid for choosing a contrast agent.")
    sub = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)
    _add_case_parsers(sub)
    _add_knowledge_parsers(sub)
    _add_serve_parser(sub)
    add_dose_parser(sub)
    add_department_parsers(sub, _Parser)  # policy check|diff, review (department overlay, worklists)
    return parser


def _with_policy(p: argparse.ArgumentParser) -> argparse.ArgumentParser:
    p.add_argument("--policy", metavar="FILE", help="a local policy YAML file (default: the bundled one)")
    return p


def _add_case_parsers(sub) -> None:
    """decide, exams, agents, egfr."""
    p = _with_policy(sub.add_parser("decide", help="decide the contrast options for a case (JSON on stdout)"))
    p.add_argument("case", metavar="CASE.json", help="the case file, or - for stdin")
    p.add_argument("--as-of", dest="as_of", metavar="T",
                   help="the time to decide for (ISO 8601, e.g. 2026-12-01T15:00); default: the case's as_of, "
                        "else this machine's clock. The decision's as_of says which was used")
    p.set_defaults(func=cmd_decide)

    p = sub.add_parser("exams", help="list the exams")
    p.add_argument("--json", action="store_true")
    p.set_defaults(func=cmd_exams)

    p = sub.add_parser("agents", help="list the agents")
    p.add_argument("--json", action="store_true")
    p.set_defaults(func=cmd_agents)

    p = sub.add_parser("egfr", help="estimate GFR from creatinine")
    p.add_argument("--creatinine", type=float, required=True, metavar="V")
    p.add_argument("--unit", required=True, metavar="U", help="mg/dL or umol/L")
    p.add_argument("--age", type=float, required=True, metavar="A", help="years")
    p.add_argument("--sex", required=True, metavar="S", help="female or male")
    p.add_argument("--height-cm", type=float, metavar="H", help="needed under 18 years")
    p.add_argument("--cystatin-c", type=float, metavar="C", help="mg/L, for the creatinine-cystatin C equation")
    p.add_argument("--json", action="store_true")
    p.set_defaults(func=cmd_egfr)


def _add_knowledge_parsers(sub) -> None:
    """knowledge check|lint|schema|facts."""
    kn = sub.add_parser("knowledge", help="check the knowledge tables or print their schema")
    ksub = kn.add_subparsers(dest="knowledge_command", required=True, parser_class=_Parser)
    p = _with_policy(ksub.add_parser("check", help="validate the tables and the policy, print counts"))
    p.add_argument("--data", metavar="DIR", help="a folder of tables to check instead of the bundled one")
    p.add_argument("--lint", action="store_true", help="also print the lint (see `knowledge lint`)")
    p.set_defaults(func=cmd_knowledge_check)
    p = _with_policy(ksub.add_parser("lint", help="rules that never fire, sources never cited, agents never "
                                                  "offered, and the exam x patient factor coverage"))
    p.add_argument("--data", metavar="DIR", help="a folder of tables to lint instead of the bundled one")
    p.add_argument("--json", action="store_true")
    p.set_defaults(func=cmd_knowledge_lint)
    p = ksub.add_parser("schema", help="JSON Schema of the tables, policy, case and decision")
    p.set_defaults(func=cmd_knowledge_schema)
    p = ksub.add_parser("facts", help="the facts rule conditions may test")
    p.set_defaults(func=cmd_knowledge_facts)


def _add_serve_parser(sub) -> None:
    p = _with_policy(sub.add_parser("serve", help="serve the dashboard with Voila (prints the URL)"))
    p.add_argument("--port", type=int, default=8866, metavar="N")
    p.add_argument("--cull-idle-seconds", type=int, default=120, metavar="N",
                   help="shut a kernel down once no browser is connected and it has been idle N s (default 120)")
    p.add_argument("--cull-interval-seconds", type=int, default=30, metavar="N",
                   help="check for such kernels every N s (default 30)")
    p.add_argument("--base-url", default="/", metavar="PATH", help="serve under PATH, e.g. behind a reverse proxy")
    p.add_argument("--secure-cookies", action="store_true", help="mark cookies Secure (TLS at a reverse proxy)")
    p.add_argument("--pool-size", type=int, default=2, metavar="N",
                   help="kernels kept started ahead of page requests, so a page opens faster (default 2; 0: none)")
    p.set_defaults(func=cmd_serve)


def main(argv: Sequence[str] | None = None, clock=wall_clock) -> int:
    """Run the command line. ``clock`` gives "now" where a case has none (tests pass a fixed one)."""
    parser = build_parser()
    args = parser.parse_args(argv)
    args.clock = clock
    try:
        code = args.func(args)
        sys.stdout.flush()
        return code
    except ContrastAidError as exc:
        sys.stderr.write(f"contrast-aid: {exc.message}\n")
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        return 130
    except BrokenPipeError:
        _detach_stdout()
        return 0
    except OSError as exc:  # e.g. a full disk (/dev/full) under the output
        _detach_stdout()
        sys.stderr.write(f"contrast-aid: output: cannot be written ({exc.strerror or type(exc).__name__})\n")
        return EXIT_BAD_INPUT
    except RecursionError:
        sys.stderr.write("contrast-aid: input: nested too deeply; allowed: a case object a few levels deep\n")
        return EXIT_BAD_INPUT


def _detach_stdout() -> None:
    """Point stdout at /dev/null so the interpreter's final flush cannot fail a second time."""
    import os

    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError):
        pass


if __name__ == "__main__":
    raise SystemExit(main())
