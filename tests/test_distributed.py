"""The same run on the threaded scheduler and on real dask.distributed clusters.

A cluster is started here (2 worker processes, loopback only, no dashboard) and used
through ``scheduler=<address>``, as ``geothermmap run --scheduler tcp://HOST:PORT`` does;
``workers=2`` starts and stops a local cluster of its own. The reference is the threaded
run of the same recipe: every value of every output must be the same float32 bit pattern
(NaN positions included), because each block is computed by the same code on the same
input window whichever process runs it, and assembled by the same COG step.
"""

from __future__ import annotations

import hashlib
import logging
from pathlib import Path

import numpy as np
import pytest
import rasterio

from geothermmap import run_recipe
from geothermmap.pipeline import WORK_DIR_NAME, plan_run
from tests.conftest import make_case, write_recipe

distributed = pytest.importorskip("distributed")
pytestmark = pytest.mark.slow  # starts real clusters (about 20 s in all)

# 200 x 150 cells in 64-pixel chunks: 4 x 3 blocks, including partial ones at the right and
# bottom edges, so that both workers get several blocks
WIDTH, HEIGHT, CHUNK = 200, 150, 64


@pytest.fixture(scope="module")
def cluster():
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", dashboard_address=None,
                                  silence_logs=logging.ERROR) as c:
        yield c


@pytest.fixture(scope="module")
def case(tmp_path_factory) -> tuple[Path, Path]:
    tmp = tmp_path_factory.mktemp("distributed")
    files = make_case(tmp, width=WIDTH, height=HEIGHT)
    recipe = write_recipe(tmp, files, chunk=CHUNK)
    return recipe, tmp


@pytest.fixture(scope="module")
def threaded(case):
    recipe, tmp = case
    return run_recipe(recipe, tmp / "threads")


@pytest.fixture(scope="module")
def warped_case(tmp_path_factory) -> tuple[Path, Path]:
    """Soil in EPSG:4326: the workers align it through a WarpedVRT per window."""
    tmp = tmp_path_factory.mktemp("distributed_warped")
    files = make_case(tmp, soil_crs="EPSG:4326")
    return write_recipe(tmp, files, chunk=CHUNK), tmp


def _bits(path: Path) -> np.ndarray:
    """All bands as raw 32-bit patterns (NaN payloads and positions compared exactly)."""
    with rasterio.open(path) as src:
        return src.read().view(np.uint32)


def _sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _assert_identical(a, b) -> None:
    assert set(a.outputs) == set(b.outputs)
    for name in a.outputs:
        x, y = _bits(a.outputs[name]), _bits(b.outputs[name])
        assert x.shape == y.shape
        assert np.array_equal(x, y), f"{name}: values differ from the threaded run"
        # stronger: the COG files themselves are the same bytes (no time stamps)
        assert _sha256(a.outputs[name]) == _sha256(b.outputs[name]), name
    assert a.counts == b.counts
    assert a.statistics == b.statistics


def test_existing_cluster_equals_threaded(case, cluster, threaded):
    recipe, tmp = case
    result = run_recipe(recipe, tmp / "scheduler", scheduler=cluster.scheduler_address)
    _assert_identical(threaded, result)
    assert not (tmp / "scheduler" / WORK_DIR_NAME).exists()
    # the run used the cluster: both workers are still there and idle afterwards
    with distributed.Client(cluster.scheduler_address) as client:
        assert len(client.scheduler_info()["workers"]) == 2


def test_existing_cluster_equals_threaded_with_warped_inputs(warped_case, cluster):
    recipe, tmp = warped_case
    a = run_recipe(recipe, tmp / "threads")
    b = run_recipe(recipe, tmp / "scheduler", scheduler=cluster.scheduler_address)
    _assert_identical(a, b)


def test_local_cluster_equals_threaded(case, threaded):
    recipe, tmp = case
    result = run_recipe(recipe, tmp / "workers", workers=2)
    _assert_identical(threaded, result)


def test_every_block_task_writes_its_own_files(case):
    """No two tasks share an output file, so processes need no lock (writer contract)."""
    recipe, _ = case
    plan = plan_run(recipe)
    from geothermmap.raster.writer import block_path

    paths = [block_path(Path("/work"), bi, bj) for bi, bj, _ in plan.blocks()]
    assert len(paths) == len({str(p) for p in paths}) == 12
    # and the blocks tile the grid exactly: every cell belongs to exactly one block
    cover = np.zeros((HEIGHT, WIDTH), dtype=np.int64)
    for _, _, w in plan.blocks():
        r, c = int(w.row_off), int(w.col_off)
        cover[r:r + int(w.height), c:c + int(w.width)] += 1
    assert (cover == 1).all()


def test_unreachable_scheduler_is_a_user_error(case, tmp_path):
    from click.testing import CliRunner

    from geothermmap.cli import main

    recipe, _ = case
    # port 9 (discard) on loopback: nothing listens there in the test environment
    result = CliRunner().invoke(main, ["run", str(recipe), "-o", str(tmp_path / "o"),
                                       "--scheduler", "tcp://127.0.0.1:9"],
                                catch_exceptions=False)
    assert result.exit_code == 1, result.output
    assert "cannot reach the dask scheduler" in result.output
    assert "Traceback" not in result.output
