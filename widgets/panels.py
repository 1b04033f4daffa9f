"""The protocol note (copy and download) and the knowledge browser."""

from __future__ import annotations

import html
from typing import Any

import ipywidgets as w

from knowledge.tables.loader import Knowledge
from knowledge.present.report import data_uri, knowledge_tables


class ProtocolNote(w.VBox):
    """The short note to paste (plain text, at most 12 lines) with a copy button (``ca-copy-note``), the
    full note as Markdown (folded) and downloads (Markdown, HTML) and a link that reopens the case."""

    def __init__(self, **kwargs: Any):
        super().__init__(**kwargs)
        self.add_class("ca-note")
        self.short = w.HTML("")
        self.links = w.HTML("")
        self.links.add_class("ca-downloads")
        self.children = [w.HTML('<h2 class="ca-section-head">Protocol note</h2>'), self.short, self.links]
        self.markdown = ""
        self.html = ""
        self.text = ""

    def show(self, markdown: str, html_doc: str, query: str, short: str = "") -> None:
        self.markdown, self.html, self.text = markdown, html_doc, short
        e = html.escape
        self.short.value = (
            f"<pre class='ca-short-note' aria-label='Short protocol note'>{e(short)}</pre>"
            f'<button type="button" class="ca-copy-note ca-button" data-ca-copy="{e(short)}">Copy note</button> '
            "<span class='ca-copied' aria-live='polite'></span>"
            f"<details class='ca-full-note'><summary>Full note (Markdown, every source listed once)</summary>"
            f"<pre>{e(markdown)}</pre></details>")
        self.links.value = (
            f'<a class="ca-download-md" download="protocol-note.md" href="{data_uri(markdown, "text/markdown")}">'
            "download Markdown</a> · "
            f'<a class="ca-download-html" download="protocol-note.html" href="{data_uri(html_doc, "text/html")}">'
            "download HTML</a> · "
            f'<a class="ca-case-link" href="?{html.escape(query)}">link to this case (no identifiers)</a>')

    def clear(self, reason: str) -> None:
        self.markdown = self.html = self.text = ""
        self.short.value = f"<p>No note: {html.escape(reason)}</p>"
        self.links.value = ""


class KnowledgeBrowser(w.VBox):
    """The knowledge tables as a filterable view, with the knowledge version and the policy in force."""

    def __init__(self, knowledge: Knowledge, **kwargs: Any):
        super().__init__(**kwargs)
        import pandas as pd  # only when the browser is opened: pandas costs a few hundred ms to import

        self.add_class("ca-browser")
        self._frames = {name: pd.DataFrame(rows) for name, rows in knowledge_tables(knowledge).items()}
        pol = knowledge.policy
        self.header = w.HTML(
            f"<div>Knowledge version <b>{knowledge.version}</b> · policy in force <b>{html.escape(pol.name)}</b> "
            f"({pol.id}, {knowledge.policy_version}) · "
            + ", ".join(f"{n} {c}" for n, c in knowledge.counts().items()) + "</div>")
        self.table = w.Dropdown(options=list(self._frames), value="exams", description="Table",
                                style={"description_width": "initial"}, layout=w.Layout(width="200px"))
        self.filter = w.Text(placeholder="filter rows (all words must appear)", layout=w.Layout(width="320px"))
        self.count = w.HTML("")
        self.view = w.HTML("", layout=w.Layout(max_height="420px", overflow="auto", width="100%"))
        self.children = [self.header, w.HBox([self.table, self.filter, self.count]), self.view]
        self.table.observe(self._on_change, "value")
        self.filter.observe(self._on_change, "value")
        self._render()

    def rows(self):
        """The rows of the chosen table that hold every word of the filter (a pandas DataFrame)."""
        import pandas as pd

        df = self._frames[self.table.value]
        words = self.filter.value.lower().split()
        if not words or df.empty:
            return df
        hay = df.astype(str).agg(" ".join, axis=1).str.lower()
        mask = pd.Series(True, index=df.index)
        for word in words:
            mask &= hay.str.contains(word, regex=False)
        return df[mask]

    def _on_change(self, change: dict) -> None:
        self._render()

    def _render(self) -> None:
        df = self.rows()
        total = len(self._frames[self.table.value])
        self.count.value = f"<span class='ca-hint'>{len(df)} of {total} rows</span>"
        self.view.value = df.to_html(index=False, escape=True, classes="ca-table", border=0)
