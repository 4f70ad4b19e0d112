"""How messages name the options a user can change.

Core code names an option by its library parameter (``option("horizon_days")``), never by a
front end's flag; a switch is named with the value that turns it on (``option("force=True")``).
Used from Python a message reads ``horizon_days``; a front end that spells options its own way
speaks through :func:`spelling` while it runs (the CLI: ``--horizon``, ``--force``).
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from contextlib import contextmanager

_SPELLING: dict[str, str] = {}


@contextmanager
def spelling(words: Mapping[str, str]) -> Iterator[None]:
    """Name options as a front end spells them (library name -> its spelling) inside the block."""
    saved = dict(_SPELLING)
    _SPELLING.clear()
    _SPELLING.update(words)
    try:
        yield
    finally:
        _SPELLING.clear()
        _SPELLING.update(saved)


@contextmanager
def spelled_as(name: str, caller: str) -> Iterator[None]:
    """Inside the block, messages that name the option ``name`` name the caller's option
    ``caller`` instead, as the front end in use spells it: a function that passes its own
    ``cutoff`` on as another's ``as_of`` points its user at the option they can change."""
    with spelling({**_SPELLING, name: option(caller)}):
        yield


def option(name: str) -> str:
    """An option as the front end in use spells it (the library's name when none is in use)."""
    return _SPELLING.get(name, name)
