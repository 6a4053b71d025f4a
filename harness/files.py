"""Writing files so that a reader never sees half of one: write a temporary file beside the
target, then rename it over the target (atomic on POSIX and Windows). A write the system
refuses (disk full, file too large, read-only or forbidden folder) becomes one `UserError`
naming the file, and the temporary file is removed."""

from __future__ import annotations

import os
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator

from harness.errors import UserError


def cannot_write(path: str | Path, exc: OSError) -> UserError:
    """The one message for a write the system refused."""
    reason = exc.strerror or str(exc)
    hint = {28: "free some space and run again", 27: "the file size limit of this process "
            "(ulimit -f) is reached", 13: "choose a folder you may write to (--out)",
            30: "choose a folder you may write to (--out)"}.get(exc.errno or 0, "")
    return UserError(f"cannot write ({reason})" + (f"; {hint}" if hint else ""), file=path)


def writable_folder(folder: str | Path, option: str = "--out") -> Path:
    """``folder`` if it is, or can be made, a folder this process may write to; `UserError`
    (naming ``option``) before anything is written otherwise."""
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise UserError(f"{folder} is a file, not a folder; give a folder with {option}",
                        file=folder)
    existing = folder
    while not existing.exists() and existing != existing.parent:
        existing = existing.parent
    if not existing.is_dir():
        raise UserError(f"{existing} is a file, so {folder} cannot be made; give a folder with "
                        f"{option}", file=folder)
    if not os.access(existing, os.W_OK | os.X_OK):
        raise UserError(f"cannot write into {existing} (read-only or permission denied); give "
                        f"a folder you may write to with {option}", file=folder)
    return folder


@contextmanager
def replacing(path: str | Path) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; when the block ends without an error the
    temporary file replaces ``path``, otherwise it is removed and ``path`` is untouched."""
    path = Path(path)
    tmp = path.with_name(f"{path.stem}.{os.getpid()}.tmp{path.suffix}")
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        yield tmp
        tmp.replace(path)
    except OSError as exc:
        raise cannot_write(path, exc) from None
    finally:
        try:
            tmp.unlink(missing_ok=True)
        except OSError:
            pass


def write_text(path: str | Path, text: str) -> Path:
    """Write ``text`` (UTF-8) to ``path`` through a temporary file; returns the path."""
    with replacing(path) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return Path(path)


def write_bytes(path: str | Path, data: bytes) -> Path:
    """Write ``data`` to ``path`` through a temporary file; returns the path."""
    with replacing(path) as tmp:
        tmp.write_bytes(data)
    return Path(path)
