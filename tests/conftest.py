"""Fixtures shared by several test files."""

import pytest


@pytest.fixture(scope="session")
def cluster_address(tmp_path_factory):
    """One local dask cluster (2 worker processes on loopback, started as batches start
    theirs) for the whole session: starting one takes seconds."""
    from voxtopo import batch

    client, cluster = batch.local_cluster(2, 3 * 2**30, tmp_path_factory.mktemp("dask"),
                                          dashboard=False)
    client.close()
    yield cluster.scheduler_address
    cluster.close()
