"""Review a worklist: every order decided under one policy and one "as of" time.

``review_rows`` is pure (no clock, no files): rows in, one result per row out, in order. Identical cases
(every column the same but ``order_id``) are reviewed once, distinct ones by ``knowledge.review.fast`` (one
full decision per class of orders, the numbers per order: the same cells as deciding each in full).
``read_worklist`` and ``write_reviewed`` do the file work: CSV, XLSX or Parquet in; the same out, written to
a temporary file in the target folder and renamed over it (``os.replace``), so an interrupted run never
leaves half a file; a plain CSV is read and written with the ``csv`` module (pandas gives the same cells, at
the cost of importing it). Cells written to CSV/XLSX that a spreadsheet would run as a formula are prefixed
with ``'``.
"""

from __future__ import annotations

import contextlib
import csv
import datetime as dt
import gc
import io
import operator
import os
import tempfile
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from ..errors import ContrastAidError
from .columns import REQUIRED, CaseBuilder
from .fast import FastReview, rejected, review_case  # noqa: F401  (review_case: the plain path, one case)
from .summary import RESULT_COLUMNS, fmt_time, summarise_decision  # noqa: F401  (summarise_decision: one decision)

FORMATS = (".csv", ".xlsx", ".parquet")
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
    """(header, rows as column -> text). Raises WorklistError when the file is unusable.

    A plain CSV file (no quotes, every line as long as the header) is read with the ``csv`` module, which gives
    the same cells as pandas for such a file without the cost of importing pandas; anything else, pandas."""
    p = Path(path)
    if not p.exists():
        raise WorklistError(f"{p}: file not found")
    if p.is_dir() and p.suffix.lower() != ".parquet":
        raise WorklistError(f"{p}: is a folder, not a worklist file")
    ext = p.suffix.lower()
    if ext not in FORMATS:
        raise WorklistError(f"{p.name}: {ext or 'no extension'} is not a worklist format; allowed: "
                            f"{', '.join(FORMATS)}")
    plain = _plain_csv(p) if ext == ".csv" else None
    if plain is not None:
        header = _header(plain[0], p.name)
        return header, [{h: ("" if v in _NA_TEXT else v).strip() for h, v in zip(header, line)} for line in plain[1]]
    return frame_rows(_read_frame(p, ext), p.name)


def _read_frame(p: Path, ext: str) -> Any:
    try:
        import pandas as pd

        if ext == ".csv":
            try:
                return pd.read_csv(p, dtype=str, keep_default_na=False, encoding="utf-8-sig")
            except UnicodeDecodeError:  # a spreadsheet's "CSV" in the Windows code page
                return pd.read_csv(p, dtype=str, keep_default_na=False, encoding="cp1252")
        if ext == ".xlsx":
            return pd.read_excel(p, dtype=str, keep_default_na=False, engine="openpyxl")
        return pd.read_parquet(p)
    except ImportError as exc:
        raise WorklistError(f"{p.name}: reading {ext} needs {exc.name or 'a missing package'}; "
                            "install contrast-aid with its dependencies") from None
    except Exception as exc:  # pandas raises many types for a file that is not a table
        first = str(exc).splitlines()[0][:120] if str(exc) else type(exc).__name__
        raise WorklistError(f"{p.name}: not a readable {ext[1:].upper()} table ({first})") from None


#: cell texts that pandas (and so the review) reads as "not given"
_NA_TEXT = frozenset(("NaT", "nan", "<NA>", "None"))


def _plain_csv(p: Path) -> tuple[list[str], list[list[str]]] | None:
    """The raw header and lines of a plain CSV file, as pandas would split them: None unless the file is a
    regular file, decodes (UTF-8, else the Windows code page, as pandas is asked to), has no quote or NUL
    character, a header without empty or repeated names, and lines all as long as the header."""
    if not p.is_file():
        return None
    data = p.read_bytes()
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError:
        try:
            text = data.decode("cp1252")
        except UnicodeDecodeError:
            return None
    if '"' in text or "\0" in text:
        return None
    lines = list(csv.reader(io.StringIO(text, newline="")))
    if not lines or not lines[0] or "" in lines[0] or len(set(lines[0])) != len(lines[0]):
        return None
    width = len(lines[0])
    if any(len(line) != width for line in lines):
        return None
    return lines[0], lines[1:]


def _header(names: list[Any], name: str) -> list[str]:
    """The header (names without surrounding blanks), checked: named, with the required columns, each once."""
    header = [str(c).strip() for c in names]
    if not header or all(h.startswith("Unnamed") for h in header):
        raise WorklistError(f"{name}: no header row; allowed: a first row naming the columns ({', '.join(REQUIRED)}, …)")
    missing = [c for c in REQUIRED if c not in header]
    if missing:
        raise WorklistError(f"{name}: required column {', '.join(missing)} is missing; found: "
                            f"{', '.join(header[:12])}{' …' if len(header) > 12 else ''}")
    dup = [h for h, n in Counter(header).items() if n > 1]
    if dup:
        raise WorklistError(f"{name}: column {', '.join(dup)} appears twice")
    return header


def frame_rows(frame: Any, name: str = "worklist") -> tuple[list[str], list[dict[str, str]]]:
    header = _header(list(frame.columns), name)
    records = frame.to_dict("records")
    rows = [{h: _as_text(r[c]).strip() for h, c in zip(header, frame.columns)} for r in records]
    return header, rows


# ----------------------------------------------------------------------------- reviewing
_fmt = fmt_time


@dataclass
class Review:
    """The reviewed list: the input header and rows with the result columns, and what was seen."""

    header: list[str]
    rows: list[dict[str, Any]]
    ignored_columns: list[str] = field(default_factory=list)
    unique_cases: int = 0  # distinct rows (every column read but order_id)
    decided: int = 0  # rows decided in full (the first of each class, and those the fast path does not cover)

    @property
    def columns(self) -> list[str]:
        return self.header + [c for c in RESULT_COLUMNS if c not in self.header]

    def counts(self) -> Counter:
        return Counter(r["status"] for r in self.rows)

    def exit_code(self) -> int:
        return 1 if any(r["status"] == "rejected" for r in self.rows) else 0


def _distinct(rows: list[dict[str, str]], read: list[str]) -> tuple[list[tuple | None], dict[tuple, dict]]:
    """Each row's key (every column read but order_id; None: no exam) and the first row of every key."""
    getter = operator.itemgetter(*read) if len(read) > 1 else None
    keyed: list[tuple | None] = []
    unique: dict[tuple, dict] = {}
    for row in rows:
        if not row.get("exam"):
            keyed.append(None)
            continue
        key = None
        if getter is not None:
            try:
                key = getter(row)
            except KeyError:  # a row without some columns (built by hand, not read from a file)
                pass
        if key is None:
            key = tuple(row.get(c, "") for c in read)
        unique.setdefault(key, row)
        keyed.append(key)
    return keyed, unique


@contextlib.contextmanager
def _no_cycle_collection():
    """Pause the cycle collector: a review makes many small objects and almost no cycles, and the collector
    would otherwise walk every row made so far, again and again (measured: benchmarks/bench_review.py). At the
    end what the review made joins the oldest generation without a pass over it (``freeze``, then
    ``unfreeze``: a full pass over every reviewed row would cost as much as a tenth of the review); the
    collector walks it at its next full collection, as it would have anyway."""
    collecting = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if collecting:
            if gc.get_freeze_count() == 0:  # nobody else froze objects (a pre-fork server would)
                gc.freeze()
                gc.unfreeze()
            gc.enable()


def review_rows(header: list[str], rows: list[dict[str, str]], k: Any, as_of: dt.datetime,
                progress: Callable[[int], None] | None = None,
                review_many: Callable[[FastReview, list[dict]], list[dict]] | None = None) -> Review:
    """Review every row in order. ``as_of`` is the list's "now" (the caller reads any clock).

    Identical rows are reviewed once; distinct ones by :class:`knowledge.review.fast.FastReview` (one full
    decision per class of orders). ``review_many`` (optional) reviews the distinct rows with that reviewer in
    its own way, e.g. spread over processes (``scale.pool_reviewer``); it gives their cells in order."""
    builder = CaseBuilder()
    used, ignored = builder.known(header)
    read = [c for c in used if c != "order_id"]
    keyed, unique = _distinct(rows, read)
    keys = list(unique)
    fast = FastReview(k, builder, read, as_of)
    distinct = [unique[q] for q in keys]
    with _no_cycle_collection():
        results = dict(zip(keys, review_many(fast, distinct) if review_many else fast.review(distinct, progress)))
        step = max(1, len(keys) // 100)
        ticked = 0 if review_many is not None else len(keys) // step * step
        if progress and len(rows) > ticked:  # the rest, repeated rows included, so the ticks add up to the rows
            progress(len(rows) - ticked)
        empty = rejected("column exam: empty; allowed: an exam id or a local procedure code", k, as_of.isoformat())
        out_rows = [{**row, **(results[key] if key is not None else empty)} for row, key in zip(rows, keyed)]
    return Review(header=header, rows=out_rows, ignored_columns=ignored, unique_cases=len(keys),
                  decided=fast.stats["decided"])


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
def table_cells(review: Review, protect: bool) -> tuple[list[str], list[list[Any]]]:
    """(columns, rows of cells) of the reviewed list; ``protect``: cells a spreadsheet would run are text
    (:func:`safe_cell`)."""
    cols = review.columns
    if not protect:
        return cols, [[r.get(c, "") for c in cols] for r in review.rows]
    start = _FORMULA_START
    return cols, [[("'" + v if v.startswith(start) else v) if type(v) is str else safe_cell(v)
                   for v in (r.get(c, "") for c in cols)] for r in review.rows]


def table_of(review: Review, protect: bool) -> Any:
    import pandas as pd

    cols, data = table_cells(review, protect)
    return pd.DataFrame(data, columns=cols, dtype=object)


@dataclass
class Cells:
    """A reviewed list as columns and rows of cells: what a CSV file is written from (without pandas)."""

    columns: list[str]
    rows: list[list[Any]]


def write_reviewed(review: Review, out: str | os.PathLike,
                   writer: Callable[[Any, Path, str], None] | None = None) -> Path:
    """Write the reviewed list atomically (temporary file in the same folder, then ``os.replace``)."""
    target = Path(out)
    ext = target.suffix.lower()
    if ext not in FORMATS:
        raise WorklistError(f"-o {target.name}: {ext or 'no extension'} is not an output format; allowed: "
                            f"{', '.join(FORMATS)}")
    if ext == ".csv":
        frame: Any = Cells(*table_cells(review, protect=True))
    else:
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
    if ext == ".csv" and isinstance(frame, Cells):  # the csv module writes what pandas' to_csv would
        with open(path, "w", encoding="utf-8", newline="") as fh:
            out = csv.writer(fh, lineterminator=os.linesep)
            out.writerow(frame.columns)
            out.writerows(frame.rows)
    elif ext == ".csv":
        frame.to_csv(path, index=False, encoding="utf-8")
    elif ext == ".xlsx":
        frame.to_excel(path, index=False, engine="openpyxl")
    else:
        frame.to_parquet(path, index=False)
    with open(path, "rb+") as fh:
        os.fsync(fh.fileno())

