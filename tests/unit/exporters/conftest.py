from __future__ import annotations

from collections.abc import Iterator

import pytest
from support.lab_history import lab_monitor_with_history

from lightwarden.exporters.app.monitor import Monitor


@pytest.fixture(scope="module")
def lab_monitor(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Monitor]:
    """The lab after 40 days of history (support/lab_history.py), shared by a module."""
    yield from lab_monitor_with_history(tmp_path_factory.mktemp("lab"))
