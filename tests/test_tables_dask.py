"""Table builds on a Dask cluster: a LocalCluster of 2 worker processes stands in for one.

Skipped with a reason where dask.distributed is not installed (``pip install
'sahaboltz[dask]'``; CI installs it with the test extras)."""

from __future__ import annotations

import os
import signal
import socket
import sys
import threading
import time

import h5py
import numpy as np
import pytest

distributed = pytest.importorskip("distributed", reason="needs dask.distributed: pip install "
                                  "'sahaboltz[dask]'")

from sahaboltz.errors import InputError, TableError  # noqa: E402
from sahaboltz.faces.cli import main  # noqa: E402
from sahaboltz.tables import cache  # noqa: E402
from sahaboltz.tables.build import build_table, resume_path_for  # noqa: E402
from sahaboltz.tables.cluster import check_address  # noqa: E402
from sahaboltz.tables.hdf5 import check_table  # noqa: E402
from sahaboltz.tables.spec import TableSpec  # noqa: E402

from table_helpers import hydrogen_compute, hydrogen_saha, slow_hydrogen_compute  # noqa: E402
from test_tables import calls, small_spec  # noqa: E402
from test_tables_resume import assert_same_datasets, record  # noqa: E402


@pytest.fixture(scope="module")
def client():
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                       dashboard_address=None, silence_logs=40)
    c = distributed.Client(cluster)
    yield c
    c.close()
    cluster.close()


class _Environ(distributed.WorkerPlugin):
    """Environment variables for every worker, also one that joins (restarted) later."""

    def __init__(self, env: dict):
        self.env = env

    def setup(self, worker):
        os.environ.update(self.env)


def mixture_spec() -> TableSpec:
    """The real solver on a small grid with a composition axis (our own scenario)."""
    return TableSpec.from_mapping({
        "temperature": {"scale": "log", "min": 5000.0, "max": 20000.0, "num": 8},
        "pressure": {"scale": "log", "min": 1e2, "max": 1e5, "num": 4},
        "composition": {"abundances": {"H": 1.0, "He": 0.1, "C": 3e-4},
                        "axis": {"quantity": "metallicity", "values": [-1.0, 0.0]}},
        "physics": {"truncation": "occupation"}})


def test_dask_build_equals_local_build_bit_for_bit(client, tmp_path):
    spec = mixture_spec()
    prov = cache.compute_provenance(None, spec)  # the solver's: versions, level-data digest
    stats: dict = {}
    build_table(spec, tmp_path / "dask.h5", client=client, chunk_states=8, progress=False,
                provenance=prov, stats=stats)
    assert stats["blocks"] == stats["computed"] == 8
    build_table(spec, tmp_path / "local.h5", workers=2, chunk_states=8, progress=False,
                provenance=prov)
    check_table(tmp_path / "dask.h5", full=True)
    assert_same_datasets(tmp_path / "dask.h5", tmp_path / "local.h5")
    with h5py.File(tmp_path / "dask.h5") as f:
        assert f["fraction"].shape[1:] == (2, 8, 4)
        assert f.attrs["level_data_digest"] == prov["level_data_digest"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["dask.h5", "local.h5"]


def test_worker_killed_mid_build_has_its_blocks_recomputed(client, tmp_path):
    marker = tmp_path / "marker.txt"
    client.register_plugin(_Environ({"SBT_TEST_MARKER": str(marker), "SBT_TEST_SLEEP": "0.25"}),
                           name="sbt-env")
    spec = small_spec(nt=40, npres=25)  # 40 blocks of one temperature row
    target = tmp_path / "t.h5"
    box: dict = {}

    def run():
        try:
            build_table(spec, target, compute=slow_hydrogen_compute, client=client,
                        chunk_states=25, progress=False, stats=box.setdefault("stats", {}))
        except BaseException as exc:  # noqa: BLE001 - reported below
            box["error"] = exc

    pids = client.run(os.getpid)
    builder = threading.Thread(target=run)
    builder.start()
    deadline = time.time() + 60
    while len(calls(marker)) < 8 and time.time() < deadline:
        time.sleep(0.05)
    victim = int(calls(marker)[-1])  # a worker that is computing blocks
    assert victim in pids.values()
    os.kill(victim, signal.SIGKILL)
    killed_at = len(calls(marker))
    builder.join(timeout=120)
    assert not builder.is_alive() and "error" not in box
    assert box["stats"]["computed"] == 40
    done = calls(marker)
    # killed mid-build; every block computed (the probe, 40 blocks, and any computed twice)
    assert killed_at < 30 and len(done) >= 41
    # the blocks after the kill came from the other worker (and the restarted one)
    assert any(int(p) != victim for p in done[killed_at:])
    check_table(target, full=True)
    whole = tmp_path / "whole.h5"
    build_table(spec, whole, compute=hydrogen_compute, workers=1, chunk_states=25,
                progress=False)
    assert_same_datasets(target, whole)
    t, p = np.meshgrid(spec.temperature.array, spec.pressure.array, indexing="ij")
    with h5py.File(target) as f:
        np.testing.assert_allclose(f["fraction"][1], hydrogen_saha(t, p)["fraction_H_II"],
                                   rtol=1e-13)
    client.register_plugin(_Environ({"SBT_TEST_MARKER": "", "SBT_TEST_SLEEP": "0.15"}),
                           name="sbt-env")


def test_local_build_killed_half_way_resumes_on_the_cluster(client, tmp_path):
    import subprocess
    import sys

    from test_tables import _kill_when, _subprocess_env
    from test_tables_resume import _KILLED_BUILDER

    marker = tmp_path / "marker.txt"
    target = tmp_path / "t.h5"
    env = _subprocess_env(tmp_path, SBT_TEST_SLEEP=0.15, SBT_TEST_MARKER=marker)
    proc = subprocess.Popen([sys.executable, "-c", _KILLED_BUILDER, str(target)], env=env,
                            cwd=tmp_path)
    _kill_when(proc, lambda: len(calls(marker)) >= 6)
    done = int(np.count_nonzero(record(resume_path_for(target))))
    stats: dict = {}
    build_table(small_spec(), target, compute=slow_hydrogen_compute, client=client,
                chunk_states=100, progress=False, stats=stats)
    assert stats["resumed"] == done and stats["computed"] == 10 - done
    whole = tmp_path / "whole.h5"
    build_table(small_spec(), whole, compute=hydrogen_compute, workers=1, chunk_states=100,
                progress=False)
    assert_same_datasets(target, whole)


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_unreachable_scheduler_names_the_address_and_writes_nothing(tmp_path, monkeypatch):
    address = f"tcp://127.0.0.1:{_free_port()}"
    out = tmp_path / "out"
    with pytest.raises(TableError, match=f"cannot reach the Dask scheduler at {address}"):
        build_table(small_spec(), out / "t.h5", compute=hydrogen_compute, scheduler=address,
                    connect_timeout=1.0, progress=False)
    assert not out.exists()
    # through the cache: not even its lock file
    monkeypatch.setenv(cache.CACHE_ENV, str(tmp_path / "cache"))
    with pytest.raises(TableError, match=f"cannot reach the Dask scheduler at {address}"):
        cache.get_table(small_spec(), compute=hydrogen_compute, scheduler=address,
                        connect_timeout=1.0, progress=False)
    assert [p.name for p in (tmp_path / "cache").iterdir()] == []


@pytest.mark.parametrize("address", ["tcp://", "localhost", "tcp://host:99999",
                                     "http//host:8786", "ftp://host:8786", "missing.json"])
def test_malformed_scheduler_address_is_an_error_before_any_work(tmp_path, capsys, address):
    with pytest.raises(InputError, match="scheduler"):
        check_address(address)
    code = main(["table", "build", "--temperature", "4000,5000", "--pressure", "1e3,1e4",
                 "--compute", "table_helpers:hydrogen_compute", "--scheduler", address,
                 "-o", str(tmp_path / "t.h5")])
    assert code == 2
    assert address in capsys.readouterr().err
    assert list(tmp_path.iterdir()) == []


def test_cli_build_on_the_cluster(client, tmp_path, capsys):
    address = client.scheduler.address
    assert check_address(address.replace("tcp://", "")) == address  # tcp:// by default
    out = tmp_path / "t.h5"
    code = main(["table", "build", "--temperature", "4000:9000:6", "--pressure", "1e2:1e5:4",
                 "--fractions", "H", "--compute", "table_helpers:hydrogen_compute",
                 "--scheduler", address, "--chunk-states", "8", "--no-progress",
                 "-o", str(out)])
    assert code == 0, capsys.readouterr().err
    with h5py.File(out) as f:
        t, p = f["temperature"][()], f["gas_pressure"][()]
        tt, pp = np.meshgrid(t, p, indexing="ij")
        np.testing.assert_allclose(f["electron_density"][()],
                                   hydrogen_saha(tt, pp)["electron_density"], rtol=1e-13)


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="glibc's mallopt")
def test_malloc_thresholds_are_set_back_only_under_the_nannys_variable(monkeypatch):
    from sahaboltz.tables.cluster import tune_malloc
    monkeypatch.delenv("MALLOC_TRIM_THRESHOLD_", raising=False)
    assert tune_malloc() is False
    monkeypatch.setenv("MALLOC_TRIM_THRESHOLD_", "65536")  # what the nanny sets
    assert tune_malloc() is True  # glibc's mallopt accepts the 32 MiB threshold


_DASK_BUILDER = """
import sys
from sahaboltz.tables.build import build_table
from table_helpers import slow_hydrogen_compute
from test_tables import small_spec
build_table(small_spec(), sys.argv[1], compute=slow_hydrogen_compute, scheduler=sys.argv[2],
            chunk_states=100, progress=False)
"""


def test_killed_dask_build_resumes(client, tmp_path, monkeypatch):
    import subprocess

    from test_tables import _kill_when, _subprocess_env

    marker = tmp_path / "marker.txt"
    client.register_plugin(_Environ({"SBT_TEST_MARKER": str(marker), "SBT_TEST_SLEEP": "0.3"}),
                           name="sbt-env")
    target = tmp_path / "t.h5"
    proc = subprocess.Popen([sys.executable, "-c", _DASK_BUILDER, str(target),
                             client.scheduler.address], env=_subprocess_env(tmp_path),
                            cwd=tmp_path)
    try:
        _kill_when(proc, lambda: len(calls(marker)) >= 6)  # the probe and 5 of 10 blocks
    finally:
        client.register_plugin(_Environ({"SBT_TEST_MARKER": "", "SBT_TEST_SLEEP": "0.15"}),
                               name="sbt-env")
    assert not target.exists()
    done = int(np.count_nonzero(record(resume_path_for(target))))
    assert 1 <= done < 10
    stats: dict = {}
    monkeypatch.setenv("SBT_TEST_SLEEP", "0")
    build_table(small_spec(), target, compute=slow_hydrogen_compute, workers=1,
                chunk_states=100, progress=False, stats=stats)  # locally, from the cluster's
    assert stats["resumed"] == done and stats["computed"] == 10 - done
    whole = tmp_path / "whole.h5"
    build_table(small_spec(), whole, compute=hydrogen_compute, workers=1, chunk_states=100,
                progress=False)
    assert_same_datasets(target, whole)


def test_worker_with_other_level_data_is_refused(client, tmp_path):
    # the build's provenance names level data the workers do not have
    prov = {"level_data_digest": "0" * 64, "solver_version": "any"}
    with pytest.raises(TableError, match="has level_data_digest .* the build expects '0000"):
        build_table(small_spec(nt=4, npres=5), tmp_path / "t.h5", compute=hydrogen_compute,
                    client=client, provenance=prov, progress=False)
    assert list(tmp_path.iterdir()) == []
