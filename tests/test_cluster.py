"""Scale-out on dask.distributed (issue 19, item 3): a local cluster of two worker
processes gives bit-identical results to the in-process run for the same seed, and
the command line reaches it with --scheduler."""
from __future__ import annotations

import json

import numpy as np
import pytest

pytest.importorskip("dask.distributed")

from chainplan.spec.loader import load_chain  # noqa: E402
from chainplan.studies.montecarlo import run  # noqa: E402
from conftest import REPO  # noqa: E402

CHAIN = REPO / "chains" / "hydrophone_buffered.yaml"


@pytest.fixture(scope="module")
def client():
    from dask.distributed import Client, LocalCluster
    cluster = LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None)
    c = Client(cluster)
    yield c
    c.close()
    cluster.close()


def test_two_workers_give_the_in_process_numbers_bit_for_bit(client):
    chain = load_chain(CHAIN)
    here = run(chain, 900, seed=4, chunk=250)
    there = run(chain, 900, seed=4, chunk=100, client=client)      # other chunks, other processes
    assert set(here.metrics) == set(there.metrics)
    for key in here.metrics:
        assert np.array_equal(here.metrics[key], there.metrics[key], equal_nan=True), key
    assert np.array_equal(here.corner_pass, there.corner_pass)
    assert np.array_equal(here.corner_ok, there.corner_ok)
    assert here.yield_all == there.yield_all and here.sensitivity == there.sensitivity
    workers = client.run(lambda: __import__("os").getpid())
    assert len(set(workers.values())) == 2                          # two separate processes did the work


def test_cli_scheduler_address(client, cli):
    addr = client.scheduler.address
    code, out, err = cli("spread", str(CHAIN), "-n", "300", "--seed", "2", "--json", "--scheduler", addr)
    code0, out0, err0 = cli("spread", str(CHAIN), "-n", "300", "--seed", "2", "--json")
    assert code == code0 and json.loads(out) == json.loads(out0)


def test_cli_scheduler_errors(cli):
    code, out, err = cli("spread", str(CHAIN), "-n", "10", "--scheduler", "tcp://127.0.0.1:9")
    assert code == 2 and "no dask scheduler answers" in err and "Traceback" not in err
    code, out, err = cli("spread", str(CHAIN), "-n", "10", "--workers", "2")
    assert code == 2 and "--scheduler local" in err
