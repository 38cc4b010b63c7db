"""Shared test settings."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pytest

if TYPE_CHECKING:
    from pg_server import CentralDb, PgServer


def pytest_configure(config: pytest.Config) -> None:
    config.addinivalue_line("markers", "slow: a test that takes more than a few seconds")


@pytest.fixture(scope="session")
def pg_cluster() -> Iterator[PgServer]:
    """One real PostgreSQL server for the whole session (tests/pg_server.py); missing binaries fail, never skip."""
    from pg_server import ServerMissing, find_bindir, pg_server

    try:
        find_bindir()
    except ServerMissing as exc:
        pytest.fail(str(exc), pytrace=False)
    with pg_server() as srv:
        yield srv


@pytest.fixture
def central(pg_cluster: PgServer) -> CentralDb:
    """A fresh database with this linerig's central schema."""
    from pg_server import CentralDb

    from linerig.daemon.central.schema import CENTRAL_VERSION

    return CentralDb(pg_cluster, CENTRAL_VERSION)


@pytest.fixture(scope="session")
def example_site(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict[str, Any]]:
    """The invented example site's store (examples/examplemoor.py), built once per session, and the ids of its runs
    and calibration; copy the file before changing it."""
    from central_stores import examplemoor

    path = tmp_path_factory.mktemp("example") / "examplemoor.db"
    ids = examplemoor().build_demo_db(path)
    return path, ids


@pytest.fixture(scope="session")
def example_db(example_site: tuple[Path, dict[str, Any]]) -> Path:
    return example_site[0]
