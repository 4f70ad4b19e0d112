"""Write a contact list to a file, atomically: a temporary file beside the destination, moved into
place with ``os.replace`` only once it is complete. An existing file is kept unless ``force``.

The format follows the extension: ``.csv`` or ``.parquet``. In CSV, a text cell that a spreadsheet
would read as a formula (it starts with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return: a
hostile product code, say) is written with a leading single quote, as the OWASP "CSV Injection"
guidance advises; numbers (a negative score) and Parquet files are written as they are.

Staging files are hidden beside the destination as ``.NAME.PID-RANDOM.tmp`` (PID: the process
that writes them). A run killed before it finishes leaves one behind; the next build to the same
place removes those whose process is gone and reports the ones it cannot account for
(``clear_leftovers``).

>>> staged = stage_list(frame, "mats.csv")     # doctest: +SKIP
>>> staged.publish()                           # doctest: +SKIP
"""

from __future__ import annotations

import contextlib
import os
import shutil
import tempfile
from dataclasses import dataclass
from pathlib import Path

import polars as pl

from reachlist.errors import InputError, StateError
from reachlist.wording import option

__all__ = [
    "FORMATS",
    "Leftovers",
    "StagedFile",
    "StagedSet",
    "check_destination",
    "clear_leftovers",
    "list_format",
    "neutralise_formulas",
    "stage_list",
    "stage_text",
    "write_list",
]

FORMATS = {".csv": "csv", ".parquet": "parquet"}
FORMULA_START = r"^[=+\-@\t\r]"  # what a spreadsheet may run as a formula (OWASP CSV Injection)


def neutralise_formulas(frame: pl.DataFrame) -> pl.DataFrame:
    """Text cells that start like a formula get a leading single quote; other columns (numbers,
    dates, booleans) are left alone, so a negative number stays a number."""
    text = [
        c
        for c, t in frame.schema.items()
        if t in (pl.String, pl.Categorical) or isinstance(t, pl.Enum)
    ]
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


def check_destination(
    path: str | os.PathLike[str], *, force: bool = False, list_file: bool = True
) -> Path:
    """Fail early, before any work, when the list (or, with ``list_file=False``, a file that goes
    with it) could not be written."""
    p = Path(path)
    if list_file:
        list_format(p)
    if p.is_dir():
        raise StateError(
            f"Expected a file path for the list, found a directory at {str(p)!r}.",
            hint="give a file name such as mats.csv",
        )
    if p.exists() and not force:
        raise StateError(
            f"{'List file' if list_file else 'File'} {str(p)!r} already exists; nothing was written.",
            hint=f"pass {option('force=True')} to overwrite it, or choose another {option('out')}",
        )
    if not p.parent.is_dir():
        raise StateError(
            f"Expected an existing directory for {str(p)!r}, found none at {str(p.parent)!r}.",
            hint="create the directory first",
        )
    return p


def _hidden(final: Path, suffix: str = ".tmp") -> Path:
    """A new, empty hidden file beside ``final`` named after it and this process."""
    fd, name = tempfile.mkstemp(
        dir=final.parent, prefix=f".{final.name}.{os.getpid()}-", suffix=suffix
    )
    os.close(fd)
    return Path(name)


@dataclass
class StagedFile:
    """A complete list in a temporary file, waiting to be moved into place.

    ``publish`` moves it into place (keeping a file it replaces aside until ``settle``);
    ``withdraw`` undoes a publish when what had to follow it (the campaign log) failed."""

    temp: Path
    final: Path
    force: bool
    rows: int
    previous: Path | None = None  # the file a forced publish replaced, kept until settled
    published: bool = False

    def publish(self) -> Path:
        if not self.force and self.final.exists():
            self.discard()
            raise StateError(
                f"List file {str(self.final)!r} appeared while the list was being built; "
                "it was kept and nothing was written there.",
                hint=f"pass {option('force=True')} to overwrite it, or choose another {option('out')}",
            )
        try:
            if self.final.exists():
                # keep the replaced file until the log commits; the replace stays atomic
                self.previous = _hidden(self.final)
                self.previous.unlink()
                try:
                    os.link(self.final, self.previous)
                except OSError:  # a file system without hard links
                    shutil.copy2(self.final, self.previous)
            os.replace(self.temp, self.final)
        except OSError as exc:
            self._restore()
            raise StateError(
                f"Could not move the finished list {str(self.temp)!r} to {str(self.final)!r}: "
                f"{exc.strerror}; nothing was logged.",
                hint="check the directory's permissions and free space, then build again",
            ) from None
        self.published = True
        return self.final

    def withdraw(self) -> None:
        """Take a published list back (the file it replaced, if any, returns)."""
        if self.published:
            with contextlib.suppress(FileNotFoundError):
                self.final.unlink()
            self.published = False
        self._restore()
        self.discard()

    def settle(self) -> None:
        """The list stays: drop the file it replaced."""
        if self.previous is not None:
            with contextlib.suppress(FileNotFoundError):
                self.previous.unlink()
            self.previous = None

    def discard(self) -> None:
        with contextlib.suppress(FileNotFoundError):
            self.temp.unlink()

    def _restore(self) -> None:
        if self.previous is not None and self.previous.exists():
            os.replace(self.previous, self.final)
        self.previous = None


@dataclass(frozen=True)
class Leftovers:
    """Hidden staging files of earlier runs found beside a destination."""

    removed: tuple[Path, ...] = ()  # their process is gone: removed
    kept: tuple[Path, ...] = ()  # a live process (maybe a build running now) or an unknown one

    def notes(self) -> list[str]:
        out = []
        if self.removed:
            out.append(
                f"Removed {len(self.removed)} staging file(s) left by interrupted builds "
                f"to this place: {', '.join(p.name for p in self.removed)}."
            )
        if self.kept:
            out.append(
                f"Left alone {len(self.kept)} staging file(s) of a build that may still be "
                f"running (or of an older reachlist): {', '.join(str(p) for p in self.kept)}"
                "; delete them by hand once no build is running."
            )
        return out


def _process_gone(pid: int) -> bool:
    if pid == os.getpid():
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return True
    except OSError:  # no permission: it exists, under another user
        return False
    return False


def clear_leftovers(path: str | os.PathLike[str]) -> Leftovers:
    """Remove the staging files beside ``path`` whose writing process no longer runs on this
    machine; report the others (a build running now, or files without a process id)."""
    final = Path(path)
    if not final.parent.is_dir():
        return Leftovers()
    prefix = f".{final.name}."
    removed, kept = [], []
    for p in sorted(final.parent.iterdir()):
        name = p.name
        if not (name.startswith(prefix) and name.endswith(".tmp")) or not p.is_file():
            continue
        pid = name[len(prefix) :].split("-", 1)[0]
        if pid.isdigit() and _process_gone(int(pid)):
            with contextlib.suppress(FileNotFoundError):
                p.unlink()
            removed.append(p)
        else:
            kept.append(p)
    return Leftovers(tuple(removed), tuple(kept))


def _follow_umask(path: Path) -> None:
    """Staging files are created owner-only; the finished file gets the mode a new file would
    have under the process's umask, so a mailer running as another user can read it when the
    umask allows (set a stricter umask, such as 077, to keep lists owner-only)."""
    mask = os.umask(0)
    os.umask(mask)
    os.chmod(path, 0o666 & ~mask)


def stage_list(
    frame: pl.DataFrame,
    path: str | os.PathLike[str],
    *,
    force: bool = False,
    metadata: dict[str, str] | None = None,
) -> StagedFile:
    """Write ``frame`` to a temporary file beside ``path`` (nothing at ``path`` changes yet).
    ``metadata`` goes into a Parquet file's key-value metadata (CSV has none: see
    :func:`stage_text` for a sidecar)."""
    final = check_destination(path, force=force)
    fmt = list_format(final)
    temp = _hidden(final)
    try:
        if fmt == "csv":
            neutralise_formulas(frame).write_csv(temp)
        else:
            frame.write_parquet(temp, metadata=metadata)
        _follow_umask(temp)
    except BaseException:
        temp.unlink(missing_ok=True)
        raise
    return StagedFile(temp, final, force, frame.height)


def stage_text(text: str, path: str | os.PathLike[str], *, force: bool = False) -> StagedFile:
    """Write ``text`` (a sidecar file) to a temporary file beside ``path``."""
    final = Path(path)
    if final.exists() and not force:
        raise StateError(
            f"File {str(final)!r} already exists; nothing was written.",
            hint=f"pass {option('force=True')} to overwrite it, or choose another {option('out')}",
        )
    temp = _hidden(final)
    try:
        temp.write_text(text, encoding="utf-8")
        _follow_umask(temp)
    except BaseException:
        temp.unlink(missing_ok=True)
        raise
    return StagedFile(temp, final, force, text.count("\n"))


@dataclass
class StagedSet:
    """Several staged files published and withdrawn together (a list, its holdout file and its
    provenance sidecar): after ``withdraw`` none of them is in place."""

    files: list[StagedFile]

    def publish(self) -> Path:
        done: list[StagedFile] = []
        try:
            for f in self.files:
                f.publish()
                done.append(f)
        except BaseException:
            for f in reversed(done):
                f.withdraw()
            for f in self.files:
                f.discard()
            raise
        return self.files[0].final

    def withdraw(self) -> None:
        for f in reversed(self.files):
            f.withdraw()

    def settle(self) -> None:
        for f in self.files:
            f.settle()

    @property
    def rows(self) -> int:
        return self.files[0].rows


def write_list(frame: pl.DataFrame, path: str | os.PathLike[str], *, force: bool = False) -> Path:
    """Write ``frame`` to ``path`` atomically; refuse an existing file unless ``force``."""
    staged = stage_list(frame, path, force=force)
    written = staged.publish()
    staged.settle()
    return written
