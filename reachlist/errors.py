"""One error root for everything reachlist reports to a user.

    ReachlistError
    ├── ContractError      the warehouse does not match the contract (missing table/column, wrong type)
    ├── WarehouseError     the warehouse cannot be reached or a query failed
    ├── InputError         a value given by the user is unusable (unknown SKU, bad date, bad option)
    ├── EmptyResultError   the request is valid but produced nothing (no rules, empty audience)
    └── StateError         the campaign log refuses the change (campaign id exists, file exists)

Every message says what was expected, what was found and how to fix it, on one line.
The CLI prints ``Error: <message>`` and exits non-zero; it never shows a traceback for these.
"""

from __future__ import annotations


class ReachlistError(Exception):
    """Root of every error reachlist raises on purpose."""

    exit_code = 2

    def __init__(self, message: str, *, hint: str | None = None) -> None:
        self.message = message if message.endswith((".", "?", "!")) else message + "."
        self.hint = hint
        super().__init__(str(self))

    def __str__(self) -> str:
        return self.message if self.hint is None else f"{self.message} Fix: {self.hint}"


class ContractError(ReachlistError):
    """The warehouse does not match the logical contract."""

    exit_code = 4


class WarehouseError(ReachlistError):
    """The warehouse cannot be reached, or a query failed there."""

    exit_code = 4


class InputError(ReachlistError):
    """A value given by the user cannot be used."""


class EmptyResultError(ReachlistError):
    """A valid request that produced nothing to show."""

    exit_code = 3


class StateError(ReachlistError):
    """The campaign log or the file system refuses a change that would lose data."""


def brief(exc: BaseException) -> str:
    """What went wrong, without the fix: for a note inside a report (the fix belongs to errors
    shown on their own line)."""
    if isinstance(exc, ReachlistError):
        return exc.message.rstrip(".")
    return (str(exc).strip().splitlines() or [type(exc).__name__])[0]
