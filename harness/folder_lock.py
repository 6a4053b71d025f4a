"""One run at a time in a results folder: an operating-system lock on ``run.lock`` inside the
folder, held for the whole of a run (`harness.locks`). The system releases it when the
process ends, however it ends, so a killed run never leaves a stale lock. While held, the
file says who holds it (host, process, since when): a second run names them and stops (or
waits, when asked to), and ``report`` says the results are partial."""

from __future__ import annotations

import os
import socket
import time
from contextlib import contextmanager
from pathlib import Path
from typing import Callable, Iterator

from harness.errors import UserError
from harness.locks import Busy, exclusive, holder

LOCK_NAME = "run.lock"
_held: dict[Path, int] = {}  # folders this process holds, and how many times (re-entrant)


@contextmanager
def holding(folder: str | Path, *, wait: bool = False,
            echo: Callable[[str], None] = lambda line: None) -> Iterator[None]:
    """Hold ``folder``'s run lock for the block (creating the folder). Another holder: a
    `UserError` naming it, or with ``wait`` a note through ``echo`` and a wait for it."""
    folder = Path(folder)
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise UserError(f"cannot create the results folder ({exc.strerror or exc})",
                        file=folder) from None
    key = folder.resolve()
    if key in _held:
        _held[key] += 1
        try:
            yield
        finally:
            _held[key] -= 1
        return
    note = (f"host {socket.gethostname()}, process {os.getpid()}, since "
            f"{time.strftime('%Y-%m-%d %H:%M:%S')}")
    try:
        lock = exclusive(folder / LOCK_NAME, wait=wait, note=note, on_wait=lambda who: echo(
            f"waiting for the run that is using {folder} to finish ({who})"))
        lock.__enter__()
    except Busy as exc:
        raise UserError(f"another run is using this results folder ({exc.holder}); wait for it "
                        "to finish (--wait-for-folder waits), or choose another --out",
                        file=folder) from None
    except OSError as exc:
        raise UserError(f"cannot lock the results folder ({exc.strerror or exc})",
                        file=folder) from None
    _held[key] = 1
    try:
        yield
    finally:
        del _held[key]
        lock.__exit__(None, None, None)


def running_elsewhere(folder: str | Path) -> str | None:
    """Who is running in ``folder`` now (another process), or None."""
    folder = Path(folder)
    if folder.resolve() in _held:
        return None
    return holder(folder / LOCK_NAME)
