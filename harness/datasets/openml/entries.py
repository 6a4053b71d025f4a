"""The text of a ``from = "openml"`` entry, checked without the client or the network.

Owns the entry's kinds (``dataset``, ``task``, ``suite``), the keys each kind accepts, the
``expect`` guard's keys and the suite filters, and which kind an entry is.
"""

from __future__ import annotations

from typing import Any

from harness.datasets.base import TASKS
from harness.datasets.spec import DatasetSpec
from harness.errors import UserError, closest
from harness.names import is_name

ENTRY_KINDS = ("dataset", "task", "suite")
EXPECT_KEYS = ("name", "rows", "columns")
SUITE_FILTERS = ("max_rows", "max_columns", "max_classes")


def _is_id(value: Any) -> bool:
    return isinstance(value, int) and not isinstance(value, bool)


def entry_kind(spec: DatasetSpec) -> str:
    """``"dataset"``, ``"task"`` or ``"suite"`` (the entry was checked by `check_openml_entry`)."""
    opts = spec.options
    if "suite" in opts:
        return "suite"
    if _is_id(opts.get("task")):
        return "task"
    return "dataset"


def check_openml_entry(spec: DatasetSpec) -> None:
    """Check an OpenML entry's keys and values without contacting the server.

    Exactly one of ``dataset``, ``task`` (an id) or ``suite``; ``target`` and a learning type
    only with ``dataset``; ``expect`` with dataset or task; the ``max_*`` filters only with
    ``suite``. Raises `UserError` naming the suite file, the entry and the field.
    """
    opts, where = spec.options, spec.where
    task_value = opts.get("task")
    if "task" in opts and not _is_id(task_value) and task_value not in TASKS:
        raise UserError(f"expected an OpenML task id (a whole number), or with 'dataset' the "
                        f"learning type 'classification' or 'regression', not {task_value!r}",
                        file=where, field="task")
    given = [k for k in ENTRY_KINDS if k in opts and (k != "task" or _is_id(task_value))]
    if not given:
        raise UserError("an OpenML entry needs exactly one of 'dataset = ID', 'task = ID' or "
                        "'suite = ID'", file=where, field="dataset")
    if len(given) > 1:
        raise UserError(f"give exactly one of 'dataset', 'task' or 'suite', not both "
                        f"'{given[0]}' and '{given[1]}'", file=where, field=given[1])
    kind = given[0]
    value = opts[kind]
    if kind in ("dataset", "task"):
        if not _is_id(value) or value < 1:
            raise UserError(f"expected an OpenML {kind} id (a positive whole number), not "
                            f"{value!r}", file=where, field=kind)
    else:
        if _is_id(value):
            if value < 1:
                raise UserError(f"expected an OpenML suite id (a positive whole number) or "
                                f"alias, not {value!r}", file=where, field="suite")
        elif not (isinstance(value, str) and is_name(value)):
            raise UserError(f"expected an OpenML suite id or alias (letters, digits, - _ .), "
                            f"not {value!r}", file=where, field="suite")
    if "target" in opts:
        if kind == "task":
            raise UserError("an OpenML task fixes its own target; remove 'target' (or use "
                            "'dataset = ID' to choose the target)", file=where, field="target")
        if kind == "suite":
            raise UserError("each task of a suite fixes its own target; remove 'target'",
                            file=where, field="target")
        if not isinstance(opts["target"], str) or not opts["target"]:
            raise UserError("expected the name of the target column", file=where,
                            field="target")
    if kind == "suite":
        for key in ("task", "expect", "categorical", "drop"):
            if key in opts:
                raise UserError(f"'{key}' applies to a single table and cannot be given for a "
                                "whole suite; list the task separately to set it",
                                file=where, field=key)
    for key in SUITE_FILTERS:
        if key in opts:
            if kind != "suite":
                raise UserError(f"'{key}' filters the tasks of a suite; it needs 'suite = ID'",
                                file=where, field=key)
            if not _is_id(opts[key]) or opts[key] < 1:
                raise UserError(f"expected a positive whole number, not {opts[key]!r}",
                                file=where, field=key)
    if "expect" in opts:
        expect = opts["expect"]
        if not isinstance(expect, dict):
            raise UserError("expected a table such as { name = \"credit-g\", rows = 1000, "
                            "columns = 20 }", file=where, field="expect")
        for key, val in expect.items():
            if key not in EXPECT_KEYS:
                raise UserError(f"unknown key '{key}'{closest(key, EXPECT_KEYS)}; 'expect' "
                                f"accepts {', '.join(EXPECT_KEYS)}", file=where,
                                field=f"expect.{key}")
            if key == "name" and not isinstance(val, str):
                raise UserError(f"expected the dataset's name as text, not {val!r}",
                                file=where, field="expect.name")
            if key in ("rows", "columns") and (not _is_id(val) or val < 1):
                raise UserError(f"expected a positive whole number, not {val!r}", file=where,
                                field=f"expect.{key}")
