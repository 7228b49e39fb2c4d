"""``workbook-tools batch --scheduler``: the same per-file work on a Dask distributed cluster.

The cluster is Dask's ``LocalCluster`` (two worker processes, one thread each)
on 127.0.0.1; its scheduler address goes to the command line exactly as a real
cluster's would. The summary must equal the local process pool's.
"""

from __future__ import annotations

import pytest

distributed = pytest.importorskip("distributed")

from tests.test_batch import GRID, weekly_books  # noqa: E402
from workbook_tools.cli import main  # noqa: E402


def test_cluster_summary_equals_local_pool_summary(tmp_path):
    weekly_books(tmp_path / "in")
    (tmp_path / "in" / "week-7.xlsx").write_text("not a workbook")
    local = main(["batch", str(tmp_path / "in"), "--out", str(tmp_path / "local"), "--range", GRID.range,
                  "--workers", "2"])
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None) as cluster:
        remote = main(["batch", str(tmp_path / "in"), "--out", str(tmp_path / "cluster"), "--range", GRID.range,
                       "--scheduler", cluster.scheduler_address])
    assert local == remote == 2
    local_csv = (tmp_path / "local" / "batch-summary.csv").read_text(encoding="utf-8")
    assert (tmp_path / "cluster" / "batch-summary.csv").read_text(encoding="utf-8") == local_csv
    assert sorted(p.name for p in (tmp_path / "cluster").iterdir()) == \
        sorted(p.name for p in (tmp_path / "local").iterdir())


def test_unreachable_scheduler_is_an_input_problem(tmp_path, capsys):
    weekly_books(tmp_path / "in")
    from tests.live_service import free_port

    code = main(["batch", str(tmp_path / "in"), "--out", str(tmp_path / "out"), "--range", GRID.range,
                 "--scheduler", f"tcp://127.0.0.1:{free_port()}"])
    assert code == 2
    assert "Could not reach the Dask scheduler" in capsys.readouterr().err
