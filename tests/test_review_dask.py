"""The Dask path: a worklist in partitioned Parquet reviewed on a local cluster of two worker processes
(127.0.0.1 only) gives exactly the rows of the in-process review. dask and distributed come with the
``test`` extra (the same packages as ``contrast-aid[scale]``), so this test runs in CI."""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import pytest

from knowledge.cli.main import main
from knowledge.review import worklist as wl
from knowledge.review.scale import review_dask
from knowledge.tables.loader import load_knowledge

ROOT = Path(__file__).resolve().parents[1]
SAMPLE = ROOT / "examples" / "worklist.csv"
OVERLAY = ROOT / "examples" / "department-overlay.yaml"
AS_OF = dt.datetime(2026, 12, 1, 16)


@pytest.fixture(scope="module")
def cluster():
    from distributed import LocalCluster

    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None) as c:
        yield c


@pytest.fixture()
def partitioned(tmp_path):
    import pandas as pd

    frame = pd.read_csv(SAMPLE, dtype=str, keep_default_na=False)
    big = pd.concat([frame.assign(order_id=frame.order_id + f"-{i}") for i in range(25)], ignore_index=True)
    folder = tmp_path / "orders.parquet"
    folder.mkdir()
    for n, start in enumerate(range(0, len(big), 37)):  # uneven parts, in order
        big.iloc[start:start + 37].to_parquet(folder / f"part.{n:03d}.parquet", index=False)
    return folder, big


def test_dask_review_equals_in_process(cluster, partitioned):
    folder, big = partitioned
    k = load_knowledge(policy=OVERLAY)
    header, rows = wl.frame_rows(big)
    local = wl.review_rows(header, rows, k, AS_OF)
    distributed = review_dask(folder, OVERLAY, cluster.scheduler_address, AS_OF)
    assert len(distributed.rows) == len(local.rows) == 200
    assert distributed.columns == local.columns
    assert [{c: r[c] for c in local.columns} for r in distributed.rows] == local.rows
    assert {r["status"] for r in local.rows} == {"ok", "flagged", "rejected"}


def test_dask_cli_writes_the_same_file(cluster, partitioned, tmp_path, capsys):
    folder, big = partitioned
    src = tmp_path / "big.csv"
    big.to_csv(src, index=False)
    a, b = tmp_path / "local.csv", tmp_path / "dask.csv"
    common = ["--policy", str(OVERLAY), "--as-of", "2026-12-01T16:00"]
    assert main(["review", str(src), "-o", str(a), *common]) == 1
    assert main(["review", str(folder), "-o", str(b), "--engine", "dask", "--scheduler",
                 cluster.scheduler_address, *common]) == 1
    capsys.readouterr()
    assert a.read_bytes() == b.read_bytes()


def test_dask_needs_parquet_and_a_scheduler(tmp_path, capsys):
    assert main(["review", str(SAMPLE), "--engine", "dask", "--as-of", "2026-12-01T16:00"]) == 2
    assert "--scheduler ADDRESS is needed" in capsys.readouterr().err
    assert main(["review", str(SAMPLE), "--engine", "dask", "--scheduler", "tcp://127.0.0.1:9",
                 "--as-of", "2026-12-01T16:00"]) == 2
    assert "--engine dask reads Parquet" in capsys.readouterr().err
