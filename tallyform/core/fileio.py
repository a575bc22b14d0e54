"""Atomic file writing: a failure leaves any existing file intact and no partial file.

Everything tallyform writes (spec, tables, figures, report) goes through
:func:`atomic_write`: the content is written to a temporary file in the target folder and
moved into place with ``os.replace`` only when complete, after its bytes reached the disk
(``os.fsync``), so that a crash or a power cut right after leaves the old file or the new
one, never a torn one. This is the project's one atomic writer.
"""
from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path

from .errors import InputError

__all__ = ["atomic_write", "write_text_atomic", "write_bytes_atomic"]


@contextlib.contextmanager
def atomic_write(path, mode: str = "w", *, encoding: str | None = "utf-8",
                 suffix: str = ".part"):
    """Context manager yielding a file object; the target appears only on success.

    ``mode`` is ``'w'`` (text) or ``'wb'`` (bytes). For writers that need a path rather
    than a file object (e.g. spreadsheet writers), use ``mode='path'``: the temporary path
    is yielded and moved into place afterwards. ``suffix`` ends the temporary file's name
    (some writers read the format from it).
    """
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise InputError(f"cannot write {str(path)!r}: the folder {str(folder)!r} does not "
                         "exist.")
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=suffix, dir=folder)
    except OSError as err:
        raise InputError(f"cannot write in {str(folder)!r}: {err.strerror}.",
                         hint="Choose a folder you can write to.") from None
    tmp = Path(tmp)
    _ordinary_mode(tmp, path)
    owned = False                      # True once fd is closed by someone else
    try:
        if mode == "path":
            os.close(fd)
            owned = True
            yield tmp
            _sync_path(tmp)
        else:
            kw = {"encoding": encoding, "newline": ""} if "b" not in mode else {}
            fh = os.fdopen(fd, mode, **kw)
            owned = True
            with fh:
                yield fh
                fh.flush()
                os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        if not owned:
            with contextlib.suppress(OSError):
                os.close(fd)
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise


def _sync_path(tmp: Path) -> None:
    """fsync a file another writer filled (best effort: some file systems refuse)."""
    try:
        fd = os.open(tmp, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _ordinary_mode(tmp: Path, path: Path) -> None:
    """mkstemp creates 0600 files; give the result the mode a plain open() would."""
    try:
        mode = path.stat().st_mode & 0o777 if path.exists() else None
        if mode is None:
            umask = os.umask(0)
            os.umask(umask)
            mode = 0o666 & ~umask
        os.chmod(tmp, mode)
    except OSError:
        pass


def write_text_atomic(path, text: str) -> Path:
    with atomic_write(path, "w") as fh:
        fh.write(text)
    return Path(path)


def write_bytes_atomic(path, data: bytes) -> Path:
    with atomic_write(path, "wb") as fh:
        fh.write(data)
    return Path(path)
