"""The Dask executor against a LocalCluster on loopback: same table as local processes."""

from __future__ import annotations

import pytest

from mdgas import sweep

distributed = pytest.importorskip("distributed")

SWEEP = """
name = "dask-check"
replicas = 2
[base.gas]
model = "ideal"
particles = 200
[base.schedule]
equilibrate = 1.0
produce = 20.0
[base.output]
frame_every = 0.0
[axes]
"gas.density" = [0.01, 0.02]
[linked.geometry]
"container.walls" = ["xyz", "z"]
"pore.width" = [0.0, 4.0]
"""


@pytest.fixture(scope="module")
def cluster():
    # Threads in this process, one worker: light on a shared 2-core machine; loopback only.
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False,
                                  protocol="tcp", host="127.0.0.1",
                                  dashboard_address=None) as c:
        yield c


def test_dask_cluster_gives_the_same_table_as_local_processes(tmp_path, cluster):
    sw = sweep.from_text(SWEEP, source="dask-check.toml")
    local = sweep.run(sw, tmp_path / "local", workers=1, progress=False)
    remote = sweep.run(sw, tmp_path / "dask", scheduler=cluster.scheduler_address,
                       progress=False)
    assert remote.ran == 8 and len(remote.complete) == 8 and len(local.complete) == 8
    assert (tmp_path / "dask" / "table.csv").read_text() == \
        (tmp_path / "local" / "table.csv").read_text()
    # Resume works the same way on the cluster: nothing left to do.
    again = sweep.run(sw, tmp_path / "dask", scheduler=cluster.scheduler_address,
                      progress=False)
    assert again.ran == 0 and again.reused == 8


def test_dask_scheduler_file_and_a_failing_point(tmp_path, cluster):
    import json
    sf = tmp_path / "scheduler.json"
    sf.write_text(json.dumps({"address": cluster.scheduler_address}))
    sw = sweep.from_text(SWEEP.replace('"gas.density" = [0.01, 0.02]',
                                       '"gas.density" = [0.01]\n"output.sample_every" = [0.5, 99.0]'),
                         source="dask-check.toml")
    res = sweep.run(sw, tmp_path / "out", scheduler_file=str(sf), progress=False)
    assert len(res.complete) == 4 and len(res.failed) == 4
    assert all("sample_every" in r["message"] for r in res.failed)


def test_unreachable_scheduler_is_a_user_error():
    from mdgas.errors import UserError
    with pytest.raises(UserError, match="cannot reach the Dask scheduler"):
        sweep.DaskExecutor("tcp://127.0.0.1:9", None, timeout=2.0)
