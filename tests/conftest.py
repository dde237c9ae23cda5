"""Suite-wide settings: session logs of live sessions started by tests go to a temporary
folder, never into the user's own log folder (`ui.session_log.LOG_DIR_ENV`)."""

from __future__ import annotations

import os
from collections.abc import Iterator

import pytest


@pytest.fixture(autouse=True, scope="session")
def _session_logs_in_a_temporary_folder(
    tmp_path_factory: pytest.TempPathFactory,
) -> Iterator[None]:
    from ui.session_log import LOG_DIR_ENV

    before = os.environ.get(LOG_DIR_ENV)
    os.environ[LOG_DIR_ENV] = str(tmp_path_factory.mktemp("session-logs"))
    yield  # subprocesses (forcelens live, the dashboard's worker) inherit it
    if before is None:
        os.environ.pop(LOG_DIR_ENV, None)
    else:
        os.environ[LOG_DIR_ENV] = before
