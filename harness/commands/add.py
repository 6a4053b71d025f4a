"""``woodlot add``: check the user's own table and append it to a suite as a file entry.

The table is read exactly as the suite will read it (`harness.datasets.files.read_table`),
checked (`harness.datacheck`), and must be splittable under the suite's protocol. Only then is
a ``[[dataset]]`` entry (``from = "file"``) written after the suite's last dataset entry; every
other byte of the suite file stays as it was (comments, layout, line endings). The new file is
written under a temporary name, re-read with `harness.suite.load_suite`, its new entry loaded
and compared with the checked table by content fingerprint, and only then renamed over the
suite file. Any refusal leaves the suite file untouched.
"""

from __future__ import annotations

import copy
import os
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

import tomlkit

from harness.datacheck import DataCheck, check_file
from harness.datasets import load_dataset
from harness.datasets.base import TASKS
from harness.datasets.files import PARQUET_SUFFIXES
from harness.errors import UserError
from harness.files import replacing
from harness.names import RULE, is_name, make_name
from harness.splits import make_splits
from harness.suite import KFOLD, load_suite

DELIMITER_WORDS = {"tab": "\t", "\\t": "\t", "comma": ",", "semicolon": ";", "pipe": "|"}
DECIMALS = (".", ",")


@dataclass(frozen=True)
class Added:
    """What `add_file` did: the entry written, where, and the check report shown."""

    suite: Path
    name: str
    entry: dict[str, Any]
    check: DataCheck
    block: str    # the text inserted into the suite file
    offset: int   # where it was inserted (in characters)
    position: int  # the entry's number among the suite's datasets (from 1)


def default_name(path: str | Path) -> str:
    """The file's stem made into a dataset name (`harness.names`)."""
    return make_name(Path(path).stem)


def dialect_option(value: str | None, key: str, where: str) -> str | None:
    """``--delimiter``/``--decimal`` as given on a command line → the character."""
    if value is None:
        return None
    value = DELIMITER_WORDS.get(value.lower(), value) if key == "delimiter" else value
    if key == "delimiter" and (len(value) != 1 or value in '"\r\n'):
        raise UserError(f"a delimiter is one character (or 'tab'), not {value!r}", file=where,
                        field=key)
    if key == "decimal" and value not in DECIMALS:
        raise UserError(f"the decimal mark is '.' or ',', not {value!r}", file=where, field=key)
    return value


def add_file(suite_path: str | Path, data_path: str | Path, target: str, *,
             name: str | None = None, task: str | None = None, delimiter: str | None = None,
             decimal: str | None = None, drop: list[str] | tuple[str, ...] = (),
             echo: Callable[[str], None] | None = None) -> Added:
    """Check ``data_path`` and append it to the suite file as a ``from = "file"`` entry.

    Parameters
    ----------
    suite_path : the suite file (TOML) to extend; it must load with `load_suite`.
    data_path : a CSV file (delimiter and decimal mark detected unless given) or Parquet.
    target : the column to predict.
    name : the entry's name (default: the file's stem, see `default_name`).
    task : ``classification`` or ``regression`` (default: inferred from the target).
    delimiter, decimal : CSV dialect overrides (written to the entry).
    drop : feature columns to leave out (written to the entry).
    echo : where the check report goes, line by line (default: nowhere).

    Raises `UserError` naming the file and field, before anything is written, when the suite
    does not load, the name is taken or unusable, or the table fails its checks.
    """
    echo = echo or (lambda line: None)
    suite_path, data_path = Path(suite_path), Path(data_path)
    suite = load_suite(suite_path)
    raw = suite_path.read_bytes()
    where = str(data_path)
    if name is None:
        name = default_name(data_path)
    elif not is_name(name):
        raise UserError(f"'{name}' is not a usable name ({RULE})", file=suite_path,
                        field="name")
    if name in {d.name for d in suite.datasets}:
        raise UserError(f"the suite already has a dataset named '{name}'; choose another "
                        "with --name", file=suite_path, field="name")
    if task is not None and task not in TASKS:
        raise UserError(f"'{task}' is not a task; use 'classification' or 'regression'",
                        file=where, field="task")
    delimiter = dialect_option(delimiter, "delimiter", where)
    decimal = dialect_option(decimal, "decimal", where)
    p = suite.protocol
    folds = p.folds if p.splits == KFOLD else 2
    dataset, check = check_file(data_path, target, name=name, task=task, drop=drop,
                                delimiter=delimiter, decimal=decimal, folds=folds)
    for line in check.lines(lambda c: f"--drop {c}, or drop = [\"{c}\"] in the suite"):
        echo(line)
    make_splits(dataset, p, where)  # the suite's protocol must be able to split the table

    entry: dict[str, Any] = {"name": name, "from": "file",
                             "path": _relative(data_path, suite_path.parent), "target": target}
    if task is not None:
        entry["task"] = task
    if drop:
        entry["drop"] = list(drop)
    if data_path.suffix.lower() not in PARQUET_SUFFIXES:
        if delimiter is not None or check.delimiter != ",":
            entry["delimiter"] = check.delimiter
        if decimal is not None or check.decimal != ".":
            entry["decimal"] = check.decimal

    text = raw.decode("utf-8")
    block, new_text, offset = _place(text, entry, suite_path)
    _write_checked(suite_path, new_text.encode("utf-8"), name, dataset.fingerprint)
    return Added(suite=suite_path, name=name, entry=entry, check=check, block=block,
                 offset=offset, position=len(suite.datasets) + 1)


def _relative(path: Path, folder: Path) -> str:
    try:
        return Path(os.path.relpath(path.resolve(), folder.resolve())).as_posix()
    except ValueError:  # another drive (Windows): keep it absolute
        return path.resolve().as_posix()


def _render(entry: dict[str, Any], newline: str) -> str:
    table = tomlkit.table()
    for key, value in entry.items():
        table.add(key, value)
    aot = tomlkit.aot()
    aot.append(table)
    doc = tomlkit.document()
    doc.add("dataset", aot)
    return tomlkit.dumps(doc).replace("\n", newline)


def _after_last_dataset(text: str) -> int | None:
    """Where the last ``[[dataset]]`` table's own lines end: after its last key line, before
    the blank and comment lines that introduce whatever follows (tomlkit counts those as part
    of the table; a reader does not)."""
    try:
        doc = tomlkit.parse(text)
    except Exception:  # tomllib accepted the file; tomlkit is only a locator here
        return None
    tables = doc.get("dataset")
    if not isinstance(tables, tomlkit.items.AoT) or not len(tables):
        return None
    body = tables[-1].as_string()
    start = text.rfind(body)
    if not body or start < 0 or not re.search(r"\[\[\s*dataset\s*\]\][^\n]*\n$", text[:start]):
        return None
    lines = re.findall(r"[^\n]*\n|[^\n]+$", body)
    while lines and (not lines[-1].strip() or lines[-1].lstrip().startswith("#")):
        lines.pop()
    return start + sum(map(len, lines)) if lines else None


def _place(text: str, entry: dict[str, Any], suite_path: Path) -> tuple[str, str, int]:
    """(block, new text, offset): the entry inserted after the last dataset entry, or at the
    end of the file, whichever re-parses to exactly the old content plus the new entry."""
    nl = "\r\n" if "\r\n" in text else "\n"
    block = _render(entry, nl)
    expected = copy.deepcopy(tomllib.loads(text))
    expected["dataset"].append(entry)
    candidates = []
    end = _after_last_dataset(text)
    if end is not None:
        head, tail = text[:end], text[end:]
        if not head.endswith("\n"):
            head += nl
        lead = nl if (tail.startswith(("\n", "\r\n")) or not tail) else ""
        candidates.append((head, lead + block, tail))
    head = text if (not text or text.endswith("\n")) else text + nl
    candidates.append((head, (nl if head.strip() else "") + block, ""))
    for head, inserted, tail in candidates:
        new_text = head + inserted + tail
        try:
            if tomllib.loads(new_text) == expected:
                return inserted, new_text, len(head)
        except tomllib.TOMLDecodeError:
            pass
    raise UserError("cannot add an entry to this file's datasets without rewriting it (are they "
                    "written as an inline array?); add these lines by hand:\n" + block,
                    file=suite_path, field="dataset")


def _write_checked(suite_path: Path, data: bytes, name: str, fingerprint: str) -> None:
    """Write under a temporary name in the same folder, check, rename over the suite file."""
    try:
        with replacing(suite_path) as tmp:
            with open(tmp, "wb") as f:
                f.write(data)
                f.flush()
                os.fsync(f.fileno())
            os.chmod(tmp, suite_path.stat().st_mode & 0o7777)
            spec = next(d for d in load_suite(tmp).datasets if d.name == name)
            if load_dataset(spec).fingerprint != fingerprint:
                raise RuntimeError(f"the entry written for '{name}' does not reproduce the "
                                   "checked table; the suite file was left unchanged")
    except OSError as exc:
        raise UserError(f"cannot write next to the suite file ({exc.strerror})",
                        file=suite_path) from None
