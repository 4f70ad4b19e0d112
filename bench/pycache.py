"""Compiled bytecode for reachlist's own modules before a bench times fresh processes.

An installed package has its ``.pyc`` files written once (by pip, or by the first run); a
command timed in a fresh process then reads them. Where ``PYTHONDONTWRITEBYTECODE`` is set, as on
the machines this project is benched on, an editable install never gets them, and every command
compiles reachlist's modules from source again (about 0.08-0.1 s of `rules` at 1M customers,
measured): time a user would not spend. Each bench that times commands calls ``compile_package``
first; the files go to ``reachlist/**/__pycache__``, which git ignores.
"""

from __future__ import annotations

import compileall
import sys
from pathlib import Path

import reachlist


def compile_package() -> None:
    """Write the bytecode of every module of the reachlist package that imports here."""
    root = Path(reachlist.__file__).parent
    if not compileall.compile_dir(str(root), quiet=1):
        raise SystemExit(f"could not compile the bytecode of {root}")
    print(f"bytecode of {root} compiled (as an installed package has it)", file=sys.stderr)
