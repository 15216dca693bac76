"""Resumable table builds: the temporary file records the blocks stored; a killed or
interrupted build of the same table goes on from them and ends with the same table.

The physics is the closed-form pure-hydrogen Saha solution (tests/table_helpers.py), so the
finished tables are also checked against it."""

from __future__ import annotations

import signal
import subprocess
import sys
from pathlib import Path

import h5py
import numpy as np
import pytest

from sahaboltz.tables import cache
from sahaboltz.tables.build import build_table, resume_path_for
from sahaboltz.tables.hdf5 import check_table

from table_helpers import hydrogen_compute, hydrogen_saha, slow_hydrogen_compute
from test_tables import _kill_when, _subprocess_env, calls, small_spec


@pytest.fixture
def marker(tmp_path, monkeypatch):
    path = tmp_path / "marker.txt"
    monkeypatch.setenv("SBT_TEST_MARKER", str(path))
    return path


def datasets(path: Path) -> dict[str, np.ndarray]:
    """Every dataset of a file, read."""
    out = {}
    with h5py.File(path) as f:
        f.visititems(lambda name, obj: out.__setitem__(name, obj[()])
                     if isinstance(obj, h5py.Dataset) else None)
    return out


def assert_same_datasets(a: Path, b: Path) -> None:
    da, db = datasets(a), datasets(b)
    assert sorted(da) == sorted(db)
    for name in da:
        assert da[name].dtype == db[name].dtype, name
        if da[name].dtype.kind == "O":  # labels (strings)
            assert da[name].tolist() == db[name].tolist(), name
        else:
            assert da[name].tobytes() == db[name].tobytes(), name  # bit for bit


def record(tmp: Path) -> np.ndarray:
    with h5py.File(tmp, "r", locking=False) as f:
        return f["build_progress"][()]


_KILLED_BUILDER = """
import sys
from sahaboltz.tables.build import build_table
from table_helpers import slow_hydrogen_compute
from test_tables import small_spec
build_table(small_spec(), sys.argv[1], compute=slow_hydrogen_compute, workers=1,
            chunk_states=100, progress=False)
"""


def test_killed_build_resumes_with_only_the_rest(tmp_path, marker):
    # 40 x 25 states in blocks of 4 temperature rows: 10 blocks
    target = tmp_path / "out" / "t.h5"
    env = _subprocess_env(tmp_path, SBT_TEST_SLEEP=0.15)
    proc = subprocess.Popen([sys.executable, "-c", _KILLED_BUILDER, str(target)], env=env,
                            cwd=tmp_path)
    _kill_when(proc, lambda: len(calls(marker)) >= 6)  # the probe and 5 blocks: half way
    assert proc.returncode == -signal.SIGKILL
    assert not target.exists()
    tmp = resume_path_for(target)
    done = int(np.count_nonzero(record(tmp)))
    assert 3 <= done <= 6 and record(tmp).size == 10
    # the next run of the same spec computes only the blocks not recorded, and no probe
    marker.unlink()
    stats: dict = {}
    build_table(small_spec(), target, compute=slow_hydrogen_compute, workers=1,
                chunk_states=100, progress=False, stats=stats)
    assert stats == {"blocks": 10, "resumed": done, "computed": 10 - done, "block_states": 100}
    assert len(calls(marker)) == 10 - done
    assert not tmp.exists()
    check_table(target, full=True)
    with h5py.File(target) as f:
        assert f.attrs["resumed_blocks"] == done
        assert "build_progress" not in f and "build_identity" not in f.attrs
    # equal, dataset by dataset and bit by bit, to a build that was never interrupted
    whole = tmp_path / "whole.h5"
    build_table(small_spec(), whole, compute=hydrogen_compute, workers=1, chunk_states=100,
                progress=False)
    assert_same_datasets(target, whole)
    # and right: the closed form at the grid points
    spec = small_spec()
    t, p = np.meshgrid(spec.temperature.array, spec.pressure.array, indexing="ij")
    with h5py.File(target) as f:
        np.testing.assert_allclose(f["fraction"][1], hydrogen_saha(t, p)["fraction_H_II"],
                                   rtol=1e-13)


_calls = {"n": 0}


def _interrupted_compute(spec, t, p):
    _calls["n"] += 1
    if _calls["n"] == 4:  # the probe and two blocks done: Ctrl-C in the third
        raise KeyboardInterrupt
    return hydrogen_compute(spec, t, p)


def test_interrupted_build_keeps_its_record_and_resumes(cache_env):
    d, marker = cache_env
    _calls["n"] = 0
    spec = small_spec(nt=12, npres=10)
    key = cache.table_key(spec, _interrupted_compute)
    with pytest.raises(KeyboardInterrupt):
        cache.get_table(spec, compute=_interrupted_compute, workers=1, chunk_states=20,
                        progress=False)
    tmp = d / f".{key}.h5.resume.tmp"
    assert tmp.exists() and not (d / f"{key}.h5").exists()
    assert list(record(tmp)) == [1, 1] + [0] * 4
    stats: dict = {}
    path = cache.get_table(spec, compute=_interrupted_compute, workers=1, chunk_states=20,
                           progress=False, stats=stats)
    assert stats["resumed"] == 2 and stats["computed"] == 4
    assert not tmp.exists()
    check_table(path, key=key, full=True)
    t, p = np.meshgrid(spec.temperature.array, spec.pressure.array, indexing="ij")
    with h5py.File(path) as f:
        np.testing.assert_allclose(f["electron_density"][()],
                                   hydrogen_saha(t, p)["electron_density"], rtol=1e-13)


def test_record_of_another_table_is_not_used(tmp_path):
    target = tmp_path / "t.h5"
    _calls["n"] = 0
    with pytest.raises(KeyboardInterrupt):
        build_table(small_spec(nt=12, npres=10), target, compute=_interrupted_compute,
                    workers=1, chunk_states=20, progress=False)
    assert resume_path_for(target).exists()
    # another grid for the same file: it starts afresh (and replaces the record)
    stats: dict = {}
    build_table(small_spec(nt=8, npres=10), target, compute=hydrogen_compute, workers=1,
                chunk_states=20, progress=False, stats=stats)
    assert stats["resumed"] == 0 and stats["computed"] == stats["blocks"] == 4
    assert not resume_path_for(target).exists()
    with h5py.File(target) as f:
        assert f["temperature"].shape == (8,)


def test_no_resume_starts_afresh(tmp_path):
    target = tmp_path / "t.h5"
    _calls["n"] = 0
    with pytest.raises(KeyboardInterrupt):
        build_table(small_spec(nt=12, npres=10), target, compute=_interrupted_compute,
                    workers=1, chunk_states=20, progress=False)
    stats: dict = {}
    build_table(small_spec(nt=12, npres=10), target, compute=_interrupted_compute,
                workers=1, chunk_states=20, progress=False, resume=False, stats=stats)
    assert stats["resumed"] == 0 and stats["computed"] == 6
    check_table(target, full=True)


@pytest.fixture
def cache_env(tmp_path, monkeypatch):
    d = tmp_path / "cache"
    monkeypatch.setenv(cache.CACHE_ENV, str(d))
    marker = tmp_path / "marker.txt"
    monkeypatch.setenv("SBT_TEST_MARKER", str(marker))
    return d, marker


_NO_DASK = """
import sys
sys.modules["dask"] = sys.modules["distributed"] = None   # as if not installed
from sahaboltz.errors import InputError
from sahaboltz.tables.build import build_table
from table_helpers import hydrogen_compute
from test_tables import small_spec
build_table(small_spec(nt=8, npres=10), sys.argv[1], compute=hydrogen_compute, workers=2,
            chunk_states=20, progress=False)
try:
    build_table(small_spec(nt=8, npres=10), sys.argv[1] + ".2", compute=hydrogen_compute,
                scheduler="tcp://127.0.0.1:8786", progress=False)
except InputError as exc:
    print(exc)
"""


def test_local_process_pool_needs_no_dask(tmp_path):
    env = _subprocess_env(tmp_path)
    out = subprocess.run([sys.executable, "-c", _NO_DASK, str(tmp_path / "t.h5")], env=env,
                         cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    check_table(tmp_path / "t.h5", full=True)
    assert "pip install 'sahaboltz[dask]'" in out.stdout
    assert not (tmp_path / "t.h5.2").exists()
