"""Reviewing many orders at once: a process pool on one machine, or a Dask cluster over Parquet.

``decide`` is pure, so orders are independent. The pool splits a list's distinct rows into parts that share
no class of orders and reviews them with :class:`~knowledge.review.fast.FastReview` in forked processes; the
Dask path runs :func:`review_rows` per partition. Both give output identical to the in-process run (same
rows, same order, same cells).
"""

from __future__ import annotations

import datetime as dt
import multiprocessing
from collections import Counter
import os
import tempfile
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path
from typing import Any, Callable

from .fast import FastReview
from .worklist import RESULT_COLUMNS, Review, WorklistError, frame_rows, review_rows, table_of

#: below this many distinct rows a second process costs more than it saves (measured: benchmarks/bench_review.py)
POOL_MIN_ROWS = 4000


class _Worker:
    """What a worker process reviews (inherited by fork: the reviewer as it was, and the rows)."""

    fast: FastReview | None = None
    rows: list[dict] = []


def _review_part(indexes: list[int]) -> tuple[list[dict], list[int], Counter]:
    """Review the rows at ``indexes`` in a worker; the cells come back once per distinct result, with an index,
    and what the worker counted (rows decided in full, rows done the fast way)."""
    assert _Worker.fast is not None
    before = Counter(_Worker.fast.stats)
    results = _Worker.fast.review([_Worker.rows[i] for i in indexes])
    index: dict[int, int] = {}
    distinct: list[dict] = []
    refs = []
    for r in results:  # orders of one class with the same plans share one result object
        i = index.get(id(r))
        if i is None:
            i = index[id(r)] = len(distinct)
            distinct.append(r)
        refs.append(i)
    return distinct, refs, _Worker.fast.stats - before


def parts_of(rows: list[dict], n: int) -> list[list[int]]:
    """The rows' indexes in ``n`` parts of about equal size that share no class of orders: whole groups of
    one exam and planned agent (both in every class key), the largest first into the smallest part. A list
    with one dominant group is cut by position instead (its classes are then decided once per part)."""
    groups: dict[tuple, list[int]] = {}
    for i, row in enumerate(rows):
        groups.setdefault((row.get("exam", ""), row.get("planned_agent", "")), []).append(i)
    parts: list[list[int]] = [[] for _ in range(n)]
    for indexes in sorted(groups.values(), key=len, reverse=True):
        min(parts, key=len).extend(indexes)
    if max(len(part) for part in parts) > 1.3 * len(rows) / n:
        size = -(-len(rows) // n)
        return [list(range(i, min(i + size, len(rows)))) for i in range(0, len(rows), size)]
    return [sorted(part) for part in parts if part]


def pool_reviewer(workers: int | None = None, min_rows: int | None = None
                  ) -> Callable[[FastReview, list[dict]], list[dict]]:
    """A ``review_many`` for :func:`review_rows`: the distinct rows split into ``workers`` parts (default: the
    cores, at most 2; :func:`parts_of`), the first reviewed in this process while forked worker processes
    review the others, each with the reviewer as it was when forked. Below ``min_rows`` distinct rows (default
    :data:`POOL_MIN_ROWS`) the list is reviewed in this process only."""
    n = workers or min(2, os.cpu_count() or 1)

    def review_many(fast: FastReview, rows: list[dict]) -> list[dict]:
        small = len(rows) < (POOL_MIN_ROWS if min_rows is None else min_rows)
        if n < 2 or small or "fork" not in multiprocessing.get_all_start_methods():
            return fast.review(rows)
        parts = parts_of(rows, n)
        if len(parts) < 2:
            return fast.review(rows)
        out: list[Any] = [None] * len(rows)
        _Worker.fast, _Worker.rows = fast, rows
        try:
            with ProcessPoolExecutor(len(parts) - 1, mp_context=multiprocessing.get_context("fork")) as ex:
                futures = [ex.submit(_review_part, part) for part in parts[1:]]
                for i, result in zip(parts[0], fast.review([rows[i] for i in parts[0]])):
                    out[i] = result
                for part, future in zip(parts[1:], futures):
                    distinct, refs, counted = future.result()
                    for i, ref in zip(part, refs):
                        out[i] = distinct[ref]
                    fast.stats.update(counted)
        finally:
            _Worker.fast, _Worker.rows = None, []
        return out

    return review_many


# ----------------------------------------------------------------------------- Dask
def review_partition(frame: Any, policy_text: str | None, policy_name: str, as_of_iso: str) -> Any:
    """Review one partition (a pandas DataFrame) on a Dask worker; returns the reviewed partition."""
    from ..tables.loader import load_knowledge

    if policy_text is None:
        k = load_knowledge()
    else:
        with tempfile.TemporaryDirectory() as folder:
            path = Path(folder) / policy_name
            path.write_text(policy_text, encoding="utf-8")
            k = load_knowledge(policy=path)
    header, rows = frame_rows(frame, "partition")
    review = review_rows(header, rows, k, dt.datetime.fromisoformat(as_of_iso))
    return table_of(review, protect=False)


def review_dask(path: str | os.PathLike, policy: str | os.PathLike | None, scheduler: str,
                as_of: dt.datetime) -> Review:
    """Review a (partitioned) Parquet worklist on the Dask cluster at ``scheduler``."""
    try:
        import dask.dataframe as dd
        from distributed import Client
    except ImportError:
        raise WorklistError("--engine dask needs the optional extra: pip install 'contrast-aid[scale]'") from None
    p = Path(path)
    if p.suffix.lower() != ".parquet":
        raise WorklistError(f"{p.name}: --engine dask reads Parquet (a file or a folder of parts); "
                            "allowed: a .parquet path")
    if not p.exists():
        raise WorklistError(f"{p}: file not found")
    policy_text = Path(policy).read_text(encoding="utf-8") if policy else None
    policy_name = Path(policy).name if policy else "policy.yaml"
    try:
        client = Client(scheduler, timeout="10s")
    except (OSError, TimeoutError) as exc:
        raise WorklistError(f"--scheduler: {scheduler!r} did not answer ({exc}); allowed: the address of a "
                            "running Dask scheduler, e.g. tcp://127.0.0.1:8786") from None
    try:
        ddf = dd.read_parquet(str(p))
        header = [str(c) for c in ddf.columns]
        for c in ("order_id", "exam"):
            if c not in header:
                raise WorklistError(f"{p.name}: required column {c} is missing; found: {', '.join(header[:12])}")
        meta = {c: "object" for c in header + [c for c in RESULT_COLUMNS if c not in header]}
        out = ddf.map_partitions(review_partition, policy_text, policy_name, as_of.isoformat(), meta=meta)
        frame = client.compute(out).result()
    finally:
        client.close()
    rows = frame.to_dict("records")
    return Review(header=header, rows=rows, unique_cases=-1)
