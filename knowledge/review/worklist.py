"""Review a worklist: every order decided under one policy and one "as of" time.

``review_rows`` is pure (no clock, no files): rows in, one result per row out, in order. Identical cases
(every column the same but ``order_id``) are decided once. ``read_worklist`` and ``write_reviewed`` do
the file work: CSV, XLSX or Parquet in; the same out, written to a temporary file in the target folder
and renamed over it (``os.replace``), so an interrupted run never leaves half a file. Cells written to
CSV/XLSX that a spreadsheet would run as a formula are prefixed with ``'``.
"""

from __future__ import annotations

import datetime as dt
import operator
import os
import tempfile
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from ..errors import ContrastAidError
from ..tables import models as m
from ..decision.engine import decide
from ..decision.department import resolve_exam
from .columns import REQUIRED, CaseBuilder, RowError

FORMATS = (".csv", ".xlsx", ".parquet")
#: the columns review adds after the input's own, in order
RESULT_COLUMNS = (
    "status", "reason", "exam_id", "planned_agent_verdict", "best_agent", "best_agent_label", "best_agent_verdict",
    "flags", "alerts", "actions", "first_action_at", "premedication_start_at", "metformin_hold_from",
    "creatinine_needed_by", "policy", "policy_version", "knowledge_version", "as_of",
)
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


class WorklistError(ContrastAidError):
    """The worklist file is unusable: missing, not a table, or required columns absent (exit 2)."""


def safe_cell(value: Any) -> Any:
    """A cell a spreadsheet will show as text, never run as a formula (OWASP: CSV injection)."""
    if isinstance(value, str) and value.startswith(_FORMULA_START):
        return "'" + value
    return value


# ----------------------------------------------------------------------------- reading
def _as_text(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        if value != value:  # NaN
            return ""
        return f"{value:g}" if value != int(value) or abs(value) < 1e15 else str(value)
    if isinstance(value, dt.datetime):
        return value.isoformat()
    if hasattr(value, "isoformat"):
        return value.isoformat()
    text = str(value)
    return "" if text in ("NaT", "nan", "<NA>", "None") else text


def read_worklist(path: str | os.PathLike) -> tuple[list[str], list[dict[str, str]]]:
    """(header, rows as column -> text). Raises WorklistError when the file is unusable."""
    import pandas as pd

    p = Path(path)
    if not p.exists():
        raise WorklistError(f"{p}: file not found")
    if p.is_dir() and p.suffix.lower() != ".parquet":
        raise WorklistError(f"{p}: is a folder, not a worklist file")
    ext = p.suffix.lower()
    if ext not in FORMATS:
        raise WorklistError(f"{p.name}: {ext or 'no extension'} is not a worklist format; allowed: "
                            f"{', '.join(FORMATS)}")
    try:
        if ext == ".csv":
            try:
                frame = pd.read_csv(p, dtype=str, keep_default_na=False, encoding="utf-8-sig")
            except UnicodeDecodeError:  # a spreadsheet's "CSV" in the Windows code page
                frame = pd.read_csv(p, dtype=str, keep_default_na=False, encoding="cp1252")
        elif ext == ".xlsx":
            frame = pd.read_excel(p, dtype=str, keep_default_na=False, engine="openpyxl")
        else:
            frame = pd.read_parquet(p)
    except ImportError as exc:
        raise WorklistError(f"{p.name}: reading {ext} needs {exc.name or 'a missing package'}; "
                            "install contrast-aid with its dependencies") from None
    except Exception as exc:  # pandas raises many types for a file that is not a table
        first = str(exc).splitlines()[0][:120] if str(exc) else type(exc).__name__
        raise WorklistError(f"{p.name}: not a readable {ext[1:].upper()} table ({first})") from None
    return frame_rows(frame, p.name)


def frame_rows(frame: Any, name: str = "worklist") -> tuple[list[str], list[dict[str, str]]]:
    header = [str(c).strip() for c in frame.columns]
    if not header or all(h.startswith("Unnamed") for h in header):
        raise WorklistError(f"{name}: no header row; allowed: a first row naming the columns ({', '.join(REQUIRED)}, …)")
    missing = [c for c in REQUIRED if c not in header]
    if missing:
        raise WorklistError(f"{name}: required column {', '.join(missing)} is missing; found: "
                            f"{', '.join(header[:12])}{' …' if len(header) > 12 else ''}")
    dup = [h for h, n in Counter(header).items() if n > 1]
    if dup:
        raise WorklistError(f"{name}: column {', '.join(dup)} appears twice")
    records = frame.to_dict("records")
    rows = [{h: _as_text(r[c]).strip() for h, c in zip(header, frame.columns)} for r in records]
    return header, rows


# ----------------------------------------------------------------------------- reviewing
def _fmt(t: dt.datetime | None) -> str:
    return t.strftime("%Y-%m-%d %H:%M") if t else ""


def summarise_decision(d: m.Decision, case: m.Case) -> dict[str, Any]:
    """The review columns of one decision (everything but status and reason)."""
    planned_verdict = best = best_label = best_verdict = ""
    flags: list[str] = []
    alerts: list[str] = []
    roles = list(d.roles)
    if case.agent is not None:  # the role the planned agent is for comes first
        roles.sort(key=lambda rd: not any(o.agent == case.agent for o in rd.options))
    if roles:
        rd = roles[0]
        # the best agent: the department's default choice for the role (first stocked option by rank)
        first = next((o for o in rd.options if o.stocked is not False), rd.options[0] if rd.options else None)
        if first is not None:
            best, best_label, best_verdict = first.agent, first.local_label or "", first.verdict.value
        planned = next((o for o in rd.options if o.agent == case.agent), None) if case.agent else None
        if planned is not None:
            planned_verdict = planned.verdict.value
            if planned.verdict.severity > 0:
                flags.append(f"planned agent {planned.verdict.value}")
            if planned.stocked is False:
                flags.append("planned agent not stocked here")
            if first is not None and first.verdict.severity < planned.verdict.severity:
                flags.append(f"better agent: {first.agent}")
    if best_verdict and best_verdict != "suitable":
        flags.append(f"best agent {best_verdict}")
    r = d.renal
    if r.hydration_indicated:
        flags.append("hydration")
    if d.premedication.indicated:
        flags.append("premedication")
    if d.metformin.hold:
        flags.append("metformin hold")
    if r.creatinine_required and (r.creatinine_stale or r.creatinine_age_days is None):
        flags.append("creatinine needed")
    elif r.creatinine_stale:
        flags.append("creatinine stale")
    for alert in getattr(d, "alerts", None) or []:  # the engine's stop / warn alerts, most severe first
        alerts.append(f"{alert.level.upper()}: {alert.text}")
        flags.append("stop" if alert.level == "stop" else "warning")
    if getattr(d, "cannot_proceed_reason", None):
        flags.append("cannot proceed as requested")
    alerts += r.warnings + d.premedication.warnings
    limits = r.dose_limits
    if limits and (limits.iodine_g_per_gfr_exceeded or limits.cigarroa_exceeded):  # not "not worked out" notes
        alerts += limits.messages
    alerts += [c for c in d.cautions if "not stocked here" in c]
    actions: list[str] = []
    times: list[dt.datetime] = []
    premed_start = d.premedication.schedule[0].at if d.premedication.schedule else None
    if d.premedication.indicated:
        actions.append(f"premedication ({d.premedication.regimen}) from {_fmt(premed_start) or 'exam time unknown'}")
        if premed_start:
            times.append(premed_start)
    if r.hydration_plan and r.hydration_plan.start_at:
        actions.append(f"hydration {r.hydration_plan.rate_ml_h:g} mL/h from {_fmt(r.hydration_plan.start_at)}")
        times.append(r.hydration_plan.start_at)
    if d.metformin.hold:
        actions.append(f"hold metformin from {_fmt(d.metformin.hold_from) or 'the exam'}; re-check kidney "
                       f"function {_fmt(d.metformin.recheck_at)}")
        if d.metformin.hold_from:
            times.append(d.metformin.hold_from)
    needed_by = None
    if "creatinine needed" in flags or "creatinine stale" in flags:
        needed_by = case.scheduled_at
        actions.append(f"creatinine needed by {_fmt(needed_by) or 'the exam'}")
        if needed_by:
            times.append(needed_by)
    return dict(
        exam_id=d.exam, planned_agent_verdict=planned_verdict, best_agent=best, best_agent_label=best_label,
        best_agent_verdict=best_verdict, flags="; ".join(dict.fromkeys(flags)), alerts=" | ".join(dict.fromkeys(alerts)),
        actions="; ".join(actions), first_action_at=_fmt(min(times)) if times else "",
        premedication_start_at=_fmt(premed_start), metformin_hold_from=_fmt(d.metformin.hold_from),
        creatinine_needed_by=_fmt(needed_by), policy=d.policy, policy_version=d.policy_version or "",
        knowledge_version=d.knowledge_version, as_of=_fmt(d.as_of))


def review_case(case_dict: dict, k: Any, builder: CaseBuilder) -> dict[str, Any]:
    """The review columns of one case dict (status ok/flagged, or rejected with the reason)."""
    try:
        case = builder.validate(case_dict)
        d = decide(case, k)
    except RowError as exc:
        return _rejected(str(exc), k, case_dict)
    except ContrastAidError as exc:  # named by the error's field, never by parsing its text
        field = exc.field or ""
        column = ("planned_agent" if field == "agent" else "prior_reactions"
                  if field.startswith("patient.prior_reactions") else field if field in ("exam", "scheduled_at",
                                                                                      "as_of") else None)
        msg = exc.at("", rename={field: f"column {column}"}).message if column else exc.message
        return _rejected(msg, k, case_dict)
    out = summarise_decision(d, case)
    out["status"] = "flagged" if out["flags"] or out["alerts"] else "ok"
    out["reason"] = ""
    return out


def _rejected(reason: str, k: Any, case_dict: dict) -> dict[str, Any]:
    out = {c: "" for c in RESULT_COLUMNS}
    out.update(status="rejected", reason=reason, policy=k.policy.id, policy_version=k.policy_version,
               knowledge_version=k.version, as_of=str(case_dict.get("as_of", "")).replace("T", " ")[:16])
    return out


@dataclass
class Review:
    """The reviewed list: the input header and rows with the result columns, and what was seen."""

    header: list[str]
    rows: list[dict[str, Any]]
    ignored_columns: list[str] = field(default_factory=list)
    unique_cases: int = 0

    @property
    def columns(self) -> list[str]:
        return self.header + [c for c in RESULT_COLUMNS if c not in self.header]

    def counts(self) -> Counter:
        return Counter(r["status"] for r in self.rows)

    def exit_code(self) -> int:
        return 1 if any(r["status"] == "rejected" for r in self.rows) else 0


def review_rows(header: list[str], rows: list[dict[str, str]], k: Any, as_of: dt.datetime,
                progress: Callable[[int], None] | None = None,
                decide_many: Callable[[list[dict]], list[dict]] | None = None) -> Review:
    """Review every row in order. ``as_of`` is the list's "now" (the caller reads any clock).

    ``decide_many`` (optional) decides a batch of unique case dicts, e.g. in a process pool."""
    builder = CaseBuilder()
    used, ignored = builder.known(header)
    read = [c for c in used if c != "order_id"]
    stamp = as_of.isoformat()
    getter = operator.itemgetter(*read) if len(read) > 1 else None

    def pick(row: dict) -> tuple:
        if getter is not None:
            try:
                return getter(row)
            except KeyError:  # a row without some columns (built by hand, not read from a file)
                pass
        return tuple(row.get(c, "") for c in read)
    keyed: list[tuple | None] = []
    unique: dict[tuple, dict] = {}
    for row in rows:
        if not row.get("exam"):
            keyed.append(None)
            continue
        key = pick(row)  # identical cases: every column read but order_id the same
        if key not in unique:
            case = builder.case_dict(row, resolve_exam(row["exam"], k))
            case["as_of"] = stamp
            unique[key] = case
        keyed.append(key)
    keys = list(unique)
    if decide_many is not None:
        results = dict(zip(keys, decide_many([unique[q] for q in keys])))
        if progress:
            progress(len(rows))
    else:
        results = {}
        step = max(1, len(keys) // 100)
        for i, q in enumerate(keys, start=1):
            results[q] = review_case(unique[q], k, builder)
            if progress and i % step == 0:
                progress(step)
        if progress and len(rows) > len(keys) - len(keys) % step:  # the rest, repeated cases included
            progress(len(rows) - (len(keys) - len(keys) % step))
    out_rows = []
    for row, key in zip(rows, keyed):
        res = results[key] if key is not None else _rejected("column exam: empty; allowed: an exam id or a "
                                                             "local procedure code", k, {"as_of": as_of.isoformat()})
        out_rows.append({**row, **res})
    return Review(header=header, rows=out_rows, ignored_columns=ignored, unique_cases=len(keys))


# ----------------------------------------------------------------------------- summary
def needs_action_before(review: Review, before: dt.datetime) -> list[dict[str, Any]]:
    """Reviewed orders with an action (premedication, hydration, metformin, creatinine) due before ``before``."""
    stamp = _fmt(before)
    return [r for r in review.rows if r.get("first_action_at") and r["first_action_at"] < stamp]


def summary_lines(review: Review, before: dt.datetime | None = None) -> list[str]:
    counts = review.counts()
    lines = [f"{len(review.rows)} orders: " + ", ".join(f"{counts.get(s, 0)} {s}" for s in ("ok", "flagged", "rejected"))]
    reasons = Counter()
    for r in review.rows:
        if r["status"] == "flagged":
            reasons.update(f for f in r["flags"].split("; ") if f)
            if r["alerts"] and not r["flags"]:
                reasons["alerts only"] += 1
        elif r["status"] == "rejected":
            reasons["rejected: " + r["reason"].split(":")[0]] += 1
    if reasons:
        lines.append("by reason: " + "; ".join(f"{n} {why}" for why, n in reasons.most_common()))
    if review.ignored_columns:
        lines.append("columns not read (passed through): " + ", ".join(review.ignored_columns))
    if before is not None:
        due = needs_action_before(review, before)
        verb = "order needs" if len(due) == 1 else "orders need"
        lines.append(f"{len(due)} {verb} action before {_fmt(before)}" + (":" if due else ""))
        for r in sorted(due, key=lambda r: r["first_action_at"]):
            lines.append(f"  {r['first_action_at']}  order {r.get('order_id', '')}: {r['actions']}")
    for r in review.rows:
        if r["status"] == "rejected":
            lines.append(f"  rejected order {r.get('order_id', '')}: {r['reason']}")
    return lines


# ----------------------------------------------------------------------------- writing
def table_of(review: Review, protect: bool) -> Any:
    import pandas as pd

    cols = review.columns
    data = [[(safe_cell(r.get(c, "")) if protect else r.get(c, "")) for c in cols] for r in review.rows]
    return pd.DataFrame(data, columns=cols, dtype=object)


def write_reviewed(review: Review, out: str | os.PathLike,
                   writer: Callable[[Any, Path, str], None] | None = None) -> Path:
    """Write the reviewed list atomically (temporary file in the same folder, then ``os.replace``)."""
    target = Path(out)
    ext = target.suffix.lower()
    if ext not in FORMATS:
        raise WorklistError(f"-o {target.name}: {ext or 'no extension'} is not an output format; allowed: "
                            f"{', '.join(FORMATS)}")
    frame = table_of(review, protect=ext != ".parquet")
    if ext == ".parquet":
        frame = frame.astype(str)
    folder = target.parent if str(target.parent) else Path(".")
    if not folder.is_dir():
        raise WorklistError(f"-o {target}: folder {folder} does not exist")
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=folder)
    except OSError as exc:
        raise WorklistError(f"-o {target}: cannot write in {folder} ({exc.strerror})") from None
    os.close(fd)
    try:
        (writer or _write)(frame, Path(tmp), ext)
        os.replace(tmp, target)
    except BaseException as exc:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        if isinstance(exc, OSError):
            raise WorklistError(f"-o {target}: not written ({exc.strerror or exc}); nothing was changed") from None
        raise
    return target


def _write(frame: Any, path: Path, ext: str) -> None:
    if ext == ".csv":
        frame.to_csv(path, index=False, encoding="utf-8")
    elif ext == ".xlsx":
        frame.to_excel(path, index=False, engine="openpyxl")
    else:
        frame.to_parquet(path, index=False)
    with open(path, "rb+") as fh:
        os.fsync(fh.fileno())

