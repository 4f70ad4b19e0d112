"""Which modules a piece of code imports, asked of a fresh interpreter (start-up cost tests)."""

from __future__ import annotations

import subprocess
import sys


def imported_after(code: str, modules: tuple[str, ...]) -> list[str]:
    """The ``modules`` found in ``sys.modules`` after running ``code`` in a new interpreter."""
    probe = f"{code}\nimport sys\nprint(','.join(m for m in {modules!r} if m in sys.modules))"
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, check=True)
    return [m for m in out.stdout.strip().split(",") if m]
