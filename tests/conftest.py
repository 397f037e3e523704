"""Shared fixtures, and the paths every test reads the project's files from.

Tests sit at different depths of tests/; they import these paths
(``from conftest import ROOT, TEST_DATA``) instead of working them out from their own file.
"""

from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
TEST_DATA = ROOT / "tests" / "data"
DEMO_SPEC = ROOT / "configs" / "compost_demo.yaml"
DEMO_DATA = ROOT / "data_samples" / "compost_sales.csv"


@pytest.fixture
def demo_spec_path() -> Path:
    return DEMO_SPEC


@pytest.fixture(scope="module")
def dask_cluster():
    """An in-process Dask cluster (dask.distributed.LocalCluster) over TCP on this machine."""
    distributed = pytest.importorskip("dask.distributed")
    cluster = distributed.LocalCluster(n_workers=2, processes=False, threads_per_worker=1,
                                       protocol="tcp://", host="127.0.0.1", dashboard_address=":0")
    yield cluster
    cluster.close()
