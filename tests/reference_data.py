"""The published check values the mining tests compare against.

``tests/data/reference/check-values.json`` is a copy of the project's shared check values (worked
examples from textbooks, papers and reference-library documentation; each example names its
``source``; see ``tests/data/reference/README.md``). The copy lives in the repository so the
reference tests run, and fail rather than skip, on a fresh clone. Where the shared folder sits
beside the project (``../shared/reference``), ``test_reference_copy.py`` checks that the copy still
equals it.
"""

from __future__ import annotations

import json
from functools import cache
from pathlib import Path
from typing import Any

COPY = Path(__file__).parent / "data" / "reference" / "check-values.json"
SHARED = Path(__file__).parents[2] / "shared" / "reference" / "check-values.json"


@cache
def check_values() -> dict[str, Any]:
    return json.loads(COPY.read_text(encoding="utf-8"))
