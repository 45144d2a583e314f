"""Output files: checked before any work, written atomically, and all or nothing per command.

Every writer goes through `atomic_write` (a temp file in the target folder, then a rename), so
a reader never sees half a file. Inside `all_or_nothing()` the renames wait until the block
ends without an error: a command that writes a plan, tables and a report either leaves all
of them or none (temp files and folders it created are removed again).
"""

from __future__ import annotations

import contextlib
import errno
import os
import tempfile
from collections.abc import Callable, Iterator
from contextvars import ContextVar
from dataclasses import dataclass, field
from pathlib import Path

from assignplan.errors import InputError


@dataclass
class _Staging:
    renames: list[tuple[Path, Path]] = field(default_factory=list)  # (temp, final)
    folders: list[Path] = field(default_factory=list)  # created by this block, outermost first


_staging: ContextVar[_Staging | None] = ContextVar("assignplan_staging", default=None)


@contextlib.contextmanager
def all_or_nothing() -> Iterator[None]:
    """Hold back every `atomic_write` rename until the block ends; on an error (or an
    interrupt) remove the temp files and the folders the block created instead."""
    staging = _Staging()
    token = _staging.set(staging)
    try:
        yield
    except BaseException:
        for temp, _ in staging.renames:
            temp.unlink(missing_ok=True)
        for folder in reversed(staging.folders):
            with contextlib.suppress(OSError):
                folder.rmdir()  # only if empty: never a folder that held files before
        raise
    else:
        for temp, final in staging.renames:
            os.replace(temp, final)
    finally:
        _staging.reset(token)


def ensure_folder(path: Path | str) -> Path:
    """Create `path` (and missing parents); inside `all_or_nothing` they are removed again
    if the block fails."""
    path = Path(path)
    missing = [p for p in (path, *path.parents) if not p.exists()][::-1]
    path.mkdir(parents=True, exist_ok=True)
    staging = _staging.get()
    if staging is not None:
        staging.folders += missing
    return path


def atomic_write(path: Path | str, write: Callable[[Path], None]) -> None:
    """Write through a temp file in the target folder, then rename: never a half-written file.
    Inside `all_or_nothing` the rename happens when the block ends."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    temp = Path(tmp)
    try:
        write(temp)
        # mkstemp makes the file private (0600); a plan or report is an ordinary file.
        os.chmod(temp, 0o666 & ~_umask())
    except BaseException:
        temp.unlink(missing_ok=True)
        raise
    staging = _staging.get()
    if staging is None:
        os.replace(temp, path)
    else:
        staging.renames.append((temp, path))


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def atomic_write_text(path: Path | str, text: str) -> None:
    atomic_write(path, lambda p: p.write_text(text, encoding="utf-8"))


def _probe(folder: Path, label: str) -> None:
    """Fail unless a file can really be created in `folder` (permissions alone do not tell:
    root passes every permission test, yet cannot create files in /proc)."""
    try:
        fd, tmp = tempfile.mkstemp(prefix=".assignplan-probe.", dir=folder)
    except OSError as exc:
        reason = os.strerror(exc.errno) if exc.errno else str(exc)
        if exc.errno in (errno.EACCES, errno.EPERM, errno.EROFS):
            reason = "no permission to write there" if exc.errno != errno.EROFS \
                else "read-only file system"
        raise InputError(f"{label}: cannot write in folder {folder} ({reason.lower()})") from None
    os.close(fd)
    os.unlink(tmp)


def _nearest_folder(path: Path, label: str) -> Path:
    """The closest existing ancestor of `path`; an ancestor that is a file is an error."""
    for parent in path.parents:
        if parent.exists():
            if not parent.is_dir():
                raise InputError(f"{label}: {parent} is a file, not a folder")
            return parent
    return Path(".")


def check_output_file(path: Path | str | None, flag: str) -> None:
    """Fail before any work when an output file could not be written: it is a folder, its
    folder is missing (or a file), or nothing can be created there."""
    if path is None or str(path) == "-":
        return
    p = Path(path)
    label = f"{flag} {p}"
    if p.is_dir():
        raise InputError(f"{label}: is a folder; give a file name")
    folder = _nearest_folder(p, label)
    if folder != p.parent:
        raise InputError(f"{label}: folder {p.parent} does not exist")
    _probe(folder, label)


def check_output_dir(path: Path | str | None, flag: str) -> None:
    """Fail before any work when files could not be written into folder `path` (created if
    missing, with its parents)."""
    if path is None:
        return
    p = Path(path)
    label = f"{flag} {p}"
    if p.exists() and not p.is_dir():
        raise InputError(f"{label}: is a file, not a folder")
    _probe(p if p.is_dir() else _nearest_folder(p, label), label)
