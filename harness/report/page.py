"""``report.html``: one self-contained page with the verdict, the figures behind it and how the
results were made.

Self-contained means: CSS inline, every image a ``data:`` URI, no script, no font and no
request to any other address. A Content-Security-Policy in the page makes the browser refuse
anything else, so a slip shows up as a console error rather than as a silent download. The
page is rendered from the same `Table` objects as ``tables/*.md`` and from the PNG bytes of
the plots; it reads no file.
"""

from __future__ import annotations

import base64
import re
import time
from dataclasses import dataclass, field
from typing import Any

import pandas as pd

from harness.analysis.verdict import Verdict
from harness.report import words
from harness.report.render import Table, esc, fmt_p, html_table, to_html

REPORT_NAME = "report.html"

# The caution paragraph of DEVELOPERS.md, verbatim (the tests check that it stays so).
CAUTION = ("**Caution.** A benchmark win does not transfer automatically. Scores here are "
           "measured on these datasets, with these splits and settings, on this machine. Before "
           "you act on them, validate the chosen method on your own data, and where the decision "
           "touches people (credit, health, hiring, insurance and the like) follow the rules that "
           "apply to you, including checks for fairness and for changes in the data over time.")

# (id, title) of every section, in page order; the recommendation only for `woodlot choose`,
# the across-dataset sections only with at least two datasets, the speedup section only when
# the store has a speedup run, the tuning section only when some strategy was tuned. The
# tests check that each shown is in the page and visible.
SECTIONS = [
    ("recommendation", "Recommendation"),
    ("verdict", "The short answer"),
    ("ranks", "Ranks across datasets"),
    ("pairs-across", "Which differences hold up across datasets"),
    ("pictures", "How sure: each pair across datasets"),
    ("critical-difference", "Critical difference diagrams"),
    ("datasets", "Dataset by dataset"),
    ("cost", "Accuracy against cost"),
    ("ensemble-size", "Score as the ensemble grows"),
    ("tuning", "What tuning buys"),
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
.verdict li{margin:.3rem 0}.bottom{font-size:1.08rem;background:#eef4fb;
 border-left:4px solid #1f4e79;padding:.1rem .9rem}.bottom p{margin:.5rem 0}.note{background:#fff8e1;border-left:4px solid #f0b400;
 padding:.5rem .8rem;margin:.6rem 0}
.caution{background:#fdecea;border-left:4px solid #c62828;padding:.7rem 1rem}
img{max-width:100%;height:auto;border:1px solid #eee;margin:.4rem 0}
pre{background:#f6f6f6;padding:.6rem;overflow-x:auto;font-size:.8rem}
details{margin:.3rem 0 1rem}summary{cursor:pointer;color:#234}
.small{font-size:.85rem;color:#444}
"""



@dataclass
class PageContent:
    """What the page shows; every part optional except the run's identity."""

    suite: str
    version: str = ""
    n_cells: int = 0
    n_datasets: int = 0
    n_strategies: int = 0
    verdict: Verdict | None = None
    tables: dict[str, Table] = field(default_factory=dict)   # by Table.name
    images: dict[str, bytes] = field(default_factory=dict)   # plot name → PNG bytes
    datasets: pd.DataFrame = field(default_factory=pd.DataFrame)
    failures: pd.DataFrame = field(default_factory=pd.DataFrame)
    provenance: list[tuple[str, Any]] = field(default_factory=list)
    runs: pd.DataFrame = field(default_factory=pd.DataFrame)  # the runs that computed them
    suite_text: str = ""
    has_speedup: bool = False
    # woodlot choose: its sentences, then (title, items) such as warnings
    recommendation: list[str] = field(default_factory=list)
    recommendation_sections: list[tuple[str, list[str]]] = field(default_factory=list)
    status: str = ""  # said at the top when the results are partial
    panels_note: str = ""  # when per-dataset figures show only some of the datasets
    pairs_note: str = ""   # when the verdict pictures show only some of the pairs
    tuning: list[str] = field(default_factory=list)  # sentences; empty when nothing was tuned


# ------------------------------------------------------------------ small helpers

def image(png: bytes, alt: str) -> str:
    data = base64.b64encode(png).decode("ascii")
    return f'<img alt="{esc(alt)}" src="data:image/png;base64,{data}">'


def _inline(text: str) -> str:
    """Escape, then Markdown's bold (the caution paragraph's one mark-up)."""
    return re.sub(r"\*\*(.+?)\*\*", r"<strong>\1</strong>", esc(text))


def _section(sid: str, body: str) -> str:
    title = dict(SECTIONS)[sid]
    return f'<section id="{sid}">\n<h2>{esc(title)}</h2>\n{body}\n</section>'


def _notes(notes: list[str]) -> str:
    return "".join(f'<p class="note">{esc(n)}</p>' for n in notes)


def _img(c: PageContent, name: str, alt: str) -> str:
    return image(c.images[name], alt) if name in c.images else ""


# ------------------------------------------------------------------ sections

def _recommendation_section(c: PageContent) -> str:
    items = "".join(f"<li>{esc(x)}</li>" for x in c.recommendation)
    parts = [f'<ul class="verdict">{items}</ul>']
    for title, lines in c.recommendation_sections:
        parts.append(f"<h3>{esc(title)}</h3><ul>"
                     + "".join(f"<li>{esc(x)}</li>" for x in lines) + "</ul>")
    return "".join(parts)


def _verdict_section(c: PageContent) -> str:
    v = c.verdict
    if v is None:
        return "<p>The store has no accuracy cells, so there is nothing to compare yet.</p>"
    bottom = "".join(f"<p>{esc(s)}</p>" for s in words.bottom_line(v))
    items = "".join(f"<li>{esc(s)}</li>" for s in words.details(v))
    return (f'<div class="bottom">{bottom}</div><ul class="verdict">{items}</ul>'
            '<p class="small">Verdicts: better, practically equivalent or undecided, from the '
            "posterior probability of each. Ranks and tests count each dataset once; the "
            "per-dataset verdicts use the Bayesian correlated t-test over repeats × folds, or "
            "the test rows when a dataset has one split. The frequentist tests use "
            f"α = {v.alpha:g}.</p>")


def _pictures_section(c: PageContent) -> str:
    if "probability_bars" not in c.images:
        return "<p>Needs at least two datasets and two strategies scored on all of them.</p>"
    return ("<p>For each pair (first vs second, the first ranked ahead), the bar splits "
            "the probability between the first being better by more than the region of "
            "practical equivalence, the two being practically equivalent, and the second being "
            "better. A verdict needs one colour to span both dotted lines (at least the "
            "certainty).</p>"
            + _notes([c.pairs_note] if c.pairs_note else [])
            + _img(c, "probability_bars", "probabilities of each outcome per pair")
            + "<p>The triangles show the same posterior as a cloud of samples: each dot is one "
              "plausible set of the three probabilities; a cloud packed into one corner is a "
              "clear verdict, a cloud spread over two regions an undecided one.</p>"
            + _img(c, "posterior_triangles", "posterior triangle per pair"))


def _ranks_section(c: PageContent) -> str:
    v = c.verdict
    if v is None or v.ranks is None:
        return "<p>No strategy has a score on any dataset.</p>"
    parts = [to_html(c.tables["ranks"])]
    if v.tested:
        f = v.friedman
        parts.append(
            f"<p>Friedman test: χ²<sub>F</sub> = {f.chi2:.2f} ({f.f_df1} df), "
            f"{esc(fmt_p(f.chi2_p))}; Iman–Davenport F = {f.f:.2f} ({f.f_df1}, {f.f_df2} df), "
            f"{esc(fmt_p(f.f_p))}. Nemenyi critical difference at α = {v.alpha:g}: "
            f"{v.cd:.2f} ranks.</p>")
    parts.append(_notes(words.notes(v)))
    return "".join(parts)


def _pairs_across_section(c: PageContent) -> str:
    if "pairs_across" not in c.tables:
        return "<p>Not enough datasets or strategies for tests across datasets.</p>"
    return to_html(c.tables["pairs_across"]) + \
        '<p class="small">Highlighted rows: pairs Wilcoxon–Holm tells apart.</p>'


def _cd_section(c: PageContent) -> str:
    v = c.verdict
    if v is None or not v.tested or "critical_difference" not in c.images:
        return "<p>Needs at least two datasets and two strategies scored on all of them.</p>"
    extra = ("" if v.friedman.f_p <= v.alpha else
             '<p class="note">The Friedman test does not reject equal ranks, so these bars '
             "describe the data rather than establish differences.</p>")
    return ("<p>Strategies on the average-rank axis, best on the left. A thick bar joins "
            "strategies the test does not tell apart. First the Nemenyi critical difference "
            f"(CD = {v.cd:.2f} ranks, shown as the scale bar); then the groups of the "
            "Wilcoxon–Holm verdict.</p>" + extra
            + _img(c, "critical_difference", "critical difference diagram (Nemenyi)")
            + _img(c, "wilcoxon_holm_groups", "groups not told apart by Wilcoxon–Holm"))


def _datasets_section(c: PageContent) -> str:
    v = c.verdict
    if v is None or v.intervals.empty:
        return "<p>No dataset has a successful cell.</p>"
    iv, pairs = c.tables["intervals"], c.tables["pairs"]
    parts = [f"<p>{esc(iv.intro)}</p>"]
    if not c.datasets.empty:
        parts.append(html_table(c.datasets))
    counts = v.pairs.groupby("dataset", sort=False).size()
    for ds in v.intervals["dataset"].unique():
        parts.append(f"<h3>{esc(iv.group_titles.get(ds, ds))}</h3>" + to_html(iv, only=ds)
                     + f"<details><summary>All {int(counts.get(ds, 0))} pairs on {esc(ds)} "
                     "(corrected t-test)</summary>" + to_html(pairs, only=ds) + "</details>")
    return "".join(parts)


def _cost_section(c: PageContent) -> str:
    parts = ["<p>Fit and prediction times are means over folds, measured with cells running "
             "side by side, one thread each, on a machine that may have been busy: read small "
             "differences as noise. A strategy is <em>dominated</em> when another is at least as "
             "accurate and at least as cheap, one of them strictly.</p>",
             _notes([c.panels_note] if c.panels_note else []),
             _img(c, "score_vs_fit_time", "score against fit time per dataset"),
             _img(c, "rank_vs_fit_time", "average rank against fit time over all datasets")]
    if "pareto" in c.tables and not c.tables["pareto"].display.empty:
        parts.append(to_html(c.tables["pareto"]))
    return "".join(parts)


def _ensemble_section(c: PageContent) -> str:
    if "ensemble_size" not in c.images:
        return "<p>No ensemble-size curves were recorded.</p>"
    return ("<p>Test score of the first n members (trees or boosting stages) of each fitted "
            "ensemble, mean over folds: where a curve flattens, more members buy little.</p>"
            + _notes([c.panels_note] if c.panels_note else [])
            + _img(c, "ensemble_size", "score against ensemble size"))


def _tuning_section(c: PageContent) -> str:
    items = "".join(f"<li>{esc(x)}</li>" for x in c.tuning)
    parts = [f'<ul class="verdict">{items}</ul>',
             "<p>Each tuned strategy was searched inside every outer training part (nested "
             "resampling): configurations scored on inner folds of the training rows only, the "
             "best refit on them and scored once on the outer test rows. The first "
             "configuration tried is the one given, so the same run measures the untuned "
             "strategy. Curves: the outer-test score of the best configuration among the "
             "first trials (solid) against the inner score that chose it (dashed); where the "
             "solid line flattens, more budget buys little.</p>",
             _img(c, "tuning_curves", "tuning curves: score against trials")]
    for name in ("tuning_gains", "tuning_summary", "tuning_ranks", "chosen_configurations"):
        if name in c.tables:
            t = c.tables[name]
            parts.append(f"<h3>{esc(t.title)}</h3>" + to_html(t, level=4))
    return "".join(parts)


def _speedup_section(c: PageContent) -> str:
    parts = ["<p>From the speedup run, which fits each strategy alone at each worker "
             "count.</p>"]
    for name in ("speedup", "serial_fraction"):
        if name in c.tables:
            t = c.tables[name]
            parts.append(f"<h3>{esc(t.title)}</h3>" + to_html(t, level=4))
    parts.append(_img(c, "speedup", "parallel speedup against workers"))
    parts.append(_img(c, "fit_time_vs_workers", "fit time against workers"))
    return "".join(parts)


def _failures_section(c: PageContent) -> str:
    bad = c.failures
    if bad.empty:
        return "<p>Every stored cell of the latest plan finished successfully.</p>"
    counts = bad.groupby(["dataset", "strategy", "status"]).size().rename("cells").reset_index()
    return (f"<p>{len(bad)} cell{'s' if len(bad) != 1 else ''} failed or timed out. A strategy "
            "with no successful cell on a dataset has no score there and is left out of the "
            "comparisons that need one (named in the ranks section).</p>" + html_table(counts)
            + "<details><summary>Every failed cell</summary>" + html_table(bad) + "</details>")


def _provenance_section(c: PageContent) -> str:
    body = ""
    if not c.runs.empty:
        body += ("<h3>Which runs computed these results</h3><p>Each cell and speedup point "
                 "keeps the run that computed it; a later run that found everything stored "
                 "computed nothing and is not listed.</p>" + html_table(c.runs))
        body += "<h3>The latest of these runs</h3>"
    body += html_table(pd.DataFrame(c.provenance, columns=["what", "value"]).astype(str))
    if c.suite_text:
        body += ("<details><summary>The suite file as run</summary><pre>" + esc(c.suite_text)
                 + "</pre></details>")
    return body + ("<p class=\"small\">Every number in this page is computed from "
                   "<code>cells.sqlite</code> in the results folder; <code>woodlot report "
                   "FOLDER</code> writes it again.</p>")


def _caution_section() -> str:
    return f'<p class="caution">{_inline(CAUTION)}</p>'


# ------------------------------------------------------------------ the page

def render(c: PageContent) -> str:
    across = c.verdict is not None and c.verdict.tested
    sections = {
        "recommendation": _recommendation_section(c) if c.recommendation else None,
        "verdict": _verdict_section(c),
        "ranks": _ranks_section(c) if across else None,
        "pairs-across": _pairs_across_section(c) if across else None,
        "pictures": _pictures_section(c) if across else None,
        "critical-difference": _cd_section(c) if across else None,
        "datasets": _datasets_section(c), "cost": _cost_section(c),
        "ensemble-size": _ensemble_section(c),
        "tuning": _tuning_section(c) if c.tuning else None,
        "speedup": _speedup_section(c) if c.has_speedup else None,
        "failures": _failures_section(c), "provenance": _provenance_section(c),
        "caution": _caution_section()}
    shown = [(sid, title) for sid, title in SECTIONS if sections[sid] is not None]
    nav = "".join(f'<a href="#{sid}">{esc(t)}</a>' for sid, t in shown)
    body = "\n".join(_section(sid, sections[sid]) for sid, _ in shown)
    return f"""<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<meta http-equiv="Content-Security-Policy" content="{_POLICY}">
<title>woodlot report: {esc(c.suite)}</title>
<style>{_CSS}</style>
</head>
<body>
<main>
<h1>woodlot report: {esc(c.suite)}</h1>
<p class="meta">{c.n_datasets} datasets × {c.n_strategies} strategies, {c.n_cells} cells · written
{esc(time.strftime("%Y-%m-%d %H:%M"))} · woodlot {esc(c.version)}</p>
{_notes([c.status] if c.status else [])}
<nav>{nav}</nav>
{body}
</main>
</body>
</html>
"""
