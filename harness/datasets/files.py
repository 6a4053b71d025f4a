"""The user's own tables: CSV (delimiter and decimal mark detected, or given) and Parquet."""

from __future__ import annotations

import csv
from pathlib import Path

import pandas as pd

from harness.datasets.base import Dataset, finish
from harness.datasets.spec import DatasetSpec
from harness.errors import UserError, closest

PARQUET_SUFFIXES = (".parquet", ".pq")


def sniff_csv(path: Path, sample_bytes: int = 64_000) -> tuple[str, str]:
    """Guess (delimiter, decimal mark) from the start of a CSV file.

    The delimiter comes from :class:`csv.Sniffer` restricted to ``, ; \\t |``; a semicolon
    delimiter with numbers written ``3,14`` means a decimal comma (the common European export).
    """
    text = path.read_text(encoding="utf-8", errors="replace")[:sample_bytes]
    lines = [ln for ln in text.splitlines() if ln.strip()][:50]
    if not lines:
        return ",", "."
    try:
        delimiter = csv.Sniffer().sniff("\n".join(lines), delimiters=",;\t|").delimiter
    except csv.Error:
        delimiter = ","
    decimal = "."
    if delimiter != ",":
        import re
        body = "\n".join(lines[1:])
        if re.search(r"(^|[" + re.escape(delimiter) + r"])-?\d+,\d+($|[" + re.escape(delimiter)
                     + r"])", body, flags=re.M):
            decimal = ","
    return delimiter, decimal


def ragged_row(path: Path, delimiter: str) -> tuple[int, int, int] | None:
    """(line, fields, header fields) for the first CSV row whose length differs from the
    header's, or None. pandas fills short rows with missing values without a word."""
    with path.open(encoding="utf-8", errors="replace", newline="") as f:
        reader = csv.reader(f, delimiter=delimiter)
        width = None
        for row in reader:
            if not row or (len(row) == 1 and not row[0].strip()):
                continue  # blank lines, which pandas skips too
            if width is None:
                width = len(row)
            elif len(row) != width:
                return reader.line_num, len(row), width
    return None


def header(path: Path, delimiter: str) -> list[str]:
    """The names in a CSV file's first non-blank row, as written."""
    with path.open(encoding="utf-8-sig", errors="replace", newline="") as f:
        for row in csv.reader(f, delimiter=delimiter):
            if row and not (len(row) == 1 and not row[0].strip()):
                return row
    return []


def refuse_repeated_names(names, path: Path, where: str) -> None:
    """`UserError` when a column name occurs more than once: pandas would rename the copies
    (``a``, ``a.1``) without a word, and the wrong column could become the target."""
    counts: dict[str, int] = {}
    for n in map(str, names):
        counts[n] = counts.get(n, 0) + 1
    repeated = [f"'{n}' ({k} times)" for n, k in counts.items() if k > 1]
    if repeated:
        raise UserError(f"{path} names more than one column {', '.join(repeated)}; give every "
                        "column its own name", file=where, field="path")


def read_table(path: Path, *, where: str, delimiter: str | None = None,
               decimal: str | None = None) -> pd.DataFrame:
    """Read a CSV or Parquet file, with one clear message for every way it can fail."""
    if not path.exists():
        raise UserError(f"file not found: {path}", file=where, field="path")
    if not path.is_file():
        raise UserError(f"{path} is a folder, not a data file", file=where, field="path")
    if path.suffix.lower() in PARQUET_SUFFIXES:
        try:
            frame = pd.read_parquet(path)
        except Exception as exc:  # pyarrow raises several unrelated types
            raise UserError(f"{path} is not a readable Parquet file ({exc})", file=where,
                            field="path") from None
        refuse_repeated_names(frame.columns, path, where)
        return frame
    try:
        return _read_csv(path, where, delimiter, decimal)
    except OSError as exc:
        raise UserError(f"cannot read {path} ({exc.strerror or exc})", file=where,
                        field="path") from None


def _read_csv(path: Path, where: str, delimiter: str | None,
              decimal: str | None) -> pd.DataFrame:
    sniffed = sniff_csv(path)
    delimiter = delimiter or sniffed[0]
    decimal = decimal or sniffed[1]
    try:
        frame = pd.read_csv(path, sep=delimiter, decimal=decimal)
    except pd.errors.ParserError as exc:
        raise UserError(f"{path} does not parse as CSV with delimiter {delimiter!r}: "
                        f"{str(exc).strip().splitlines()[-1]} (rows of different lengths?)",
                        file=where, field="path") from None
    except (UnicodeDecodeError, pd.errors.EmptyDataError) as exc:
        raise UserError(f"{path} is not a readable CSV file ({exc})", file=where,
                        field="path") from None
    refuse_repeated_names(header(path, delimiter), path, where)
    ragged = ragged_row(path, delimiter)
    if ragged is not None:
        line, n, width = ragged
        raise UserError(f"{path} line {line} has {n} fields where the header has {width} "
                        f"(delimiter {delimiter!r}): rows of different lengths", file=where,
                        field="path")
    return frame


def load_file(spec: DatasetSpec) -> Dataset:
    path = spec.path("path")
    frame = read_table(path, where=spec.where, delimiter=spec.options.get("delimiter"),
                       decimal=spec.options.get("decimal"))
    target = str(spec.options["target"])
    if target not in frame.columns:
        raise UserError(f"target column '{target}' is not in {path.name}"
                        f"{closest(target, frame.columns)}", file=spec.where, field="target")
    y = frame[target]
    X = frame.drop(columns=[target])
    return finish(spec.name, X, y, source=f"file:{path}", where=spec.where,
                  task=spec.options.get("task"), categorical=spec.options.get("categorical"),
                  drop=spec.options.get("drop", ()), meta={"path": str(path)})
