"""``woodlot agree``: do two results folders agree (a rerun, a colleague's run, a library
upgrade)? Loads both stores and compares them (`harness.analysis.agreement`)."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from harness.analysis.agreement import DEFAULT_SD_LIMIT, Comparison, agreement
from harness.store import Store


def _load(folder: Path) -> tuple[pd.DataFrame, dict]:
    with Store(folder, read_only=True) as store:
        frame = store.cells_frame()
        run = store.last_run() or {}
    return frame, (run.get("provenance") or {})


def agree_folders(a: str | Path, b: str | Path,
                  sd_limit: float = DEFAULT_SD_LIMIT) -> Comparison:
    """Compare folder ``b`` with the reference folder ``a``."""
    a, b = Path(a), Path(b)
    fa, prov_a = _load(a)
    fb, prov_b = _load(b)
    return agreement(a, fa, prov_a, b, fb, prov_b, sd_limit)
