"""Shared test fixtures."""

from __future__ import annotations

import pytest


@pytest.fixture(autouse=True)
def _isolated_history(tmp_path_factory: pytest.TempPathFactory, monkeypatch: pytest.MonkeyPatch) -> None:
    """No test ever writes to the user's real history database."""
    monkeypatch.setenv("PRINTCHECK_DB", str(tmp_path_factory.mktemp("db") / "history.sqlite"))
    monkeypatch.delenv("PRINTCHECK_DEBUG", raising=False)
