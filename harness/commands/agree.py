"""``woodlot agree``: do two results folders agree (a rerun, a colleague's run, a library
upgrade)? Opens both stores, matches their cells in SQL (`harness.store.Store.match_cells`) and
compares them (`harness.analysis.agreement`)."""

from __future__ import annotations

from pathlib import Path

from harness.analysis.agreement import (DEFAULT_SD_LIMIT, Comparison, agreement,
                                        check_sd_limit)
from harness.store import Store


def agree_folders(a: str | Path, b: str | Path,
                  sd_limit: float = DEFAULT_SD_LIMIT) -> Comparison:
    """Compare folder ``b`` with the reference folder ``a``."""
    check_sd_limit(sd_limit)
    a, b = Path(a), Path(b)
    with Store(a, read_only=True) as store_a, Store(b, read_only=True) as store_b:
        cells = store_a.match_cells(store_b)
        prov = [(s.latest_cell_run() or {}).get("provenance") or {}
                for s in (store_a, store_b)]
    return agreement(a, b, cells, prov[0], prov[1], sd_limit)
