"""The worklist tab: upload tomorrow's list, see the orders that need attention, open one as a full
decision in the main view, download the reviewed file.

All the reviewing is ``knowledge.review.worklist``; this module only collects the file and shows the
result. Test hooks (CSS classes): ``ca-worklist`` (the tab), ``ca-worklist-upload``,
``ca-worklist-summary``, ``ca-worklist-filter``, ``ca-worklist-status``, ``ca-worklist-sort``,
``ca-worklist-table``, ``ca-worklist-open`` (order picker and button), ``ca-worklist-download``,
``ca-worklist-error``, ``ca-worklist-progress``.
"""

from __future__ import annotations

import base64
import datetime as dt
import html
import io
import tempfile
from pathlib import Path
from typing import Any, Callable

import ipywidgets as w
import traitlets

from knowledge.errors import ContrastAidError
from knowledge.tables import models as m
from knowledge.review.columns import CaseBuilder
from knowledge.review.worklist import (FORMATS, Review, read_worklist, review_rows, summary_lines, table_of)
from knowledge.decision.department import resolve_exam

#: uploads above this are refused with a message (the page's websocket carries the whole file)
MAX_UPLOAD_BYTES = 8 * 1024 * 1024
#: rows drawn in the table at once (filter to see others; the download has every row)
SHOWN_ROWS = 200
TABLE_COLUMNS = ("order_id", "exam", "status", "planned_agent", "planned_agent_verdict", "best_agent",
                 "best_agent_verdict", "flags", "reason", "first_action_at", "actions")
STATUS_CHOICES = (("Flagged and rejected", "attention"), ("All orders", "all"), ("Flagged", "flagged"),
                  ("Rejected", "rejected"), ("Reviewed, nothing to do", "ok"))


class WorklistTab(w.VBox):
    """Review a whole list. ``open_case(case_dict)`` shows one order in the main view."""

    review = traitlets.Instance(Review, allow_none=True)
    error = traitlets.Unicode("")

    def __init__(self, knowledge: Any, as_of: Callable[[], dt.datetime],
                 open_case: Callable[[dict], None], **kwargs: Any):
        super().__init__(**kwargs)
        self.add_class("ca-worklist")
        self._knowledge = knowledge
        self._as_of = as_of
        self._open_case = open_case
        self._builder = CaseBuilder()
        self._name = "worklist.csv"
        self._build_file_controls()
        self._build_view_controls()
        self._observe_controls()
        hint = w.HTML(
            f"<div class='ca-hint'>One order a row: <code>order_id</code>, <code>exam</code> (exam id or local code), "
            "the case fields (see examples/worklist.csv). CSV, XLSX or Parquet, up to "
            f"{MAX_UPLOAD_BYTES // (1024 * 1024)} MB; longer lists: <code>contrast-aid review</code>. Times are "
            "worked out as of the main view's “Times as of”.</div>")
        self.children = [hint, w.HBox([self.upload, self.progress]), self.message, self.before, self.summary,
                         w.HBox([self.status, self.filter]), w.HBox([self.sort, self.descending]),
                         self.table, w.HBox([self.pick, self.open_button]), self.download]

    def _build_file_controls(self) -> None:
        """The upload, its progress bar, the message line, the summary and the 'Action before' time."""
        self.upload = w.FileUpload(accept=",".join(FORMATS), multiple=False, description="Upload a list")
        self.upload.add_class("ca-worklist-upload")
        self.progress = w.IntProgress(value=0, min=0, max=1, description="Reviewing",
                                      layout=w.Layout(visibility="hidden"))
        self.progress.add_class("ca-worklist-progress")
        self.message = w.HTML("")
        self.message.add_class("ca-worklist-error")
        self.summary = w.HTML("")
        self.summary.add_class("ca-worklist-summary")
        self.before = w.Text(placeholder="YYYY-MM-DD HH:MM (default: 24 h after 'as of')",
                             description="Action before")
        self.before.add_class("ca-worklist-before")
        self._reviewed_as_of: dt.datetime | None = None

    def _build_view_controls(self) -> None:
        """Status, filter and sort of the table, the table, the order picker and the download link."""
        self.status = w.Dropdown(options=STATUS_CHOICES, value="attention", description="Show")
        self.status.add_class("ca-worklist-status")
        self.filter = w.Text(placeholder="filter: order, exam, agent, flag…", description="Find")
        self.filter.add_class("ca-worklist-filter")
        self.sort = w.Dropdown(options=[("Order in the list", "")] + [(c, c) for c in TABLE_COLUMNS[:-1]],
                               value="", description="Sort by")
        self.sort.add_class("ca-worklist-sort")
        self.descending = w.Checkbox(value=False, description="descending", indent=False)
        self.table = w.HTML("")
        self.table.add_class("ca-worklist-table")
        self.pick = w.Dropdown(options=[], description="Order")
        self.open_button = w.Button(description="Open in the main view", disabled=True)
        self.open_button.add_class("ca-worklist-open")
        self.pick.add_class("ca-worklist-open")
        self.download = w.HTML("")
        self.download.add_class("ca-worklist-download")

    def _observe_controls(self) -> None:
        self.upload.observe(self._on_upload, "value")
        self.before.observe(self._on_before, "value")
        for control in (self.status, self.sort, self.descending):
            control.observe(self._on_view, "value")
        self.filter.observe(self._on_view, "value")
        self.open_button.on_click(self._on_open)

    # ---- input
    def _on_upload(self, change: dict) -> None:
        files = change["new"]
        if not files:
            return
        f = files[0]
        self.load_bytes(f["name"], bytes(f["content"]), int(f.get("size") or len(f["content"])))

    def load_bytes(self, name: str, content: bytes, size: int | None = None) -> Review | None:
        """Review an uploaded file (``name`` gives its format). Shows and returns the review, or None."""
        size = len(content) if size is None else size
        self.error = ""
        if size > MAX_UPLOAD_BYTES:
            return self._fail(f"{name}: {size / 1_048_576:.1f} MB is over the {MAX_UPLOAD_BYTES // 1_048_576} MB "
                              "limit of this page; review it with `contrast-aid review FILE` instead")
        safe = Path(name).name or "worklist.csv"
        with tempfile.TemporaryDirectory() as folder:
            path = Path(folder) / safe
            path.write_bytes(content)
            try:
                header, rows = read_worklist(path)
            except ContrastAidError as exc:
                return self._fail(exc.message)
        self._name = safe
        self.progress.max = max(1, len(rows))
        self.progress.value = 0
        self.progress.layout.visibility = "visible"

        def tick(n: int) -> None:
            self.progress.value = min(self.progress.max, self.progress.value + n)

        as_of = self._as_of()
        review = review_rows(header, rows, self._knowledge, as_of, progress=tick)
        self.progress.value = self.progress.max
        self.progress.layout.visibility = "hidden"
        self.message.value = ""
        self.review = review
        self._show_summary(review, as_of)
        self._show_download(review)
        self._on_view()
        return review

    def _fail(self, message: str) -> None:
        self.error = message
        self.message.value = f"<div class='ca-error'>{html.escape(message)}</div>"
        return None

    # ---- output
    def _on_before(self, change: dict) -> None:
        if self.review is not None and self._reviewed_as_of is not None:
            self._show_summary(self.review, self._reviewed_as_of)

    def before_time(self, as_of: dt.datetime) -> dt.datetime:
        """The "needs action before" time: the field's, else 24 h after the review's as-of time."""
        text = self.before.value.strip()
        try:
            return dt.datetime.fromisoformat(text) if text else as_of + dt.timedelta(hours=24)
        except ValueError:
            return as_of + dt.timedelta(hours=24)

    def _show_summary(self, review: Review, as_of: dt.datetime) -> None:
        k = self._knowledge
        self._reviewed_as_of = as_of
        lines = summary_lines(review, self.before_time(as_of))
        head = (f"Reviewed as of {as_of:%Y-%m-%d %H:%M} · policy {html.escape(k.policy.id)} ({k.policy_version}) · "
                f"knowledge {k.version}")
        body = "".join(f"<div>{html.escape(line)}</div>" for line in lines)
        self.summary.value = f"<div class='ca-hint'>{head}</div>{body}"

    def _show_download(self, review: Review) -> None:
        frame = table_of(review, protect=True)
        buf = io.StringIO()
        frame.to_csv(buf, index=False)
        data = base64.b64encode(buf.getvalue().encode("utf-8")).decode("ascii")
        name = html.escape(Path(self._name).stem + ".reviewed.csv")
        self.download.value = (f"<a download='{name}' href='data:text/csv;base64,{data}'>"
                               f"Download the reviewed list ({len(review.rows)} orders, CSV)</a>")

    def visible_rows(self) -> list[dict]:
        """The rows the table shows now: status choice, then the filter text, then the sort."""
        if self.review is None:
            return []
        rows = list(self.review.rows)
        choice = self.status.value
        if choice == "attention":
            rows = [r for r in rows if r["status"] in ("flagged", "rejected")]
        elif choice != "all":
            rows = [r for r in rows if r["status"] == choice]
        needle = self.filter.value.strip().lower()
        if needle:
            rows = [r for r in rows if any(needle in str(r.get(c, "")).lower() for c in TABLE_COLUMNS)]
        if self.sort.value:
            rows.sort(key=lambda r: str(r.get(self.sort.value, "")), reverse=self.descending.value)
        elif self.descending.value:
            rows.reverse()
        return rows

    def _on_view(self, change: dict | None = None) -> None:
        rows = self.visible_rows()
        head = "".join(f"<th>{html.escape(c)}</th>" for c in TABLE_COLUMNS)
        body = []
        for r in rows[:SHOWN_ROWS]:
            cells = "".join(f"<td>{html.escape(str(r.get(c, '')))}</td>" for c in TABLE_COLUMNS)
            body.append(f"<tr class='ca-worklist-{html.escape(r['status'])}' data-order='"
                        f"{html.escape(str(r.get('order_id', '')))}'>{cells}</tr>")
        more = (f"<div class='ca-hint'>{len(rows) - SHOWN_ROWS} more rows: narrow the filter, or download the "
                "list</div>") if len(rows) > SHOWN_ROWS else ""
        count = f"<div class='ca-hint'>{len(rows)} orders shown</div>" if self.review is not None else ""
        self.table.value = (f"{count}<div style='max-height:360px;overflow:auto'><table class='ca-table'>"
                            f"<thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table></div>{more}"
                            if self.review is not None else "")
        openable = [(f"{r.get('order_id', '')} · {r.get('exam', '')} · {r['status']}", i)
                    for i, r in enumerate(self.review.rows if self.review else []) if r in rows[:SHOWN_ROWS]
                    and r["status"] != "rejected"]
        self.pick.options = openable
        self.open_button.disabled = not openable

    def _on_open(self, _button: Any = None) -> None:
        if self.review is None or self.pick.value is None:
            return
        self.open_row(self.pick.value)

    def open_row(self, index: int) -> dict:
        """Show row ``index`` of the review as a full decision in the main view; returns its case dict."""
        row = self.review.rows[index]
        case = self._builder.case_dict(row, resolve_exam(row["exam"], self._knowledge))
        case["as_of"] = self._as_of().isoformat(timespec="minutes")
        self._open_case(case)
        return case


def form_values(case: dict) -> tuple[m.Case, dict]:
    """A reviewed order as the main view's form values: every patient field, defaults included, so
    nothing of the order shown before lingers."""
    parsed = m.Case.model_validate(case)
    full = parsed.patient.model_dump(mode="json")
    patient = {k: ("" if v is None else v) for k, v in full.items()
               if k not in ("creatinine", "iv_access", "prior_reactions")}
    patient["creatinine"] = full["creatinine"] or {"value": "", "unit": "mg/dL"}
    patient["prior_reactions"] = full["prior_reactions"]
    if full["iv_access"]:
        patient["iv_access"] = full["iv_access"]
    return parsed, patient


def worklist_section(app: Any) -> w.Accordion:
    """The worklist tab as a closed section of the dashboard ``app`` (a ContrastAidApp)."""
    def as_of() -> dt.datetime:
        text = app.exam.case_part().get("as_of")
        try:
            return dt.datetime.fromisoformat(text)
        except (TypeError, ValueError):
            return app.exam._clock()

    def open_case(case: dict) -> None:
        parsed, patient = form_values(case)
        app.link_notes = []
        app.exam.set_exam(parsed.exam)
        agents = [v for _, v in app.exam.agent.options]
        app.exam.agent.value = parsed.agent if parsed.agent in agents else ""
        app.exam.scheduled.value = parsed.scheduled_at.strftime("%Y-%m-%d %H:%M") if parsed.scheduled_at else ""
        app.patient.set_patient(patient)
        app.recompute()

    tab = WorklistTab(app.knowledge, as_of, open_case)
    app.worklist = tab
    box = w.Accordion(children=[tab], selected_index=None)
    box.set_title(0, "Worklist: review a list of orders")
    return box
