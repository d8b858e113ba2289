"""Settings of every test run (tests, doctests of the package and of the docs)."""

from __future__ import annotations

import os

import pytest


@pytest.fixture(scope="session", autouse=True)
def _field_cache_of_the_session(tmp_path_factory):
    """The tests keep their field results in a cache folder of their own, not the user's."""
    old = os.environ.get("CHIPFLOW_FIELD_CACHE")
    os.environ["CHIPFLOW_FIELD_CACHE"] = str(tmp_path_factory.mktemp("field-cache"))
    yield
    if old is None:
        os.environ.pop("CHIPFLOW_FIELD_CACHE", None)
    else:
        os.environ["CHIPFLOW_FIELD_CACHE"] = old
