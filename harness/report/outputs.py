"""The files `harness.report.writer` writes into a results folder, and whether they are up to
date: ``outputs.json``, written last, names the state of the store they were built from
(`harness.store.Store.state`) and the woodlot version that built them, so a rerun that
changed nothing leaves them as they are. Imports no plotting library, so that such a rerun
never loads one."""

from __future__ import annotations

import json
import shutil
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING

from harness.report.page import REPORT_NAME
from harness.store import Store
from harness.versions import WOODLOT_VERSION

if TYPE_CHECKING:
    import pandas as pd

    from harness.analysis.verdict import Verdict
    from harness.report.render import Table

SUMMARY_NAME = "summary.md"
STATE_NAME = "outputs.json"
OUTPUT_FILES = ("provenance.json", SUMMARY_NAME, REPORT_NAME, STATE_NAME)
OUTPUT_FOLDERS = ("tables", "plots")


@dataclass
class Outputs:
    """What `write_report` wrote and the analysis behind it."""

    folder: Path
    files: list[Path] = field(default_factory=list)
    status: str = ""  # when the results are partial: why
    verdict: Verdict | None = None        # when the store has accuracy cells
    speedup: pd.DataFrame | None = None   # one line per dataset × strategy, when it has speedup points
    tables: dict[str, Table] = field(default_factory=dict)
    unchanged: bool = False  # the store had not changed since these files were written
    tuning: list[str] = field(default_factory=list)  # what tuning buys, in sentences


def clear_outputs(folder: Path) -> None:
    """Remove everything `write_report` writes (before a fresh run)."""
    for name in OUTPUT_FILES:
        (folder / name).unlink(missing_ok=True)
    for sub in OUTPUT_FOLDERS:
        shutil.rmtree(folder / sub, ignore_errors=True)


def state_text(state: str | None, folder: Path, files: list[Path], partial: bool) -> str:
    """The content of ``outputs.json``: the store state, whether the results were partial
    (a run going on or one that did not finish) and the files written from it."""
    return json.dumps({"store_state": state, "woodlot": WOODLOT_VERSION, "partial": partial,
                       "written": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
                       "files": [str(f.relative_to(folder)) for f in files]}, indent=2)


def up_to_date(folder: str | Path) -> Outputs | None:
    """The outputs of ``folder`` when they were written from the store as it is now, by this
    version of woodlot, from results that were not partial, and every file is still there;
    None when they need writing."""
    folder = Path(folder)
    try:
        written = json.loads((folder / STATE_NAME).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(written, dict) or written.get("woodlot") != WOODLOT_VERSION \
            or written.get("partial", True):
        return None
    with Store(folder, read_only=True) as store:
        state = store.state()
    files = [folder / f for f in written.get("files", [])]
    if state is None or written.get("store_state") != state or not all(
            f.is_file() for f in files):
        return None
    return Outputs(folder, files=files, unchanged=True)
