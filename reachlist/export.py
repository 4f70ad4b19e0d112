"""Write a contact list to a file, atomically: a temporary file beside the destination, moved into
place with ``os.replace`` only once it is complete. An existing file is kept unless ``force``.

The format follows the extension: ``.csv`` or ``.parquet``. In CSV, a text cell that a spreadsheet
would read as a formula (it starts with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return: a
hostile product code, say) is written with a leading single quote, as the OWASP "CSV Injection"
guidance advises; numbers (a negative score) and Parquet files are written as they are.

>>> staged = stage_list(frame, "mats.csv")     # doctest: +SKIP
>>> staged.publish()                           # doctest: +SKIP
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from dataclasses import dataclass
from pathlib import Path

import polars as pl

from reachlist.errors import InputError, StateError

__all__ = [
    "FORMATS",
    "StagedFile",
    "check_destination",
    "list_format",
    "neutralise_formulas",
    "stage_list",
    "write_list",
]

FORMATS = {".csv": "csv", ".parquet": "parquet"}
FORMULA_START = r"^[=+\-@\t\r]"  # what a spreadsheet may run as a formula (OWASP CSV Injection)


def neutralise_formulas(frame: pl.DataFrame) -> pl.DataFrame:
    """Text cells that start like a formula get a leading single quote; other columns (numbers,
    dates, booleans) are left alone, so a negative number stays a number."""
    text = [c for c, t in frame.schema.items() if t in (pl.String, pl.Categorical) or
            isinstance(t, pl.Enum)]
    return frame.with_columns(
        pl.when(pl.col(c).cast(pl.String).str.contains(FORMULA_START))
        .then(pl.lit("'") + pl.col(c).cast(pl.String))
        .otherwise(pl.col(c).cast(pl.String))
        .alias(c)
        for c in text
    )


def list_format(path: str | os.PathLike[str]) -> str:
    suffix = Path(path).suffix.lower()
    if suffix not in FORMATS:
        raise InputError(
            f"Expected a list file ending in .csv or .parquet, found {str(path)!r}.",
            hint="name the file like mats.csv or mats.parquet",
        )
    return FORMATS[suffix]


def check_destination(path: str | os.PathLike[str], *, force: bool = False) -> Path:
    """Fail early, before any work, when the list could not be written."""
    p = Path(path)
    list_format(p)
    if p.is_dir():
        raise StateError(
            f"Expected a file path for the list, found a directory at {str(p)!r}.",
            hint="give a file name such as mats.csv",
        )
    if p.exists() and not force:
        raise StateError(
            f"List file {str(p)!r} already exists; nothing was written.",
            hint="pass --force to overwrite it, or choose another --out",
        )
    if not p.parent.is_dir():
        raise StateError(
            f"Expected an existing directory for {str(p)!r}, found none at {str(p.parent)!r}.",
            hint="create the directory first",
        )
    return p


@dataclass
class StagedFile:
    """A complete list in a temporary file, waiting to be moved into place."""

    temp: Path
    final: Path
    force: bool
    rows: int

    def publish(self) -> Path:
        if not self.force and self.final.exists():
            self.discard()
            raise StateError(
                f"List file {str(self.final)!r} appeared while the list was being built; "
                "it was kept and nothing was written there.",
                hint="pass --force to overwrite it, or choose another --out",
            )
        try:
            os.replace(self.temp, self.final)
        except OSError as exc:
            raise StateError(
                f"Could not move the finished list {str(self.temp)!r} to {str(self.final)!r}: "
                f"{exc.strerror}.",
                hint="move the temporary file by hand, or check the directory's permissions",
            ) from None
        return self.final

    def discard(self) -> None:
        with contextlib.suppress(FileNotFoundError):
            self.temp.unlink()


def stage_list(
    frame: pl.DataFrame, path: str | os.PathLike[str], *, force: bool = False
) -> StagedFile:
    """Write ``frame`` to a temporary file beside ``path`` (nothing at ``path`` changes yet)."""
    final = check_destination(path, force=force)
    fmt = list_format(final)
    fd, name = tempfile.mkstemp(dir=final.parent, prefix=f".{final.name}.", suffix=".tmp")
    os.close(fd)
    temp = Path(name)
    try:
        if fmt == "csv":
            neutralise_formulas(frame).write_csv(temp)
        else:
            frame.write_parquet(temp)
    except BaseException:
        temp.unlink(missing_ok=True)
        raise
    return StagedFile(temp, final, force, frame.height)


def write_list(frame: pl.DataFrame, path: str | os.PathLike[str], *, force: bool = False) -> Path:
    """Write ``frame`` to ``path`` atomically; refuse an existing file unless ``force``."""
    return stage_list(frame, path, force=force).publish()
