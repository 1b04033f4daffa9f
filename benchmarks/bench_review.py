"""Benchmark of worklist review (issue 12). Prints figures; asserts nothing.

Targets: a 20,000-row list reviewed at >= 5,000 orders/s including process start (the command
``contrast-aid review`` end to end), and >= 20,000 orders/s in-process for a 100,000-row list
(``review_rows``). Each figure is printed beside a plain per-row loop over ``decide`` on the same rows (the
ratio is review / loop).

Two kinds of list (benchmarks/worklist_gen.py, invented orders):
- "realistic": every order a different patient (ages, weights, creatinine, sample dates and exam times
  all drawn), so almost every row is a distinct case; the review decides the first order of each class in
  full and works out the others' numbers per order (knowledge/review/fast.py);
- "repeating": the same number of rows drawn from 2,000 distinct cases (an audit of a standard protocol,
  or a list exported with repeated rows), where identical rows are reviewed once.

The machine is shared, so every figure is printed with the load average (1 min) when it was taken, and
beside each wall-clock rate the orders per CPU-second (this process and its workers): the rate an otherwise
idle core would give. ``workers=2`` splits the distinct rows over two processes (what ``contrast-aid review``
does by default on a 2-core machine): it pays only when a second core is free.

Run: python benchmarks/bench_review.py [--quick] [--repeat N]
"""

from __future__ import annotations

import csv
import datetime as dt
import os
import random
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from benchmarks.worklist_gen import HEADER, make_rows  # noqa: E402
from knowledge.decision.engine import decide  # noqa: E402
from knowledge.review import worklist as wl  # noqa: E402
from knowledge.review.columns import CaseBuilder  # noqa: E402
from knowledge.review.scale import pool_reviewer  # noqa: E402
from knowledge.tables.loader import load_knowledge  # noqa: E402

OVERLAY = ROOT / "examples" / "department-overlay.yaml"
AS_OF = dt.datetime(2026, 12, 1, 16, 0)


def load() -> str:
    return f"load {os.getloadavg()[0]:.1f}"


def repeating(n: int, distinct: int = 2000, seed: int = 7) -> list[list[str]]:
    pool = make_rows(distinct, seed=seed)
    rnd = random.Random(seed)
    rows = []
    for i in range(n):
        r = list(rnd.choice(pool))
        r[0] = f"ORD-{i:07d}"
        rows.append(r)
    return rows


def plain_loop_rate(rows: list[list[str]], k, limit: int) -> tuple[float, float]:
    """Orders/s of a plain loop (wall, CPU): build each row's case and call decide, no caching, one process."""
    b = CaseBuilder()
    sample = [dict(zip(HEADER, r)) for r in rows[:limit]]
    t, c = time.perf_counter(), time.process_time()
    for row in sample:
        case = b.case_dict(row, row["exam"])
        case["as_of"] = AS_OF.isoformat()
        try:
            decide(b.validate(case), k)
        except Exception:  # noqa: BLE001 - rejected rows count as reviewed too
            pass
    return len(sample) / (time.perf_counter() - t), len(sample) / (time.process_time() - c)


def in_process(rows: list[list[str]], k, workers: int) -> tuple[float, float, wl.Review]:
    """(orders/s wall, orders per CPU-second of this process and its workers, the review)."""
    dict_rows = [dict(zip(HEADER, r)) for r in rows]
    many = pool_reviewer(workers, min_rows=1) if workers > 1 else None
    t, c, ch = time.perf_counter(), time.process_time(), _children_cpu()
    review = wl.review_rows(HEADER, dict_rows, k, AS_OF, review_many=many)
    cpu = time.process_time() - c + _children_cpu() - ch
    return len(rows) / (time.perf_counter() - t), len(rows) / cpu, review


def _children_cpu() -> float:
    use = resource.getrusage(resource.RUSAGE_CHILDREN)
    return use.ru_utime + use.ru_stime


def end_to_end(rows: list[list[str]], workers: int) -> tuple[float, float]:
    with tempfile.TemporaryDirectory() as folder:
        src = Path(folder) / "list.csv"
        with src.open("w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            w.writerow(HEADER)
            w.writerows(rows)
        cmd = [sys.executable, "-m", "knowledge", "review", str(src), "-o", str(Path(folder) / "out.csv"),
               "--policy", str(OVERLAY), "--as-of", AS_OF.isoformat(), "-q", "--workers", str(workers)]
        t, ch = time.perf_counter(), _children_cpu()
        proc = subprocess.run(cmd, capture_output=True, text=True, cwd=ROOT)
        elapsed, cpu = time.perf_counter() - t, _children_cpu() - ch
        if proc.returncode not in (0, 1):
            raise SystemExit(f"review failed: {proc.stderr}")
    return len(rows) / elapsed, len(rows) / cpu


def bench_kind(kind: str, make, k, n_cli: int, n_big: int, repeat: int) -> None:
    small, big = make(n_cli), make(n_big)
    loop, loop_cpu = plain_loop_rate(big, k, 3000)
    print(f"\n{kind} list; plain per-row loop over decide: {loop:,.0f} orders/s ({loop_cpu:,.0f} per CPU-second; "
          f"{load()})")
    for _ in range(repeat):
        for workers in (1, 2):
            rate, cpu = end_to_end(small, workers)
            print(f"  {n_cli:,} rows, `contrast-aid review` incl. process start, workers={workers}: "
                  f"{rate:,.0f} orders/s (target 5,000; x{rate / loop:.1f} the loop; {cpu:,.0f} per CPU-second; "
                  f"{load()})")
    for _ in range(repeat):
        for workers in (1, 2):
            rate, cpu, review = in_process(big, k, workers)
            print(f"  {n_big:,} rows in-process, workers={workers}: {rate:,.0f} orders/s (target 20,000; "
                  f"x{rate / loop:.1f} the loop; {cpu:,.0f} per CPU-second; {review.unique_cases:,} distinct rows, "
                  f"{review.decided:,} decided in full; {load()})")


def main() -> None:
    quick = "--quick" in sys.argv
    repeat = int(sys.argv[sys.argv.index("--repeat") + 1]) if "--repeat" in sys.argv else 1
    n_cli, n_big = (4000, 10000) if quick else (20000, 100000)
    k = load_knowledge(policy=OVERLAY)
    print(f"cores: {os.cpu_count()}; {load()} (the machine is shared: figures vary)")
    for kind, make in (("realistic", make_rows), ("repeating", repeating)):
        bench_kind(kind, make, k, n_cli, n_big, repeat)


if __name__ == "__main__":
    main()
