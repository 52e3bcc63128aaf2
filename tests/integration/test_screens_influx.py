"""The station page and the Yield comparisons on a real InfluxDB read store: the same figures as
on the journal the records came from; what only the journal keeps (alarm states, gaps,
maintenance) is said to be missing, not shown as empty."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest
from streamlit.testing.v1 import AppTest

from gateway.store import open_journal
from tests.integration.sinks_data import into_influx, shift
from tests.support.servers import InfluxServer

pytestmark = [pytest.mark.integration, pytest.mark.timeout(120)]
APP = str(Path(__file__).resolve().parents[2] / "dashboard" / "app.py")


@pytest.fixture(scope="module")
def urls(influxdb: InfluxServer, tmp_path_factory: pytest.TempPathFactory
         ) -> Iterator[tuple[str, str]]:
    path = tmp_path_factory.mktemp("screens") / "journal.db"
    journal = open_journal(str(path))
    journal.write(shift(1, 120))
    influxdb.create_database("screens")
    into_influx(journal, influxdb.url("screens"))
    journal.close()
    yield f"sqlite:///{path}", influxdb.url("screens")
    influxdb.drop_database("screens")


def _run(monkeypatch: pytest.MonkeyPatch, url: str, page: str, query: dict[str, str]
         ) -> AppTest:
    monkeypatch.setenv("LEAKFLEET_STORE", url)
    monkeypatch.setenv("LEAKFLEET_CONFIG", "demo")
    monkeypatch.setenv("LEAKFLEET_CLOCK", "wall")
    at = AppTest.from_file(APP, default_timeout=60)
    for k, v in query.items():
        at.query_params[k] = v
    at.switch_page(page)
    at.run()
    assert not at.exception, [e.message for e in at.exception]
    assert not at.error, [e.value for e in at.error]
    return at


def test_station_page_on_influxdb(monkeypatch: pytest.MonkeyPatch,
                                  urls: tuple[str, str]) -> None:
    query = {"station": "L1-S2", "range": "Everything"}
    journal = _run(monkeypatch, urls[0], "views/station.py", query)
    influx = _run(monkeypatch, urls[1], "views/station.py", query)
    metrics = [{m.label: m.value for m in at.metric} for at in (journal, influx)]
    assert metrics[0] == metrics[1]
    calibrations = [next(d.value for d in at.dataframe if "Outcome" in d.value.columns)
                    for at in (journal, influx)]
    assert calibrations[0].equals(calibrations[1])
    captions = " ".join(c.value for c in influx.caption)
    assert "Alarm states are kept in the gateway's journal" in captions
    assert "Gaps are recorded in the gateway's journal" in captions


@pytest.mark.parametrize("compare", ["Day by day", "Shift against shift"])
def test_yield_comparisons_on_influxdb(monkeypatch: pytest.MonkeyPatch, urls: tuple[str, str],
                                       compare: str) -> None:
    query = {"range": "Everything", "compare": compare}
    shown = []
    for url in urls:
        at = _run(monkeypatch, url, "views/yields.py", query)
        table = next(d.value for d in at.dataframe if "Volume" in d.value.columns)
        summary = next(m.value for m in at.markdown if "weighted by volume" in m.value)
        shown.append((table, summary))
    assert shown[0][0].equals(shown[1][0])
    assert shown[0][1] == shown[1][1]
