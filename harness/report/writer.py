"""Writing a results folder's report from its store alone: ``tables/*.csv`` and ``*.md``,
``plots/*.png``, ``provenance.json``, ``report.html`` and, last, ``outputs.json`` (the state of
the store they were written from, so a rerun that changed nothing leaves them as they are),
into the folder or another one. The store is opened read-only. The only module of the report
that writes files; every file is written through a temporary name (`harness.files`). A run
still going in the folder, or one that ended without finishing, is said at the top of the
page (the results are partial)."""

from __future__ import annotations

import json
import time
from pathlib import Path

import pandas as pd
from threadpoolctl import threadpool_limits

from harness.analysis import tuning
from harness.analysis.results import primary_metrics, strategy_means
from harness.analysis.speedup import summarize
from harness.analysis.verdict import Verdict, verdict
from harness.collector import set_aside
from harness.files import writable_folder, write_bytes, write_text
from harness.folder_lock import running_elsewhere
from harness.report import tables, tuning_tables, words
from harness.report.drawing import Drawing, Panels
from harness.report.shown import MAX_PAIRS, MAX_PANELS, drawn_pairs, drawn_posterior
from harness.report.outputs import STATE_NAME, SUMMARY_NAME, Outputs, state_text
from harness.report.page import REPORT_NAME, PageContent, render
from harness.report.render import Table, md_text, to_markdown
from harness.store import Store
from harness.scorers import Equivalence

# what the report reads of each cell, besides its identity, scores and tuning (not the
# traceback, worker, timing mode or times of day: less to read and hold on a big store)
_READ = ("method", "family", "task", "fingerprint", "n_train", "n_test", "status", "message",
         "fit_seconds", "fit_cpu_seconds", "predict_seconds", "peak_memory_bytes", "model_bytes",
         "row_evidence")


def executor_text(prov: dict) -> str:
    """Where a run's cells ran, in words, from its provenance."""
    name, dask = prov.get("executor", "–"), prov.get("dask")
    if not dask:
        return f"{name}, {prov.get('jobs', '–')} jobs"
    hosts = dask.get("worker_hosts", {})
    return (f"{name}: {dask.get('cluster')} at {dask.get('scheduler')}, "
            f"{sum(hosts.values())} worker processes on "
            + ", ".join(f"{host} ({n})" for host, n in hosts.items()))


def _when(t) -> str:
    return time.strftime("%Y-%m-%d %H:%M:%S", time.localtime(t)) if t else "–"


def _provenance_rows(run: dict | None, n_cells: int, folder: Path) -> list[tuple[str, object]]:
    """What the latest run that computed any of the results says about how they were made."""
    run = run or {}
    prov = run.get("provenance", {}) or {}
    return [("suite", prov.get("suite", run.get("suite"))),
            ("cells in the latest plan", n_cells),
            ("executor", executor_text(prov)),
            ("timing", prov.get("timing")),
            ("machine", f"{prov.get('cpu_model', '?')}, {prov.get('cores', '?')} cores, "
                        f"{prov.get('platform', '?')}, host {prov.get('host', '?')}"),
            ("Python", prov.get("python")),
            ("libraries", ", ".join(f"{k} {v}" for k, v in prov.get("libraries", {}).items())),
            ("results folder", str(folder))]


def _runs_table(runs: list[dict]) -> pd.DataFrame:
    """One line per run that computed the cells or speedup points shown: how many, when,
    with which command, where, and the load of the machine."""
    def load(value) -> str:
        return ", ".join(f"{x:g}" for x in value) if value else "–"
    rows = []
    for r in runs:
        prov = r.get("provenance") or {}
        rows.append({"run": r["run"], "cells": r["cells"], "speedup points": r["points"],
                     "started": _when(r["started"]), "finished": _when(r["finished"]),
                     "state": r["state"] or "–", "command": r["command"] or "–",
                     "host": prov.get("host", "–"),
                     "load average before": load(prov.get("load_average")),
                     "after": load(prov.get("load_average_after"))})
    return pd.DataFrame(rows, columns=["run", "cells", "speedup points", "started", "finished",
                                       "state", "command", "host", "load average before",
                                       "after"])


def _computing_runs(store: Store, counts: list[tuple[str, int, int]],
                    points: pd.DataFrame) -> list[dict]:
    """The runs that computed the cells (``counts``: `Store.plan_counts`) and speedup points
    shown, oldest first, each with how many it computed; a rerun that fitted nothing is not
    among them."""
    cells: dict[int, int] = {}
    for _, run, n in counts:
        cells[run] = cells.get(run, 0) + n
    done = (points.drop_duplicates("key")["run"].value_counts() if not points.empty
            else pd.Series(dtype=int))
    runs = store.runs(set(cells) | set(done.index))
    for r in runs:
        r["cells"], r["points"] = int(cells.get(r["run"], 0)), int(done.get(r["run"], 0))
    return runs


def _dataset_table(datasets: pd.DataFrame, frame: pd.DataFrame,
                   v: Verdict | None) -> pd.DataFrame:
    if datasets.empty or frame.empty or "fingerprint" not in datasets:
        return pd.DataFrame()
    fps = set(frame["fingerprint"].dropna().unique())
    fps |= {f[:12] for f in fps}
    d = datasets[datasets["fingerprint"].isin(fps)].drop_duplicates("dataset")
    if d.empty:
        return pd.DataFrame()
    keep = [c for c in ("dataset", "task", "rows", "columns", "classes", "categorical",
                        "missing_share", "source") if c in d.columns]
    d = d[keep].copy()
    if "classes" in d:
        d["classes"] = [("" if pd.isna(c) else str(int(c))) for c in d["classes"]]
    if v is not None:
        d["judged on"] = d["dataset"].map(v.primary)
    return d.reset_index(drop=True)


def _gone(run: dict | None) -> dict | None:
    """``run`` marked killed when it is still marked running (call when no run holds the
    folder's lock)."""
    return {**run, "state": "killed"} if run and run.get("state") == "running" else run


def _tuning(frame: pd.DataFrame, trials: pd.DataFrame, refits: pd.DataFrame, v: Verdict,
            out: Outputs, draw) -> list[Table]:
    """The tables, figure and sentences of what tuning buys."""
    g = tuning.gains(frame, refits, v.primary, v.margins, v.certainty, v.alpha)
    s = tuning.gain_summary(g)
    r = tuning.ranking_change(frame, refits, v.primary)
    st = tuning.stability(frame)
    out.tuning = tuning_tables.sentences(g, s, r, v.certainty)
    curves = tuning.mean_curves(tuning.tuning_curves(trials, refits, v.primary))
    curves = curves.merge(frame[["strategy", "method", "family"]].drop_duplicates("strategy"),
                          on="strategy")
    from harness.report import plots  # matplotlib, only when there is tuning to draw
    draw("tuning_curves", plots.tuning_curves(curves, v.primary))
    found = [tuning_tables.gains(g, v.alpha, v.certainty), tuning_tables.summary(s)]
    if not r.empty:
        found.append(tuning_tables.ranking(r))
    if not st.empty:
        found.append(tuning_tables.stability(st))
    if not curves.empty:
        found.append(Table("tuning_curves", "Tuning curves (mean over outer folds)", curves,
                           curves))
    return found


def run_status(folder: Path, run: dict | None, running: str | None) -> str:
    """Why the folder's results are partial (``running``: who is still writing to it; or
    the latest run ended without finishing), or ''."""
    if running is not None:
        return (f"a run is still writing to {folder} ({running}): these results are partial; "
                "write the report again when it has finished")
    state = (run or {}).get("state")
    if state in (None, "finished"):
        return ""
    how = "was stopped" if state == "interrupted" else "ended without finishing (its process " \
        "is gone)"
    return (f"the latest run ({run['run']}) {how}: these results are partial; run the same "
            "command again to complete them")


def write_report(folder: str | Path, recommendation: list[str] | None = None,
                 recommendation_sections: list[tuple[str, list[str]]] | None = None, *,
                 out: str | Path | None = None) -> Outputs:
    """Tables (CSV + Markdown), plots, provenance and report.html for the folder's latest
    plan, from its store alone (opened read-only), written into ``out`` (default: the
    folder itself); `woodlot choose` adds its recommendation (sentences and titled sections
    such as warnings) at the top of the page. ``outputs.json`` comes last, naming the store
    state the outputs show."""
    folder = Path(folder)
    with Store(folder, read_only=True) as store:
        counts = store.plan_counts()
        points_frame = store.speedup_frame()
        runs = _computing_runs(store, counts, points_frame)
        last = store.last_run()
        panels = list(dict.fromkeys(d for d, _, _ in counts))[:MAX_PANELS]
    # the figures are drawn from here on in a second process (`harness.report.drawing`);
    # one BLAS thread here: the report's matrices are small, and a BLAS thread waiting for
    # the core the figures take made the verdict 1.5 s slower on 100,000 cells; no garbage
    # collection walks the libraries' objects meanwhile (`set_aside`)
    with set_aside(), Drawing(folder, panels) as drawing, \
            threadpool_limits(1, user_api="blas"):
        return _write(folder, drawing, panels, points_frame, runs, last,
                      recommendation or [], recommendation_sections or [], out)


def _write(folder: Path, drawing: Drawing, panels: list[str], points_frame: pd.DataFrame,
           runs: list[dict], last: dict | None, recommendation: list[str],
           recommendation_sections: list[tuple[str, list[str]]],
           out: str | Path | None) -> Outputs:
    with Store(folder, read_only=True) as store:
        state = store.state()
        frame = store.cells_frame(curves=False, columns=_READ)
        summaries = store.dataset_summaries()
        tuned = not frame.empty and bool(frame["tuned"].any())
        trials = store.trials_frame() if tuned else pd.DataFrame()
        refits = store.refits_frame() if tuned else pd.DataFrame()
    running = running_elsewhere(folder)
    if running is None:  # a run still marked running holds no lock: its process is gone
        last, runs = _gone(last), [_gone(r) for r in runs]
    status = run_status(folder, last, running)
    run = runs[-1] if runs else last
    target = writable_folder(out if out is not None else folder)
    (target / STATE_NAME).unlink(missing_ok=True)
    out = Outputs(target, status=status)
    provenance = dict((run or {}).get("provenance", {}))
    provenance["runs"] = [{"run": r["run"], "cells": r["cells"], "speedup_points": r["points"],
                           "state": r["state"], "command": r["command"],
                           "provenance": r["provenance"]} for r in runs]
    out.files.append(write_text(target / "provenance.json", json.dumps(provenance, indent=2)))
    images: dict[str, bytes] = {}

    def draw(name: str, fig) -> None:
        """Keep the figure (a matplotlib ``Figure`` or None) as PNG bytes and let it go (big
        figures take much memory)."""
        if fig is not None:
            from harness.report.images import png
            images[name] = png(fig)

    found: list[Table] = []
    n_cells, n_datasets = len(frame), frame["dataset"].nunique() if not frame.empty else 0
    n_strategies = frame["strategy"].nunique() if not frame.empty else 0
    if not frame.empty:
        shown = frame[frame["dataset"].isin(panels)]
        primary = primary_metrics(frame, provenance.get("metrics"))
        drawing.panels(Panels(primary, strategy_means(shown, primary),
                              shown[["strategy", "method", "family"]].drop_duplicates()))
        del shown
        v = verdict(frame, provenance.get("metrics"),
                    Equivalence.from_settings(provenance.get("equivalence")))
        v.posterior = drawn_posterior(v)  # only those drawn are kept
        out.verdict = v
        drawing.verdict(v)  # its figures are drawn beside the tables
        found += [tables.scores(frame), tables.costs(frame)]
        fails = tables.failures(frame)
        if not fails.data.empty:
            found.append(fails)
        if not v.intervals.empty:
            found += [tables.intervals(v), tables.pairs(v), tables.pareto(v),
                      tables.ranks(v, frame)]
            if v.tested:
                found += [tables.tests(v), tables.pairs_across(v)]
        if tuned:
            found += _tuning(frame, trials, refits, v, out, draw)
        out.files.append(write_text(target / SUMMARY_NAME, "# The short answer\n\n" + "".join(
            f"{md_text(s)}\n\n" for s in words.bottom_line(v)) + "## Details\n\n" + "".join(
            f"- {md_text(s)}\n" for s in words.details(v))
            + ("\n## What tuning buys\n\n" + "".join(f"- {md_text(s)}\n" for s in out.tuning)
               if out.tuning else "")))
        dataset_table = _dataset_table(summaries, frame, v)
        del frame  # the biggest frame is not needed past here
    else:
        dataset_table = pd.DataFrame()
    if not points_frame.empty:
        settings = [r["provenance"]["speedup"] for r in runs
                    if r["points"] and r["provenance"].get("speedup")]
        margin = float(settings[-1].get("noise_margin", 0.15)) if settings else 0.15
        points, fits = summarize(points_frame, noise_margin=margin)
        found += [tables.speedup_points(points, settings, margin),
                  tables.serial_fraction(fits)]
        out.speedup = tables.speedup_summary(points, fits)
        from harness.report import speedup_plots  # matplotlib, only with a speedup run
        draw("speedup", speedup_plots.speedup_plot(points, fits))
        draw("fit_time_vs_workers", speedup_plots.fit_time_plot(points, fits))
    for t in found:
        out.tables[t.name] = t
        out.files.append(write_text(target / "tables" / f"{t.name}.csv",
                                    t.data.to_csv(index=False)))
        out.files.append(write_text(target / "tables" / f"{t.name}.md", to_markdown(t)))
    images.update(drawing.result())
    for name, data in images.items():
        out.files.append(write_bytes(target / "plots" / f"{name}.png", data))
    content = PageContent(
        suite=(run or {}).get("suite") or folder.name,
        version=provenance.get("libraries", {}).get("woodlot", ""), n_cells=n_cells,
        n_datasets=n_datasets, n_strategies=n_strategies,
        verdict=out.verdict, tables=out.tables, images=images, datasets=dataset_table,
        failures=out.tables["failures"].data if "failures" in out.tables else pd.DataFrame(),
        provenance=_provenance_rows(run, n_cells, folder), runs=_runs_table(runs),
        suite_text=(run or {}).get("suite_text") or "", has_speedup=not points_frame.empty,
        recommendation=recommendation, recommendation_sections=recommendation_sections,
        status=status,
        panels_note=_panels_note(n_datasets), pairs_note=_pairs_note(out.verdict),
        tuning=out.tuning)
    out.files.append(write_text(target / REPORT_NAME, render(content)))
    write_text(target / STATE_NAME, state_text(state, target, out.files, partial=bool(status)))
    return out


def _pairs_note(v: Verdict | None) -> str:
    if v is None or v.across is None or len(v.across) <= MAX_PAIRS:
        return ""
    return (f"{len(v.ranks)} strategies make {len(v.across)} pairs: the pictures show the "
            f"{len(drawn_pairs(v))} pairs of the best-ranked strategy, {v.best} "
            "(more would take longer to draw than the rest of the report and be too tall to "
            "read); tables/pairs_across.csv has every pair.")


def _panels_note(n_datasets: int) -> str:
    if n_datasets <= MAX_PANELS:
        return ""
    return (f"Figures with one panel per dataset show the first {MAX_PANELS} of the "
            f"{n_datasets} datasets by name (more panels would take longer to draw than the "
            "rest of the report and be too tall to read); tables/scores.csv and "
            "tables/costs.csv have every dataset.")
