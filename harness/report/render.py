"""How numbers, metric names and tables look to a reader, in Markdown and in HTML.

A display table is a `Table`: built once as a frame (`harness.report.tables`) and rendered
from that frame to Markdown (``tables/*.md``) and to HTML (``report.html``); its raw numbers
go to ``tables/*.csv``.
"""

from __future__ import annotations

import html
import re
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

# Scorer name → (what people call it, whether the stored value is negated). Stored scores
# are scikit-learn scorer values (higher is better); people read errors as positive numbers.
_LABELS = {
    "accuracy": "accuracy", "balanced_accuracy": "balanced accuracy", "roc_auc": "ROC AUC",
    "roc_auc_ovr": "ROC AUC (one vs rest)", "roc_auc_ovo": "ROC AUC (one vs one)",
    "average_precision": "average precision", "f1": "F1", "f1_macro": "F1 (macro)",
    "f1_micro": "F1 (micro)", "f1_weighted": "F1 (weighted)", "r2": "R²",
    "explained_variance": "explained variance", "matthews_corrcoef": "Matthews correlation",
    "neg_log_loss": "log loss", "neg_brier_score": "Brier score",
    "neg_root_mean_squared_error": "RMSE", "neg_mean_squared_error": "MSE",
    "neg_mean_absolute_error": "MAE", "neg_median_absolute_error": "median absolute error",
    "neg_mean_absolute_percentage_error": "MAPE", "neg_root_mean_squared_log_error": "RMSLE",
    "neg_mean_squared_log_error": "MSLE",
}


def metric_label(metric: str) -> str:
    """``neg_root_mean_squared_error`` → ``RMSE``; unknown scorers keep their name."""
    if metric in _LABELS:
        return _LABELS[metric]
    return metric[4:].replace("_", " ") if metric.startswith("neg_") else metric.replace("_", " ")


def lower_is_better(metric: str) -> bool:
    """Whether people read ``metric`` as an error (the scorer stores it negated)."""
    return metric.startswith("neg_")


def metric_heading(metric: str) -> str:
    """``RMSE (lower is better)``."""
    return f"{metric_label(metric)} ({'lower' if lower_is_better(metric) else 'higher'} is better)"


def as_read(metric: str, value):
    """A stored scorer value as people read the metric (errors positive)."""
    return -value if lower_is_better(metric) else value


def number(v, digits: int = 4) -> str:
    """A number with ``digits`` significant digits, never in scientific notation; large
    numbers with thousands separators; '' for missing."""
    if v is None or isinstance(v, str):
        return "" if v is None else v
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if isinstance(v, (int, np.integer)):
        return f"{int(v):,}" if abs(int(v)) >= 10_000 else str(int(v))
    v = float(v)
    if not np.isfinite(v):
        return "" if np.isnan(v) else ("∞" if v > 0 else "−∞")
    if abs(v) >= 10 ** digits:
        return f"{v:,.0f}"
    text = np.format_float_positional(v, precision=digits, unique=False, fractional=False,
                                      trim="-")
    return "0" if text in ("-0", "0") else text


def interval(mean, low, high, digits: int = 4) -> str:
    """``0.95 [0.93, 0.97]``; the mean alone when there is no interval."""
    if mean is None or pd.isna(mean):
        return "no successful cell"
    if low is None or pd.isna(low):
        return number(mean, digits)
    return f"{number(mean, digits)} [{number(low, digits)}, {number(high, digits)}]"


def p_text(p) -> str:
    """``0.041``, ``< 0.001``, ``0.41``; ``–`` when no test was possible."""
    if p is None or not np.isfinite(p):
        return "–"
    return "< 0.001" if p < 0.001 else f"{p:.3f}" if p < 0.1 else f"{p:.2f}"


def fmt_p(p) -> str:
    """``p = 0.041``, ``p < 0.001``; ``p = –`` when no test was possible."""
    text = p_text(p)
    return f"p {text}" if text.startswith("<") else f"p = {text}"


def esc(x) -> str:
    return html.escape("" if x is None else str(x), quote=True)


def md_text(x) -> str:
    """Running text for Markdown: a ``<`` that could open an HTML tag (followed by a letter,
    ``/``, ``!`` or ``?``) is escaped, so a name can never become markup in a Markdown viewer;
    the rest ("p < 0.001", "Nadeau & Bengio") stays as written."""
    return re.sub(r"<(?=[A-Za-z/!?])", "&lt;", "" if x is None else str(x))


@dataclass
class Table:
    """One table of the report.

    ``data`` is written to CSV as it is (raw numbers, scorer values); ``display`` is what a
    reader sees (rendered to Markdown and HTML), with ``group`` naming a column of
    ``display`` that splits it into one section per value (that column is not shown).
    ``row_classes`` (one per display row: best, tied, worse, missing, or '') colour HTML rows.
    """

    name: str
    title: str
    data: pd.DataFrame
    display: pd.DataFrame
    intro: str = ""
    group: str | None = None
    group_titles: dict[str, str] = field(default_factory=dict)
    row_classes: list[str] | None = None
    footer: str = ""

    _groups: list | None = field(default=None, init=False, repr=False, compare=False)

    @classmethod
    def per_dataset(cls, name: str, title: str, data: pd.DataFrame, rows: list[dict],
                    classes: list[str], titles: dict[str, str], intro: str) -> "Table":
        """A table of display ``rows`` (each with a ``dataset``), one section per dataset."""
        return cls(name, title, data, pd.DataFrame(rows), group="dataset" if rows else None,
                   group_titles=titles, row_classes=classes, intro=intro)

    def groups(self) -> list[tuple[str | None, "Cells", list[str] | None]]:
        """(group value or None, its display rows without the group column as `Cells`, row
        classes); worked out once per table."""
        if self._groups is not None:
            return self._groups
        classes = self.row_classes or [""] * len(self.display)
        if self.group is None:
            self._groups = [(None, Cells.of(self.display), classes)]
            return self._groups
        cells = Cells.of(self.display.drop(columns=[self.group]))  # once, then split
        codes, values = pd.factorize(self.display[self.group], use_na_sentinel=False)
        order = np.argsort(codes, kind="stable")  # groups in order of first appearance
        ends = np.cumsum(np.bincount(codes, minlength=len(values)))
        self._groups = [(str(g), cells.take(at), [classes[i] for i in at])
                        for g, at in zip(values, np.split(order, ends[:-1]))]
        return self._groups


def _cell_text(v) -> str:
    return number(v) if not isinstance(v, str) else v


@dataclass(frozen=True)
class Cells:
    """A display frame's header and cells as escaped text, column by column, with which
    cells are numbers (right-aligned) and which columns are numeric (Markdown alignment):
    worked out once per table, for its Markdown and its HTML."""

    header: list[str]
    columns: list[list[str]]
    numeric: list[list[bool]]
    numeric_columns: list[bool]

    @classmethod
    def of(cls, frame: pd.DataFrame) -> "Cells":
        columns, numeric, kinds = [], [], []
        for c in frame.columns:
            values = frame[c].tolist()  # Python scalars, whatever the column's dtype
            is_number = [isinstance(v, (int, float, np.integer, np.floating))
                         and not isinstance(v, (bool, np.bool_)) for v in values]
            texts: dict[str, str] = {}  # the same text (a strategy's name) escaped once

            def text(v, texts=texts) -> str:
                if not isinstance(v, str):
                    return esc(_cell_text(v))
                if v not in texts:
                    texts[v] = esc(v)
                return texts[v]

            # a number's text is digits, signs and separators: nothing to escape
            columns.append([number(v) if n else text(v) for v, n in zip(values, is_number)])
            numeric.append(is_number)
            kinds.append(pd.api.types.is_numeric_dtype(frame[c])
                         and not pd.api.types.is_bool_dtype(frame[c]))
        return cls([esc(c) for c in frame.columns], columns, numeric, kinds)

    def take(self, rows) -> "Cells":
        """The cells of these rows (positions), in that order."""
        return Cells(self.header, [[col[i] for i in rows] for col in self.columns],
                     [[n[i] for i in rows] for n in self.numeric], self.numeric_columns)

    def rows(self) -> int:
        return len(self.columns[0]) if self.columns else 0


def markdown_table(frame: pd.DataFrame | Cells) -> str:
    """A GitHub-style Markdown table; text is escaped (``|`` and HTML), numbers formatted."""
    cells = frame if isinstance(frame, Cells) else Cells.of(frame)
    if not cells.rows():
        return "_(nothing to show)_\n"
    def line(texts) -> str:
        return "| " + " | ".join(t.replace("|", "\\|") for t in texts) + " |"
    lines = [line(cells.header),
             "|" + "|".join("---:" if k else "---" for k in cells.numeric_columns) + "|"]
    lines += [line(row) for row in zip(*cells.columns)]
    return "\n".join(lines) + "\n"


def html_table(frame: pd.DataFrame | Cells, row_classes: list[str] | None = None) -> str:
    cells = frame if isinstance(frame, Cells) else Cells.of(frame)
    if not cells.rows():
        return "<p><em>(nothing to show)</em></p>"
    head = "".join(f"<th>{c}</th>" for c in cells.header)
    body = []
    for i, (texts, numbers) in enumerate(zip(zip(*cells.columns), zip(*cells.numeric))):
        cls = f' class="{row_classes[i]}"' if row_classes and row_classes[i] else ""
        body.append(f"<tr{cls}>" + "".join(f'<td class="num">{t}</td>' if n else f"<td>{t}</td>"
                                           for t, n in zip(texts, numbers)) + "</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def to_markdown(t: Table) -> str:
    """The whole table as a Markdown document: title, intro, one section per group."""
    parts = [f"# {md_text(t.title)}", ""]
    if t.intro:
        parts += [md_text(t.intro), ""]
    for g, rows, _ in t.groups():
        if g is not None:
            parts += [f"## {md_text(t.group_titles.get(g, g))}", ""]
        parts += [markdown_table(rows), ""]
    if t.footer:
        parts += [md_text(t.footer), ""]
    return "\n".join(parts)


def to_html(t: Table, level: int = 3, only: str | None = None) -> str:
    """The table in HTML (intro, then one sub-heading of ``level`` per group); ``only``
    renders just that group's rows, with no heading and no intro."""
    parts = [] if only is not None or not t.intro else [f"<p>{esc(t.intro)}</p>"]
    for g, rows, classes in t.groups():
        if only is not None:
            if g == only:
                parts.append(html_table(rows, classes))
            continue
        if g is not None:
            parts.append(f"<h{level}>{esc(t.group_titles.get(g, g))}</h{level}>")
        parts.append(html_table(rows, classes))
    if t.footer and only is None:
        parts.append(f'<p class="small">{esc(t.footer)}</p>')
    return "".join(parts)
