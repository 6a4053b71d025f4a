"""Opening a results store from a test, outside woodlot, and closing it again.

``with sqlite3.connect(...) as db`` only commits: the connection stays open until it is
garbage-collected, and an open connection keeps the store's write-ahead log and shared-memory
file beside it, which changes how the next woodlot process opens the folder. Tests use this
instead.
"""
from __future__ import annotations

import sqlite3
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator


@contextmanager
def opened(path: Path | str, *, read_only: bool = False) -> Iterator[sqlite3.Connection]:
    """A connection that commits what was written and is closed when the block ends."""
    db = (sqlite3.connect(f"file:{path}?mode=ro", uri=True) if read_only
          else sqlite3.connect(path))
    try:
        with db:
            yield db
    finally:
        db.close()
