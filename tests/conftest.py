"""Suite-wide fixtures.

Every test (and every ``orbtool`` subprocess a test starts, which inherits the
environment) uses a fresh temporary grid cache, never the user's own cache
folder (``orbtool.io.cache``: ``$ORBTOOL_CACHE_DIR``).
"""

from __future__ import annotations

import pytest


@pytest.fixture(scope="session", autouse=True)
def _temporary_grid_cache(tmp_path_factory):
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("ORBTOOL_CACHE_DIR", str(tmp_path_factory.mktemp("orbtool-cache")))
        mp.delenv("ORBTOOL_NO_CACHE", raising=False)
        yield
