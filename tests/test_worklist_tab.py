"""The worklist tab without a browser: review on upload, size limit, filters, sort, opening an order in
the main view, the download link. Fixed clock; invented orders (examples/worklist.csv)."""

from __future__ import annotations

import base64
import csv
import datetime as dt
import io
from pathlib import Path

from widgets.app import ContrastAidApp
from widgets.worklist import MAX_UPLOAD_BYTES

ROOT = Path(__file__).resolve().parents[1]
SAMPLE = (ROOT / "examples" / "worklist.csv").read_bytes()
OVERLAY = ROOT / "examples" / "department-overlay.yaml"


def app():
    return ContrastAidApp(policy_path=str(OVERLAY), clock=lambda: dt.datetime(2026, 12, 1, 16, 0))


def test_upload_reviews_and_summarises():
    a = app()
    tab = a.worklist
    review = tab.load_bytes("worklist.csv", SAMPLE)
    assert review.counts() == {"ok": 1, "flagged": 5, "rejected": 2}
    assert "8 orders: 1 ok, 5 flagged, 2 rejected" in tab.summary.value
    assert tab.progress.value == tab.progress.max == 8
    assert [r["order_id"] for r in tab.visible_rows()] == ["HS-1001", "HS-1002", "HS-1003", "HS-1004", "HS-1006",
                                                          "HS-1007", "HS-1008"]
    assert "4 orders need action before 2026-12-02 16:00" in tab.summary.value
    tab.before.value = "2026-12-02 00:00"  # tonight: premedication starting 22:15 (methylprednisolone 12 h)
    assert "1 order needs action before 2026-12-02 00:00" in tab.summary.value
    assert "2026-12-01 22:15  order HS-1003" in tab.summary.value
    tab.filter.value = "metformin"
    assert [r["order_id"] for r in tab.visible_rows()] == ["HS-1001", "HS-1008"]
    tab.filter.value = ""
    tab.status.value = "ok"
    assert [r["order_id"] for r in tab.visible_rows()] == ["HS-1005"]
    tab.status.value = "all"
    tab.sort.value = "first_action_at"
    tab.descending.value = True
    assert tab.visible_rows()[0]["order_id"] == "HS-1008"  # its first action is the latest (14:00)


def test_open_row_shows_the_full_decision_and_resets_the_form():
    a = app()
    tab = a.worklist
    tab.load_bytes("worklist.csv", SAMPLE)
    tab.open_row(0)  # HS-1001: local code HSCT-AP, planned iohexol, a mild reaction to iohexol
    assert a.decision.exam == "ct-abdomen-pelvis" and a.case.agent == "iohexol"
    assert a.case.patient.takes_metformin and len(a.case.patient.prior_reactions) == 1
    assert a.decision.on_call and a.decision.policy == "harbourside-radiology"
    tab.open_row(3)  # HS-1004: esophagram, perforation suspected, no metformin, no reactions
    assert a.decision.exam == "fluoro-esophagram"
    assert a.case.patient.takes_metformin is False and a.case.patient.prior_reactions == []
    assert a.case.patient.perforation_suspected is True and a.case.agent is None


def test_size_limit_and_unusable_files_have_messages():
    tab = app().worklist
    assert tab.load_bytes("big.csv", b"x", size=MAX_UPLOAD_BYTES + 1) is None
    assert tab.error == "big.csv: 8.0 MB is over the 8 MB limit of this page; review it with `contrast-aid review FILE` instead"
    assert tab.load_bytes("orders.csv", b"patient,when\nA,tomorrow\n") is None
    assert tab.error.startswith("orders.csv: required column order_id, exam is missing")
    assert "ca-error" in tab.message.value


def test_download_link_holds_the_protected_reviewed_csv():
    tab = app().worklist
    tab.load_bytes("list.csv", b"order_id,exam\n=1+1,ct-chest\n")
    href = tab.download.value.split("href='")[1].split("'")[0]
    text = base64.b64decode(href.split(",", 1)[1]).decode("utf-8")
    rows = list(csv.DictReader(io.StringIO(text)))
    assert rows[0]["order_id"] == "'=1+1" and rows[0]["status"] in ("ok", "flagged")
    assert "download='list.reviewed.csv'" in tab.download.value
