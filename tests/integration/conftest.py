"""Real servers for the integration tests: one anonymous Mosquitto and one InfluxDB 1.x per
session (tests that stop a server start their own, see tests/support/servers.py)."""

from __future__ import annotations

import itertools
from collections.abc import Iterator
from pathlib import Path

import pytest

from gateway.store.journal import Journal, open_journal
from tests.support.servers import InfluxServer, MosquittoServer

_db_names = itertools.count(1)


@pytest.fixture(scope="session")
def mosquitto(tmp_path_factory: pytest.TempPathFactory) -> Iterator[MosquittoServer]:
    with MosquittoServer(tmp_path_factory.mktemp("mosquitto")) as broker:
        yield broker


@pytest.fixture(scope="session")
def influxdb(tmp_path_factory: pytest.TempPathFactory) -> Iterator[InfluxServer]:
    with InfluxServer(tmp_path_factory.mktemp("influxdb")) as server:
        yield server


@pytest.fixture
def influx_db(influxdb: InfluxServer) -> Iterator[str]:
    """A fresh, empty database on the session's InfluxDB (dropped afterwards)."""
    name = f"leakfleet_t{next(_db_names)}"
    influxdb.create_database(name)
    yield name
    influxdb.drop_database(name)


@pytest.fixture
def journal(tmp_path: Path) -> Iterator[Journal]:
    j = open_journal(f"sqlite:///{tmp_path / 'journal.db'}")
    yield j
    j.close()
