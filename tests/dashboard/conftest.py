"""Journals for the dashboard tests: the demo plant's last hours, one lone station, an empty one."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest
from streamlit.testing.v1 import AppTest

from gateway.records import StationState, StationStatus
from gateway.store import open_journal
from tests.dashboard.journal_fill import fill_demo

APP = str(Path(__file__).resolve().parents[2] / "dashboard" / "app.py")


@pytest.fixture(scope="session")
def demo_journal(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("demo") / "journal.db"
    fill_demo(path, hours=4.0)
    return path


@pytest.fixture(scope="session")
def sparse_journal(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The demo plant where line L2's stations send no limits, times, clock or calibration
    verdicts, and no gross or aborted test has a loss or a leak rate."""
    path = tmp_path_factory.mktemp("sparse") / "journal.db"
    fill_demo(path, hours=4.0, sparse=True)
    return path


@pytest.fixture(scope="session")
def lone_journal(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """One station that has never calibrated."""
    path = tmp_path_factory.mktemp("lone") / "journal.db"
    fill_demo(path, hours=1.0, stations=("L2-S1",), calibrations=False)
    return path


@pytest.fixture()
def empty_journal(tmp_path: Path) -> Path:
    path = tmp_path / "empty.db"
    open_journal(f"sqlite:///{path}").close()
    return path


@pytest.fixture()
def status_only_journal(tmp_path: Path) -> Path:
    path = tmp_path / "status.db"
    with open_journal(f"sqlite:///{path}") as j:
        j.write([StationStatus("L1-S1", datetime.now(UTC) - timedelta(minutes=1),
                               StationState.ONLINE)])  # fmt: skip
    return path


AppFactory = Callable[..., AppTest]


@pytest.fixture()
def app(monkeypatch: pytest.MonkeyPatch) -> Iterator[AppFactory]:
    """``app(journal, page=None, query=None, clock="wall")`` → an AppTest that has run the page
    once (``query``: the URL's query parameters, as a link would open it)."""

    def make(journal: Path | str, page: str | None = None, config: str = "demo",
             query: dict[str, str] | None = None, clock: str = "wall") -> AppTest:
        # caches stay: every journal has its own URL, and the cache keys start with it
        url = journal if isinstance(journal, str) else f"sqlite:///{journal}"
        monkeypatch.setenv("LEAKFLEET_STORE", url)
        monkeypatch.setenv("LEAKFLEET_CONFIG", config)
        monkeypatch.setenv("LEAKFLEET_CLOCK", clock)
        at = AppTest.from_file(APP, default_timeout=60)
        for key, value in (query or {}).items():
            at.query_params[key] = value
        if page is not None:
            at.switch_page(page)
        at.run()
        return at

    yield make
