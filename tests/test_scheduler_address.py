"""A Dask scheduler address that is not one: a one-line InputError naming --scheduler.

Outside reference: distributed's own parser (distributed.comm.parse_address /
parse_host_port), which refuses an address without a port; common practice for its form
("tcp://host:port").
"""
from __future__ import annotations

import pytest

from audit import InputError
from audit.parallel.plan import ParallelPlan, map_chunks

distributed = pytest.importorskip("distributed")


@pytest.mark.parametrize("address", ["notaurl", "tcp://", "tcp://host:port"])
def test_a_malformed_scheduler_address_names_the_option(address):
    with pytest.raises(InputError) as caught:
        list(map_chunks(abs, [1, -2], ParallelPlan(backend="dask", scheduler=address)))
    message = str(caught.value)
    assert "--scheduler" in message and address in message and "\n" not in message
