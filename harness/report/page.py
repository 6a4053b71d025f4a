"""``report.html``: one self-contained page with the verdict, the figures behind it and how the
results were made.

Self-contained means: CSS inline, every image a ``data:`` URI, no script, no font and no
request to any other address. A Content-Security-Policy in the page makes the browser refuse
anything else, so a slip shows up as a console error rather than as a silent download.
The page is built from the store's results frame, the verdict and the tables and plots
`harness.report.build.build_outputs` has just written.
"""

from __future__ import annotations

import base64
import html
import re
import time
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from harness import provenance
from harness.report.tables import _fmt, failures_table
from harness.report.verdicts import (COST_LABELS, interval_text, pair_outcome, ranks_frame,
                                     scale_text, standing)
from harness.verdict import Verdict, fmt_p, p_text

REPORT_NAME = "report.html"

# The caution paragraph of DEVELOPERS.md, verbatim (the tests check that it stays so).
CAUTION = ("**Caution.** A benchmark win does not transfer automatically. Scores here are "
           "measured on these datasets, with these splits and settings, on this machine. Before "
           "you act on them, validate the chosen method on your own data, and where the decision "
           "touches people (credit, health, hiring, insurance and the like) follow the rules that "
           "apply to you, including checks for fairness and for changes in the data over time.")

# (id, title) of every section, in page order; the speedup section only when the store has a
# sweep. The tests check that each of these is in the page and visible.
SECTIONS = [
    ("verdict", "The short answer"),
    ("ranks", "Ranks across datasets"),
    ("pairs-across", "Which differences hold up across datasets"),
    ("critical-difference", "Critical difference diagrams"),
    ("datasets", "Dataset by dataset"),
    ("cost", "Accuracy against cost"),
    ("ensemble-size", "Score as the ensemble grows"),
    ("speedup", "Using more cores"),
    ("failures", "Cells that did not finish"),
    ("provenance", "How these results were made"),
    ("caution", "Before you act on these results"),
]

# Only inline styles and data: images; no script, font, frame or connection of any kind.
_POLICY = "default-src 'none'; img-src data:; style-src 'unsafe-inline'"

_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,"Helvetica Neue",Arial,sans-serif;
 margin:0;color:#1d1d1f;background:#fafafa;line-height:1.45}
main{max-width:1180px;margin:0 auto;padding:1.2rem 1.6rem 3rem;background:#fff}
h1{font-size:1.6rem;margin:.4rem 0 .2rem}h2{font-size:1.25rem;margin:2.2rem 0 .6rem;
 border-bottom:2px solid #e3e3e3;padding-bottom:.25rem}h3{font-size:1.05rem;margin:1.4rem 0 .4rem}
h4{font-size:.95rem;margin:1rem 0 .3rem}
.meta{color:#555;font-size:.9rem}nav{font-size:.88rem;margin:.8rem 0}nav a{margin-right:.9rem}
table{border-collapse:collapse;margin:.4rem 0 1rem;font-size:.86rem}
th,td{border:1px solid #ddd;padding:.22rem .5rem;text-align:left;vertical-align:top}
th{background:#f2f2f2}td.num{text-align:right;font-variant-numeric:tabular-nums}
tr.best td{background:#e6f4ea;font-weight:600}tr.tied td{background:#f3f9f4}
tr.worse td{color:#666}tr.missing td{color:#a33}
.verdict li{margin:.3rem 0}.note{background:#fff8e1;border-left:4px solid #f0b400;
 padding:.5rem .8rem;margin:.6rem 0}
.caution{background:#fdecea;border-left:4px solid #c62828;padding:.7rem 1rem}
img{max-width:100%;height:auto;border:1px solid #eee;margin:.4rem 0}
pre{background:#f6f6f6;padding:.6rem;overflow-x:auto;font-size:.8rem}
details{margin:.3rem 0 1rem}summary{cursor:pointer;color:#234}
.small{font-size:.85rem;color:#444}
"""


# ------------------------------------------------------------------ small HTML helpers

def esc(x: Any) -> str:
    return html.escape("" if x is None else str(x), quote=True)


def _cell(v: Any) -> str:
    if isinstance(v, (bool, np.bool_)):
        return f"<td>{'yes' if v else 'no'}</td>"
    if isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, bool):
        return f'<td class="num">{esc(_fmt(v))}</td>'
    return f"<td>{esc(v)}</td>"


def table(frame: pd.DataFrame, row_classes: list[str] | None = None) -> str:
    if frame.empty:
        return "<p><em>(nothing to show)</em></p>"
    head = "".join(f"<th>{esc(c)}</th>" for c in frame.columns)
    body = []
    for i, row in enumerate(frame.itertuples(index=False)):
        cls = f' class="{row_classes[i]}"' if row_classes and row_classes[i] else ""
        body.append(f"<tr{cls}>" + "".join(_cell(v) for v in row) + "</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def image(path: Path, alt: str) -> str:
    data = base64.b64encode(path.read_bytes()).decode("ascii")
    return f'<img alt="{esc(alt)}" src="data:image/png;base64,{data}">'


def _inline(text: str) -> str:
    """Escape, then Markdown's inline code, bold and italic."""
    t = esc(text)
    t = re.sub(r"`([^`]+)`", r"<code>\1</code>", t)
    t = re.sub(r"\*\*(.+?)\*\*", r"<strong>\1</strong>", t)
    return re.sub(r"(?<![\w*])\*(?!\s)(.+?)(?<!\s)\*(?![\w*])", r"<em>\1</em>", t)


def markdown_html(text: str, shift: int = 2) -> str:
    """The Markdown our tables use (headings, paragraphs, ``-`` lists, pipe tables) as HTML;
    headings are moved down ``shift`` levels to sit inside a report section."""
    out, para, items, rows = [], [], [], []

    def flush() -> None:
        if para:
            out.append(f"<p>{_inline(' '.join(para))}</p>")
            para.clear()
        if items:
            out.append("<ul>" + "".join(f"<li>{_inline(i)}</li>" for i in items) + "</ul>")
            items.clear()
        if rows:
            cells = [[c.strip().replace("\\|", "|") for c in
                      re.split(r"(?<!\\)\|", r.strip().strip("|"))] for r in rows]
            body = [c for c in cells[1:] if not all(re.fullmatch(r":?-+:?", x) for x in c)]
            out.append("<table><thead><tr>" + "".join(f"<th>{_inline(c)}</th>" for c in cells[0])
                       + "</tr></thead><tbody>" + "".join(
                           "<tr>" + "".join(f"<td>{_inline(c)}</td>" for c in r) + "</tr>"
                           for r in body) + "</tbody></table>")
            rows.clear()

    for line in text.splitlines():
        s = line.strip()
        heading = re.match(r"(#{1,6})\s+(.*)", s)
        if not s:
            flush()
        elif heading:
            flush()
            level = min(6, len(heading.group(1)) + shift)
            out.append(f"<h{level}>{_inline(heading.group(2))}</h{level}>")
        elif s.startswith("|"):
            if para or items:
                flush()
            rows.append(s)
        elif s.startswith("- "):
            if para or rows:
                flush()
            items.append(s[2:])
        else:
            if rows:
                flush()
            para.append(s)
    flush()
    return "\n".join(out)


def _section(sid: str, body: str) -> str:
    title = dict(SECTIONS)[sid]
    return f'<section id="{sid}">\n<h2>{esc(title)}</h2>\n{body}\n</section>'


def _notes(notes: list[str]) -> str:
    return "".join(f'<p class="note">{esc(n)}</p>' for n in notes)


# ------------------------------------------------------------------ sections

def _verdict_section(v: Verdict | None) -> str:
    if v is None:
        return "<p>The store has no accuracy cells, so there is nothing to compare yet.</p>"
    items = "".join(f"<li>{esc(s)}</li>" for s in v.summary())
    return (f'<ul class="verdict">{items}</ul><p class="small">Every test uses α = '
            f"{v.alpha:g}. Ranks and tests count each dataset once; the per-dataset verdicts "
            "use the corrected resampled t-test over repeats × folds.</p>")


def _ranks_section(v: Verdict | None) -> str:
    if v is None or v.ranks is None:
        return "<p>No strategy has a score on any dataset.</p>"
    r = ranks_frame(v).rename(columns={
        "average_rank": "average rank", "fit_seconds": "fit s (geometric mean)",
        "predict_ms_per_1000_rows": "predict ms / 1,000 rows (geometric mean)",
        "on_fit_front": "on the fit-time front", "wilcoxon_tied_with_best":
        "tied with best (Wilcoxon–Holm)", "nemenyi_tied_with_best": "tied with best (Nemenyi)"})
    n, k = v.matrix.shape
    parts = [f"<p>{k} strategies ranked on each of {n} datasets by the dataset's first metric "
             "(1 = best, ties share the mean rank), then averaged. Classification and regression "
             "datasets pool by rank.</p>", table(r)]
    if v.tested:
        f = v.friedman
        parts.append(
            f"<p>Friedman test: χ²<sub>F</sub> = {f.chi2:.2f} ({f.f_df1} df), "
            f"{esc(fmt_p(f.chi2_p))}; Iman–Davenport F = {f.f:.2f} ({f.f_df1}, {f.f_df2} df), "
            f"{esc(fmt_p(f.f_p))}. Nemenyi critical difference at α = {v.alpha:g}: "
            f"{v.cd:.2f} ranks.</p>")
    parts.append(_notes(v.notes + [s[0].upper() + s[1:] + "." for s in v.left_out]))
    return "".join(parts)


def _pairs_across_section(v: Verdict | None) -> str:
    if v is None or not v.tested:
        return "<p>Not enough datasets or strategies for tests across datasets.</p>"
    a = v.across
    frame = pd.DataFrame({
        "a (ranked ahead)": a["a"], "b": a["b"],
        "average ranks": [f"{x:.2f} vs {y:.2f}" for x, y in zip(a["rank_a"], a["rank_b"])],
        "datasets a better": [f"{x} of {n}" for x, n in zip(a["a_wins"], a["n_datasets"])],
        "Wilcoxon p": [p_text(x) for x in a["p"]], "Holm p": [p_text(x) for x in a["p_holm"]],
        "Wilcoxon–Holm": ["differ" if x else "tied" for x in a["wilcoxon_differs"]],
        "Nemenyi": ["differ" if x else "tied" for x in a["nemenyi_differs"]],
        "win / tie / loss": [f"{w} / {t} / {l}" for w, t, l in
                             zip(a["wins"], a["ties"], a["losses"])]})
    classes = ["best" if x else "" for x in a["wilcoxon_differs"]]
    return (f"<p>The verdict across datasets is the Wilcoxon signed-rank test of each pair with "
            f"Holm's correction over all {len(a)} pairs: unlike a mean-rank test, its outcome "
            "for two strategies does not depend on which others are in the comparison. The "
            f"Nemenyi column compares average ranks with the critical difference ({v.cd:.2f}). "
            "Win / tie / loss counts datasets where a is significantly better, tied or "
            f"significantly worse by the per-dataset corrected t-test. {esc(scale_text(v))} "
            "Highlighted rows: pairs Wilcoxon–Holm tells apart.</p>" + table(frame, classes))


def _cd_section(v: Verdict | None, folder: Path) -> str:
    plots = folder / "plots"
    if v is None or not v.tested or not (plots / "critical_difference.png").exists():
        return "<p>Needs at least two datasets and two strategies scored on all of them.</p>"
    extra = ("" if v.friedman.f_p <= v.alpha else
             '<p class="note">The Friedman test does not reject equal ranks, so these bars '
             "describe the data rather than establish differences.</p>")
    return ("<p>Strategies on the average-rank axis, best on the left. A thick bar joins "
            "strategies the test does not tell apart. First the Nemenyi critical difference "
            f"(CD = {v.cd:.2f} ranks, shown as the scale bar); then the groups of the "
            "Wilcoxon–Holm verdict.</p>" + extra
            + image(plots / "critical_difference.png", "critical difference diagram (Nemenyi)")
            + (image(plots / "wilcoxon_holm_groups.png", "groups not told apart by Wilcoxon–Holm")
               if (plots / "wilcoxon_holm_groups.png").exists() else ""))


def _datasets_section(v: Verdict | None, datasets: pd.DataFrame) -> str:
    if v is None or v.intervals.empty:
        return "<p>No dataset has a successful cell.</p>"
    level = f"{1 - v.alpha:.0%}"
    parts = [f"<p>Each strategy's mean over repeats × folds of the dataset's first metric "
             f"(higher is better) with its {level} corrected interval (Nadeau &amp; Bengio; "
             "Bouckaert &amp; Frank). <em>Tied with best</em>: the corrected resampled t-test "
             f"against the best strategy does not reject equality at α = {v.alpha:g}. Cells: "
             "successful of stored.</p>"]
    if not datasets.empty:
        parts.append(table(datasets))
    for ds, part in v.intervals.groupby("dataset", sort=False):
        part = part.iloc[part["mean"].fillna(-np.inf).to_numpy().argsort(kind="stable")[::-1]]
        frame = pd.DataFrame({
            "strategy": part["strategy"], "family": part["family"],
            f"mean [{level} interval]": [interval_text(*x) for x in
                                         zip(part["mean"], part["low"], part["high"])],
            "standing": [standing(r) for _, r in part.iterrows()],
            "cells": [f"{int(c)}/{int(p)}" for c, p in zip(part["cells"], part["planned"])],
            "fit s": part["fit_seconds"],
            "predict ms / 1,000 rows": part["predict_ms_per_1000_rows"]})
        classes = [{"best": "best", "tied with best": "tied", "worse than best": "worse"}
                   .get(s, "missing") for s in frame["standing"]]
        pairs = v.pairs[v.pairs["dataset"] == ds]
        pf = pd.DataFrame({
            "a": pairs["a"], "b": pairs["b"], "cells": pairs["pairs"],
            "a − b [interval]": [interval_text(*x) for x in
                                 zip(pairs["mean_diff"], pairs["low"], pairs["high"])],
            "p": [p_text(x) for x in pairs["p"]],
            "outcome": [pair_outcome(r) for _, r in pairs.iterrows()]})
        pclasses = ["" if t else "best" for t in pairs["tied"]]
        parts.append(f"<h3>{esc(ds)} <span class=\"small\">({esc(part['metric'].iloc[0])})"
                     f"</span></h3>" + table(frame, classes)
                     + f"<details><summary>All {len(pf)} pairs on {esc(ds)} (corrected t-test)"
                     "</summary>" + table(pf, pclasses) + "</details>")
    return "".join(parts)


def _cost_section(v: Verdict | None, folder: Path) -> str:
    plots = folder / "plots"
    parts = ["<p>Fit and prediction times are means over folds, measured with cells running "
             "side by side, one thread each, on a machine that may have been busy: read small "
             "differences as noise. A strategy is <em>dominated</em> when another is at least as "
             "accurate and at least as cheap, one of them strictly.</p>"]
    if (plots / "score_vs_fit_time.png").exists():
        parts.append(image(plots / "score_vs_fit_time.png", "score against fit time per dataset"))
    if (plots / "rank_vs_fit_time.png").exists():
        parts.append(image(plots / "rank_vs_fit_time.png",
                           "average rank against fit time over all datasets"))
    if v is None or v.pareto is None or v.pareto.empty:
        return "".join(parts)
    scopes = sorted(dict.fromkeys(v.pareto["scope"]), key=lambda s: s != "all datasets")
    for scope in scopes:  # all datasets first, then each dataset
        part = v.pareto[v.pareto["scope"] == scope]
        what = "average rank" if scope == "all datasets" else v.primary.get(scope, "score")
        fit, pred = (part[part["cost_kind"] == k].set_index("strategy") for k in COST_LABELS)
        order = fit["score"].sort_values(ascending=scope == "all datasets").index
        frame = pd.DataFrame({
            "strategy": order, what: fit.loc[order, "score"].to_numpy(),
            COST_LABELS["fit"]: fit.loc[order, "cost"].to_numpy(),
            "fit: dominated by": [fit.loc[s, "dominated_by"] or "on the front" for s in order],
            COST_LABELS["predict"]: pred["cost"].reindex(order).to_numpy(),
            "prediction: dominated by": [pred["dominated_by"].get(s) or "on the front"
                                         for s in order]})
        title = ("All datasets (average rank; times are geometric means over datasets)"
                 if scope == "all datasets" else scope)
        parts.append(f"<h3>{esc(title)}</h3>" + table(frame))
    return "".join(parts)


def _ensemble_section(folder: Path) -> str:
    p = folder / "plots" / "ensemble_size.png"
    if not p.exists():
        return "<p>No ensemble-size curves were recorded.</p>"
    return ("<p>Test score of the first n members (trees or boosting stages) of each fitted "
            "ensemble, mean over folds: where a curve flattens, more members buy little.</p>"
            + image(p, "score against ensemble size"))


def _speedup_section(folder: Path) -> str:
    parts = ["<p>From the speedup sweep, which fits each strategy alone at each worker "
             "count.</p>"]
    md = folder / "tables" / "speedup.md"
    if md.exists():
        text = md.read_text(encoding="utf-8")
        text = re.sub(r"\A#\s+[^\n]*\n", "", text)  # the section has its own title
        parts.append(markdown_html(text))
    for name, alt in (("speedup.png", "parallel speedup against workers"),
                      ("fit_time_vs_workers.png", "fit time against workers")):
        if (folder / "plots" / name).exists():
            parts.append(image(folder / "plots" / name, alt))
    if len(parts) == 1:
        parts.append("<p>The sweep tables have not been written.</p>")
    return "".join(parts)


def _failures_section(frame: pd.DataFrame) -> str:
    bad = failures_table(frame) if not frame.empty else pd.DataFrame()
    if bad.empty:
        return "<p>Every stored cell of the latest plan finished successfully.</p>"
    counts = bad.groupby(["dataset", "strategy", "status"]).size().rename("cells").reset_index()
    return (f"<p>{len(bad)} cell{'s' if len(bad) != 1 else ''} failed or timed out. A strategy "
            "with no successful cell on a dataset has no score there and is left out of the "
            "comparisons that need one (named in the ranks section).</p>" + table(counts)
            + "<details><summary>Every failed cell</summary>" + table(bad) + "</details>")


def _provenance_section(run: dict | None, frame: pd.DataFrame, folder: Path) -> str:
    prov = (run or {}).get("provenance", {}) or {}
    def when(t):
        return time.strftime("%Y-%m-%d %H:%M:%S", time.localtime(t)) if t else "–"
    rows = [("suite", prov.get("suite", (run or {}).get("suite"))),
            ("command", prov.get("command", (run or {}).get("command"))),
            ("run", f"{(run or {}).get('run', '–')}: started {when((run or {}).get('started'))}, "
                    f"finished {when((run or {}).get('finished'))} ({(run or {}).get('state')})"),
            ("cells in the latest plan", len(frame)),
            ("executor", provenance.executor_text(prov)),
            ("timing", prov.get("timing")),
            ("machine", f"{prov.get('cpu_model', '?')}, {prov.get('cores', '?')} cores, "
                        f"{prov.get('platform', '?')}, host {prov.get('host', '?')}"),
            ("load average (1, 5, 15 min)", f"before {prov.get('load_average')}, after "
                                            f"{prov.get('load_average_after')}"),
            ("Python", prov.get("python")),
            ("libraries", ", ".join(f"{k} {v}" for k, v in prov.get("libraries", {}).items())),
            ("results folder", str(folder))]
    body = table(pd.DataFrame(rows, columns=["what", "value"]).astype(str))
    text = (run or {}).get("suite_text")
    if text:
        body += ("<details><summary>The suite file as run</summary><pre>" + esc(text)
                 + "</pre></details>")
    return body + ("<p class=\"small\">Every number in this page is computed from "
                   "<code>cells.sqlite</code> in the results folder; <code>woodlot report "
                   "FOLDER</code> writes it again.</p>")


def _caution_section() -> str:
    return f'<p class="caution">{_inline(CAUTION)}</p>'


# ------------------------------------------------------------------ the page

def render(folder: Path, frame: pd.DataFrame, v: Verdict | None, run: dict | None,
           datasets: pd.DataFrame, has_sweep: bool) -> str:
    suite = (run or {}).get("suite") or folder.name
    prov = (run or {}).get("provenance", {}) or {}
    sections = {
        "verdict": _verdict_section(v), "ranks": _ranks_section(v),
        "pairs-across": _pairs_across_section(v), "critical-difference": _cd_section(v, folder),
        "datasets": _datasets_section(v, datasets), "cost": _cost_section(v, folder),
        "ensemble-size": _ensemble_section(folder),
        "speedup": _speedup_section(folder) if has_sweep else None,
        "failures": _failures_section(frame),
        "provenance": _provenance_section(run, frame, folder), "caution": _caution_section()}
    shown = [(sid, title) for sid, title in SECTIONS if sections[sid] is not None]
    nav = "".join(f'<a href="#{sid}">{esc(t)}</a>' for sid, t in shown)
    n_ds = frame["dataset"].nunique() if not frame.empty else 0
    n_st = frame["strategy"].nunique() if not frame.empty else 0
    body = "\n".join(_section(sid, sections[sid]) for sid, _ in shown)
    version = prov.get("libraries", {}).get("woodlot", "")
    return f"""<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<meta http-equiv="Content-Security-Policy" content="{_POLICY}">
<title>woodlot report: {esc(suite)}</title>
<style>{_CSS}</style>
</head>
<body>
<main>
<h1>woodlot report: {esc(suite)}</h1>
<p class="meta">{n_ds} datasets × {n_st} strategies, {len(frame)} cells · written
{esc(time.strftime("%Y-%m-%d %H:%M"))} · woodlot {esc(version)}</p>
<nav>{nav}</nav>
{body}
</main>
</body>
</html>
"""


def write(out, frame: pd.DataFrame, v: Verdict | None, run: dict | None,
          datasets: pd.DataFrame | None = None, has_sweep: bool = False) -> Path:
    """Write ``report.html`` into ``out.folder`` (through a temporary file) and return its path.

    ``datasets`` is the store's dataset summaries (`harness.store.Store.dataset_summaries`);
    only datasets of the latest plan are shown.
    """
    from harness.report.build import write_text

    folder = Path(out.folder)
    ds = _dataset_table(datasets, frame, v)
    return write_text(folder / REPORT_NAME, render(folder, frame, v, run, ds, has_sweep))


def _dataset_table(datasets: pd.DataFrame | None, frame: pd.DataFrame,
                   v: Verdict | None) -> pd.DataFrame:
    if datasets is None or datasets.empty or frame.empty or "fingerprint" not in datasets:
        return pd.DataFrame()
    fps = set(frame["fingerprint"].str[:12]) | set(frame["fingerprint"])
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
