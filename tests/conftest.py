"""Shared test settings."""

import itertools
import os

import pytest
from hypothesis import settings

# CI runs the fuzz and property tests with a fixed budget; a longer local run can raise it with
# HYPOTHESIS_PROFILE=long.
settings.register_profile("ci", max_examples=200, deadline=None)
settings.register_profile("long", max_examples=5000, deadline=None)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "ci"))


@pytest.fixture(autouse=True)
def _own_cache_folder(tmp_path_factory, monkeypatch):
    """Derived caches of server labs go to the user's cache folder: a test's own, here (not in
    tmp_path, which some tests expect to find as they left it)."""
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path_factory.mktemp("user-cache")))


@pytest.fixture(scope="session")
def pg_cluster():
    """A throwaway PostgreSQL server for the whole run (skipped without PostgreSQL, a failure
    then when CEILING_LAB_REQUIRE_POSTGRES=1); see tests/pg_cluster.py."""
    from tests.pg_cluster import running_cluster

    with running_cluster() as cluster:
        yield cluster


@pytest.fixture
def pg_lab(pg_cluster):
    """The keeper's URL of a new lab on the test server, opened once (its tables made)."""
    from engine.store import open_store

    url = pg_cluster.url("lab_keeper", pg_cluster.new_lab())
    open_store(url).close()
    return url


@pytest.fixture(params=["sqlite", "postgresql"])
def lab_location(request, tmp_path):
    """Factory of new, empty labs of one back end: a file, or a database on the test server."""
    if request.param == "sqlite":
        counter = itertools.count()
        return lambda: str(tmp_path / f"lab-{next(counter)}.sqlite3")
    cluster = request.getfixturevalue("pg_cluster")
    return lambda: cluster.url("lab_keeper", cluster.new_lab())
