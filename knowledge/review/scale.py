"""Reviewing many orders at once: a process pool on one machine, or a Dask cluster over Parquet.

``decide`` is pure, so orders are independent. Both paths run :func:`review_rows` on pieces of the list
and give output identical to the in-process run (same rows, same order, same cells).
"""

from __future__ import annotations

import datetime as dt
import multiprocessing
import os
import tempfile
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path
from typing import Any, Callable

from .columns import CaseBuilder
from .fast import outcome
from .worklist import RESULT_COLUMNS, Review, WorklistError, frame_rows, review_rows, table_of

#: below this many distinct cases a pool costs more than it saves (measured: benchmarks/bench_review.py)
POOL_MIN_CASES = 4000


class _Worker:
    """The knowledge a pool worker process decides with (inherited by fork, one per process)."""

    knowledge: Any = None
    builder: CaseBuilder | None = None


def _init(k: Any) -> None:
    _Worker.knowledge, _Worker.builder = k, CaseBuilder()


def _chunk(cases: list[dict]) -> list[tuple]:
    return [outcome(c, _Worker.knowledge, _Worker.builder) for c in cases]


def pool_decider(k: Any, workers: int | None = None, chunk: int = 1000,
                 min_cases: int = POOL_MIN_CASES) -> Callable[[list[dict]], list[dict]]:
    """A ``decide_many`` for :func:`review_rows` that spreads the cases it must decide in full (the first order
    of every class) over worker processes; each gives :func:`knowledge.review.fast.outcome`."""
    n = workers or min(2, os.cpu_count() or 1)

    def decide_many(cases: list[dict]) -> list[tuple]:
        if n < 2 or len(cases) < min_cases or "fork" not in multiprocessing.get_all_start_methods():
            builder = CaseBuilder()
            return [outcome(c, k, builder) for c in cases]
        ctx = multiprocessing.get_context("fork")  # workers inherit the loaded knowledge
        parts = [cases[i:i + chunk] for i in range(0, len(cases), chunk)]
        with ProcessPoolExecutor(n, mp_context=ctx, initializer=_init, initargs=(k,)) as ex:
            return [r for part in ex.map(_chunk, parts) for r in part]

    return decide_many


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
