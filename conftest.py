"""Fixtures shared by every test and doctest (kept at the root: a second conftest.py under
tests/ would clash with tests/api/conftest.py in the doctest collection)."""

from __future__ import annotations

from collections.abc import Iterator

import pytest

from solver.physics.profilecache import CACHE_DIR_ENV

collect_ignore = ["service/migrations/env.py"]  # runs migrations when imported: Alembic's alone


@pytest.fixture(autouse=True, scope="session")
def _private_profile_cache(tmp_path_factory: pytest.TempPathFactory) -> Iterator[None]:
    """Stored spectrum profiles go to a temporary directory, never to the user's cache.

    Set in ``os.environ``, so subprocesses started by tests (the live server, the cache tests'
    second processes) inherit it.
    """
    with pytest.MonkeyPatch.context() as patch:
        patch.setenv(CACHE_DIR_ENV, str(tmp_path_factory.mktemp("profile-cache")))
        yield
