"""Runs on a real dask.distributed cluster (2 worker processes, loopback only) give the
same values, byte for byte, as the local threaded run."""

from __future__ import annotations

import numpy as np
import pytest
import rasterio

from geothermmap import run_recipe
from tests.conftest import make_case, write_recipe

pytestmark = pytest.mark.slow


def _read(path):
    with rasterio.open(path) as src:
        return src.read()


@pytest.fixture(scope="module")
def cluster():
    from distributed import LocalCluster

    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None) as c:
        yield c


def test_existing_scheduler_equals_threaded(tmp_path, cluster):
    files = make_case(tmp_path, soil_crs="EPSG:4326")  # warped inputs on the workers too
    recipe = write_recipe(tmp_path, files, chunk=64)
    threaded = run_recipe(recipe, tmp_path / "threads")
    remote = run_recipe(recipe, tmp_path / "cluster", scheduler=cluster.scheduler_address)
    assert threaded.outputs.keys() == remote.outputs.keys()
    for name in threaded.outputs:
        a, b = _read(threaded.outputs[name]), _read(remote.outputs[name])
        assert a.dtype == b.dtype
        assert np.array_equal(a, b, equal_nan=True), name
    assert remote.counts["valid_cells"] == threaded.counts["valid_cells"]


def test_unreachable_scheduler_is_a_user_error(tmp_path):
    from click.testing import CliRunner

    from geothermmap.cli import main

    files = make_case(tmp_path, width=20, height=20)
    recipe = write_recipe(tmp_path, files)
    result = CliRunner().invoke(main, ["run", str(recipe), "-o", str(tmp_path / "o"),
                                       "--scheduler", "tcp://127.0.0.1:9"],
                                catch_exceptions=False)
    assert result.exit_code == 1, result.output
    assert "scheduler" in result.output and "Traceback" not in result.output
