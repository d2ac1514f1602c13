"""Fixtures shared by several test files."""

import pytest


@pytest.fixture(scope="session")
def cluster_address():
    """One local dask cluster (2 worker processes on loopback) for the whole session:
    starting one takes seconds."""
    import dask
    from distributed import LocalCluster

    from voxtopo import batch

    with dask.config.set(batch.WORKER_CONFIG):
        cluster = LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                               host="127.0.0.1", dashboard_address=None,
                               memory_limit="3GiB", silence_logs=40)
    yield cluster.scheduler_address
    cluster.close()
