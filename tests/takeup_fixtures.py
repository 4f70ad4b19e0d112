"""The sample warehouse shared by the take-up tests (built once per session)."""

from __future__ import annotations

from pathlib import Path

import pytest

from reachlist.sample import build_sample


@pytest.fixture(scope="session")
def takeup_sample(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("takeup") / "sample.duckdb"
    build_sample(path, customers=20_000, seed=7)
    return path
