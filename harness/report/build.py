"""Write every table and plot of a results folder from its store alone."""

from __future__ import annotations

import json
import os
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from harness.report import plots, speedup, tables
from harness.store import Store
from harness.report import page, verdicts


@dataclass
class Outputs:
    folder: Path
    files: list[Path] = field(default_factory=list)
    ranks: pd.DataFrame | None = None
    speedup: pd.DataFrame | None = None  # speedup sweep summary, when the store has a sweep
    verdict: object | None = None  # harness.verdict.Verdict, when the store has accuracy cells


def write_text(path: Path, text: str) -> Path:
    """Write through a temporary file and rename, so a reader never sees half a file."""
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    tmp.write_text(text, encoding="utf-8")
    tmp.replace(path)
    return path


def _table(out: Outputs, name: str, frame: pd.DataFrame, md: str | None = None,
           title: str = "") -> None:
    base = out.folder / "tables" / name
    out.files.append(write_text(base.with_suffix(".csv"), frame.to_csv(index=False)))
    body = md if md is not None else tables.markdown(frame)
    out.files.append(write_text(base.with_suffix(".md"), f"# {title}\n\n{body}"))


def build_outputs(folder: str | Path) -> Outputs:
    """Tables (CSV + Markdown), plots, provenance and report.html for the folder's latest plan."""
    folder = Path(folder)
    out = Outputs(folder)
    with Store(folder, create=False) as store:
        frame = store.cells_frame()
        run = store.last_run()
        datasets = store.dataset_summaries()
        sweep = store.scaling_frame()
        sweep_runs = store.run_provenance(sweep["run"]) if not sweep.empty else {}
    provenance = (run or {}).get("provenance", {})
    metrics = provenance.get("metrics")
    out.files.append(write_text(folder / "provenance.json", json.dumps(provenance, indent=2)))
    speedup.write(out, sweep, sweep_runs)
    if frame.empty:
        out.files.append(page.write(out, frame, None, run, datasets, not sweep.empty))
        return out
    primary = tables.primary_metrics(frame, metrics)
    scores = tables.score_table(frame)
    _table(out, "scores", scores, tables.scores_markdown(scores),
           "Scores per dataset (mean ± sd over repeats × folds)")
    out.ranks = tables.rank_table(frame, metrics)
    _table(out, "ranks", out.ranks, title="Mean rank across datasets (1 = best; each dataset "
           "ranked on its first metric)")
    _table(out, "costs", tables.cost_table(frame), title="Training and prediction cost "
           "(means over folds)")
    failures = tables.failures_table(frame)
    if not failures.empty:
        _table(out, "failures", failures, title="Cells that failed or timed out")
    for fn, name in ((plots.score_vs_fit_time, "score_vs_fit_time"),
                     (plots.size_curves, "ensemble_size")):
        p = fn(frame, primary, folder / "plots" / f"{name}.png")
        if p is not None:
            out.files.append(p)
    out.verdict = verdicts.write(out, frame, metrics)
    out.files.append(page.write(out, frame, out.verdict, run, datasets, not sweep.empty))
    return out
