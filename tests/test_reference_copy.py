"""The repository's copy of the shared check values is complete and current."""

from __future__ import annotations

import pytest

from tests.reference_data import COPY, SHARED, check_values


def test_copy_is_present_and_names_sources() -> None:
    data = check_values()
    assert data["examples"], f"{COPY} holds no examples"
    for example in data["examples"]:
        assert example.get("source"), f"example {example.get('id')} names no source"


def test_copy_equals_shared_reference() -> None:
    if not SHARED.is_file():
        pytest.skip(f"the shared check values are not beside this clone ({SHARED})")
    assert COPY.read_bytes() == SHARED.read_bytes(), (
        f"{COPY} differs from {SHARED}: copy the shared file over the test copy"
    )
