"""The ``sahaboltz partition`` and ``sahaboltz populations`` commands."""

from __future__ import annotations

import csv
import io
import json

import numpy as np
import pytest

from sahaboltz.faces.cli import main
from sahaboltz.kernels.partition import partition_function


def _run(capsys, *argv):
    code = main(list(argv))
    out = capsys.readouterr()
    return code, out.out, out.err


def test_partition_range_csv_matches_api(capsys):
    code, out, _ = _run(capsys, "partition", "Fe I", "Fe II", "--range", "2000", "10000", "5",
                        "--format", "csv")
    assert code == 0
    rows = list(csv.DictReader(io.StringIO(out)))
    t = np.array([float(r["T_K"]) for r in rows])
    np.testing.assert_allclose(t, np.linspace(2000, 10000, 5))
    np.testing.assert_allclose([float(r["U(Fe II)"]) for r in rows],
                               partition_function("Fe II", t), rtol=1e-12)


def test_partition_density_dependent_json(capsys):
    code, out, _ = _run(capsys, "partition", "H I", "-T", "10000", "20000", "--truncation",
                        "occupation", "--n-e", "1e15", "--completion", "--derivative",
                        "--format", "json")
    assert code == 0
    doc = json.loads(out)
    u = [r["U(H I)"] for r in doc["rows"]]
    np.testing.assert_allclose(u, partition_function("H I", [1e4, 2e4], truncation="occupation",
                                                     n_e=1e15, completion=True), rtol=1e-12)
    assert "dlnU/dlnT(H I)" in doc["rows"][0]


def test_populations_of_hydrogen(capsys):
    # n = 2 relative to n = 1 at 10,000 K: 2.899e-5 (NMSU ASTR 545 homework solution, as
    # quoted in issue 3; sum over n <= 5 there, ground-dominated so the ratio is unchanged)
    code, out, _ = _run(capsys, "populations", "H I", "-T", "10000", "--index", "0", "1",
                        "--format", "csv")
    assert code == 0
    rows = list(csv.DictReader(io.StringIO(out)))
    assert abs(float(rows[1]["n/n_ground"]) / 2.899e-5 - 1) < 1e-3


@pytest.mark.parametrize("argv, word", [
    (["partition", "Fe I", "-T", "-5"], "temperature"),
    (["partition", "Fe I", "-T", "5000", "--truncation", "occupation"], "n_e"),
    (["partition", "Fe I"], "temperature"),
    (["partition", "Xq I", "-T", "5000"], "Xq"),
    (["populations", "Fe I", "-T", "5000", "--term", "no such term"], "levels"),
    (["partition", "H I", "-T", "5000", "--completion"], "completion"),
])
def test_bad_input_gives_a_clear_error(capsys, argv, word):
    code, _, err = _run(capsys, *argv)
    assert code == 2 and word in err, err
