"""Suite files (TOML): parse and validate into frozen dataclasses before any work is done.

Every error names the suite file, the entry and the field, with a suggestion for near-miss
keys. Loading datasets and building splits happen later (`harness.plan`); this module only
checks what can be checked from the text.
"""

from __future__ import annotations

import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any


from harness.datasets import SOURCES, DatasetSpec
from harness.datasets.openml import expand_benchmark_suite
from harness.errors import UserError, closest
from harness.names import RULE, is_name
from harness.scorers import Equivalence, metric_task, parse_equivalence, scorer_names
from harness.spaces import HALVING, SEARCHES, Tuning, default_space, parse_range
from harness.strategies import Strategy, resolve, split_by_task

KFOLD, HOLDOUT, PUBLISHED = "k-fold", "holdout", "published"
SPLIT_SCHEMES = (KFOLD, HOLDOUT, PUBLISHED)
DEFAULT_METRICS = {"classification": ("accuracy", "balanced_accuracy", "neg_log_loss"),
                   "regression": ("neg_root_mean_squared_error", "r2")}
SECTIONS = ("suite", "protocol", "also_measure", "equivalence", "tuning", "dataset",
            "strategy", "speedup")
DATA_SUFFIXES = (".csv", ".tsv", ".txt", ".parquet", ".pq")
SEED_MAX = 2**32 - 1  # NumPy's RandomState, which scikit-learn seeds, takes 0 .. 2**32 - 1
AUTO = "auto"  # cell_memory: derived from the machine's memory and the number of workers


@dataclass(frozen=True)
class Protocol:
    """How every dataset is split and scored (the same splits for every strategy)."""

    splits: str = KFOLD
    folds: int = 5
    repeats: int = 2
    seed: int = 0
    test_fraction: float | None = None
    train_rows: int | None = None
    metrics: dict[str, tuple[str, ...]] = field(default_factory=lambda: dict(DEFAULT_METRICS))
    cell_timeout: float | None = 600.0  # seconds
    cell_memory: int | str | None = AUTO  # bytes, AUTO, or None for no limit


@dataclass(frozen=True)
class AlsoMeasure:
    """The ``[also_measure]`` section: what each cell measures beyond scores and times."""

    memory: bool = True
    model_size: bool = True
    size_curve: bool = True
    curve_points: int = 8

    def settings(self) -> dict[str, Any]:
        return {"memory": self.memory, "model_size": self.model_size,
                "size_curve": self.size_curve, "curve_points": self.curve_points}


@dataclass(frozen=True)
class SpeedupSettings:
    """The ``[speedup]`` section: which strategies are timed alone at which worker counts."""

    workers: tuple[int, ...] = ()
    repeats: int = 5  # fewer: the 95 % speedup interval covers less often (analysis.speedup)
    datasets: tuple[str, ...] = ()
    strategies: tuple[str, ...] = ()
    noise_margin: float = 0.15


@dataclass(frozen=True)
class TuningSettings:
    """The ``[tuning]`` section: the search every tuned strategy gets unless its entry says
    otherwise (equal budgets). With the section present every strategy is tuned unless its
    entry says ``tune = false``."""

    present: bool = False
    budget_trials: int | None = 20
    budget_seconds: float | None = None
    inner_folds: int = 3
    search: str = "random"
    factor: int = 3
    max_trials: int = 100


@dataclass(frozen=True)
class Suite:
    path: Path
    name: str
    description: str
    protocol: Protocol
    also_measure: AlsoMeasure
    equivalence: Equivalence
    datasets: tuple[DatasetSpec, ...]
    strategies: tuple[Strategy, ...]
    speedup: SpeedupSettings | None
    text: str
    tuning: TuningSettings = field(default_factory=TuningSettings)

    def strategy(self, name: str) -> Strategy:
        return next(s for s in self.strategies if s.name == name)


# key -> (python types accepted, description for messages)
_PROTOCOL_KEYS = {
    "splits": (str, "text"), "folds": (int, "whole number"), "repeats": (int, "whole number"),
    "seed": (int, "whole number"), "test_fraction": ((float, int), "number"),
    "train_rows": (int, "whole number"), "metrics": (dict, "table"),
    "cell_timeout": ((str, int, float), "duration such as \"90s\" or \"10m\""),
    "cell_memory": (str, "size such as \"2GiB\" or \"500MB\", \"auto\" or \"none\""),
}
_ALSO_MEASURE_KEYS = {"memory": (bool, "true or false"), "model_size": (bool, "true or false"),
                      "size_curve": (bool, "true or false"),
                      "curve_points": (int, "whole number")}
_SPEEDUP_KEYS = {"workers": (list, "list of whole numbers"), "repeats": (int, "whole number"),
                 "datasets": (list, "list of dataset names"),
                 "strategies": (list, "list of strategy names"),
                 "noise_margin": ((float, int), "number")}
_SUITE_KEYS = {"name": (str, "text"), "description": (str, "text")}
_BUDGET = ((int, str), "number of trials or a duration such as \"2m\"")
_TUNING_KEYS = {"budget": _BUDGET, "inner_folds": (int, "whole number"),
                "search": (str, "\"random\" or \"halving\""),
                "factor": (int, "whole number"), "max_trials": (int, "whole number")}
_STRATEGY_KEYS = {"name": (str, "text"), "method": (str, "text"), "classifier": (str, "text"),
                  "regressor": (str, "text"), "family": (str, "text"), "params": (dict, "table"),
                  "grid": (dict, "table of lists"), "description": (str, "text"),
                  "tune": ((bool, dict), "true, false or a table of ranges"),
                  "tune_budget": _BUDGET}


def parse_duration(value: Any, where: str, key: str) -> float | None:
    """``90``, ``"90s"``, ``"10m"``, ``"1h"``, ``"none"`` → seconds (None for no limit).
    Zero, written either way, is refused: "none" says no limit."""
    if isinstance(value, bool):
        raise UserError("expected a duration such as \"90s\" or \"10m\"", file=where, field=key)
    if isinstance(value, (int, float)):
        seconds = float(value)
    else:
        text = str(value).strip().lower()
        if text in ("none", "off"):
            return None
        m = re.fullmatch(r"(\d+(?:\.\d+)?)\s*(s|m|h)?", text)
        if not m:
            raise UserError(f"'{value}' is not a duration; write e.g. \"90s\", \"10m\" or \"1h\"",
                            file=where, field=key)
        seconds = float(m.group(1)) * {"s": 1, "m": 60, "h": 3600, None: 1}[m.group(2)]
    if not seconds > 0 or seconds == float("inf"):
        raise UserError(f"a duration must be positive and finite, not {value!r}; write "
                        "\"none\" for no limit", file=where, field=key)
    return seconds


_SIZE_UNITS = {"b": 1, "kb": 10**3, "mb": 10**6, "gb": 10**9, "tb": 10**12,
               "kib": 2**10, "mib": 2**20, "gib": 2**30, "tib": 2**40}
MIN_CELL_MEMORY = 64 * 2**20


def parse_size(value: Any, where: str, key: str) -> int | str | None:
    """``"2GiB"``, ``"500MB"``, ``"auto"``, ``"none"`` → bytes, `AUTO` or None (no limit)."""
    text = str(value).strip().lower()
    if text in ("none", "off"):
        return None
    if text == AUTO:
        return AUTO
    m = re.fullmatch(r"(\d+(?:\.\d+)?)\s*([a-z]+)", text)
    if not m or m.group(2) not in _SIZE_UNITS:
        raise UserError(f"'{value}' is not a size; write e.g. \"2GiB\", \"500MB\", \"auto\" or "
                        "\"none\"", file=where, field=key)
    size = int(float(m.group(1)) * _SIZE_UNITS[m.group(2)])
    if size < MIN_CELL_MEMORY:
        raise UserError(f"{value} is too small for a fit; give at least 64MiB (or \"none\")",
                        file=where, field=key)
    return size


def check_seed(value: int, where: str, key: str | None = "seed") -> int:
    if not 0 <= value <= SEED_MAX:
        raise UserError(f"must be between 0 and {SEED_MAX} (2**32 - 1), got {value}",
                        file=where, field=key)
    return value


def _check_table(table: Any, spec: dict[str, tuple], where: str, section: str) -> dict[str, Any]:
    if not isinstance(table, dict):
        raise UserError(f"[{section}] must be a table", file=where)
    for key, value in table.items():
        if key not in spec:
            raise UserError(f"unknown key '{key}'{closest(key, spec)}; [{section}] accepts "
                            f"{', '.join(spec)}", file=where, field=key)
        types, desc = spec[key]
        types = types if isinstance(types, tuple) else (types,)
        if isinstance(value, bool) and bool not in types:
            raise UserError(f"expected a {desc}, got {value!r}", file=where, field=key)
        if not isinstance(value, types):
            raise UserError(f"expected a {desc}, got {type(value).__name__} {value!r}",
                            file=where, field=key)
    return table


def _table_hint(path: Path) -> str:
    if path.suffix.lower() not in DATA_SUFFIXES:
        return ""
    return (f"; {path.name} looks like a data table: 'woodlot choose {path} --target "
            f"COLUMN' compares the methods on it, 'woodlot add SUITE --file {path} "
            "--target COLUMN' adds it to a suite")


def read_toml(path: Path) -> tuple[dict[str, Any], str]:
    if not path.exists():
        raise UserError(f"suite file not found: {path}")
    if not path.is_file():
        raise UserError(f"{path} is a folder, not a suite file")
    try:
        text = path.read_text(encoding="utf-8")
    except UnicodeDecodeError as exc:
        raise UserError(f"not UTF-8 text (byte {exc.object[exc.start]:#04x} at position "
                        f"{exc.start}); save the suite file as UTF-8{_table_hint(path)}",
                        file=path) from None
    except OSError as exc:
        raise UserError(f"cannot read the suite file ({exc.strerror or exc})", file=path) from None
    try:
        return tomllib.loads(text), text
    except tomllib.TOMLDecodeError as exc:
        raise UserError(f"a suite file (TOML) is expected, but this is not valid TOML ({exc})"
                        f"{_table_hint(path)}; a suite file looks like: [suite] name = \"demo\" · "
                        "[[dataset]] name = \"wine\" from = \"sklearn\" load = \"load_wine\" · "
                        "[[strategy]] name = \"forest\" method = \"random-forest\" (README, "
                        "'Suite files')", file=path) from None


def load_suite(path: str | Path, *, expand: bool = True) -> Suite:
    """Parse and validate a suite file. Raises `UserError` naming file, entry and field.

    With ``expand`` (the default) an OpenML benchmark-suite entry (``suite = ID``) becomes one
    entry per kept task, which needs the suite's task list (cached, or from the server);
    ``woodlot download`` reads the file with ``expand=False`` to download it first.
    """
    path = Path(path)
    data, text = read_toml(path)
    for key in data:
        if key not in SECTIONS:
            raise UserError(f"unknown section '{key}'{closest(key, SECTIONS)}; a suite has "
                            f"{', '.join('[' + s + ']' for s in SECTIONS)}", file=path)
    head = _check_table(data.get("suite", {}), _SUITE_KEYS, f"{path}: [suite]", "suite")
    name = head.get("name") or path.stem
    if not is_name(name):
        raise UserError(f"'{name}' is not a usable name ({RULE})", file=f"{path}: [suite]",
                        field="name")
    protocol = _protocol(data.get("protocol", {}), f"{path}: [protocol]")
    also = AlsoMeasure(**_check_table(data.get("also_measure", {}), _ALSO_MEASURE_KEYS,
                                      f"{path}: [also_measure]", "also_measure"))
    if not 2 <= also.curve_points <= 1000:
        raise UserError(f"must be between 2 and 1000, got {also.curve_points}",
                        file=f"{path}: [also_measure]", field="curve_points")
    equivalence = parse_equivalence(data.get("equivalence", {}), f"{path}: [equivalence]")
    tuning = _tuning(data.get("tuning"), f"{path}: [tuning]")
    datasets = _datasets(data.get("dataset", []), path, expand)
    strategies = _strategies(data.get("strategy", []), path, tuning)
    speedup = None
    if "speedup" in data:
        speedup = _speedup(data["speedup"], f"{path}: [speedup]", datasets, strategies)
    return Suite(path=path, name=name, description=head.get("description", ""),
                 protocol=protocol, also_measure=also, equivalence=equivalence,
                 datasets=tuple(datasets),
                 strategies=tuple(strategies), speedup=speedup, text=text, tuning=tuning)


def parse_budget(value: Any, where: str, key: str) -> tuple[int | None, float | None]:
    """(trials, seconds) of a search budget: a whole number of trials or a duration."""
    if isinstance(value, bool) or not isinstance(value, (int, str)):
        raise UserError(f"expected a {_BUDGET[1]}, got {value!r}", file=where, field=key)
    if isinstance(value, int):
        if value < 1:
            raise UserError(f"a budget of {value} trials: give at least 1 (the configured "
                            "configuration)", file=where, field=key)
        return value, None
    seconds = parse_duration(value, where, key)
    if seconds is None:
        raise UserError(f"a budget of '{value}' allows no search: give a number of trials or "
                        "a positive duration such as \"2m\"", file=where, field=key)
    return None, seconds


def _tuning(table: Any, where: str) -> TuningSettings:
    if table is None:
        return TuningSettings()
    t = dict(_check_table(table, _TUNING_KEYS, where, "tuning"))
    out: dict[str, Any] = {"present": True}
    if "budget" in t:
        out["budget_trials"], out["budget_seconds"] = parse_budget(t["budget"], where, "budget")
    for key, low in (("inner_folds", 2), ("factor", 2), ("max_trials", 1)):
        if key in t:
            if t[key] < low:
                raise UserError(f"must be at least {low}, got {t[key]}", file=where, field=key)
            out[key] = t[key]
    if "search" in t:
        if t["search"] not in SEARCHES:
            raise UserError(f"unknown search '{t['search']}'{closest(t['search'], SEARCHES)}; "
                            f"use {' or '.join(SEARCHES)}", file=where, field="search")
        out["search"] = t["search"]
    if out.get("search") == HALVING and out.get("budget_seconds") is not None:
        raise UserError("successive halving needs a budget in trials (the configurations of "
                        "its first round)", file=where, field="budget")
    return TuningSettings(**out)


def _strategy_tuning(entry: dict, settings: TuningSettings, where: str) -> Tuning | None:
    """The `Tuning` of one ``[[strategy]]`` entry, or None when it is not tuned."""
    tune = entry.get("tune", settings.present)
    if "tune_budget" in entry and tune is False:
        raise UserError("'tune_budget' needs a tuned strategy (tune = true or a table)",
                        file=where, field="tune_budget")
    if tune is False:
        return None
    if "grid" in entry:
        raise UserError("give 'grid' (separate strategies, each judged on the test folds) or "
                        "'tune' (a search inside each training part), not both; add tune = "
                        "false to keep the grid", file=where, field="grid")
    if tune is True:
        space = default_space(entry.get("method", ""))
        if space is None:
            raise UserError("this strategy has no default search space (an import path): "
                            "give one with tune = { parameter = [values] or { log_uniform = "
                            "[low, high] } }, or tune = false", file=where, field="tune")
        common, per_task = space, {}
    else:
        if not tune:
            raise UserError("an empty table tunes nothing: give parameters and their ranges, "
                            "or tune = true for the method's default space", file=where,
                            field="tune")
        raw_common, raw_task = split_by_task(tune, where, "tune")
        common = {k: parse_range(v, where, f"tune.{k}") for k, v in raw_common.items()}
        per_task = {task: {k: parse_range(v, where, f"tune.{task}.{k}") for k, v in sp.items()}
                    for task, sp in raw_task.items()}
    trials, seconds = settings.budget_trials, settings.budget_seconds
    if "tune_budget" in entry:
        trials, seconds = parse_budget(entry["tune_budget"], where, "tune_budget")
        if settings.search == HALVING and seconds is not None:
            raise UserError("successive halving needs a budget in trials", file=where,
                            field="tune_budget")
    return Tuning(space=common, task_space=per_task, trials=trials, seconds=seconds,
                  search=settings.search, inner_folds=settings.inner_folds,
                  factor=settings.factor, max_trials=settings.max_trials)


def _protocol(table: Any, where: str) -> Protocol:
    t = dict(_check_table(table, _PROTOCOL_KEYS, where, "protocol"))
    if t.get("splits", KFOLD) not in SPLIT_SCHEMES:
        raise UserError(f"unknown split scheme '{t['splits']}'"
                        f"{closest(t['splits'], SPLIT_SCHEMES)}; use one of "
                        f"{', '.join(SPLIT_SCHEMES)}", file=where, field="splits")
    for key, low in (("folds", 2), ("repeats", 1), ("train_rows", 2)):
        if key in t and t[key] < low:
            raise UserError(f"must be at least {low}, got {t[key]}", file=where, field=key)
    if t.get("repeats", 1) > 1000:
        raise UserError(f"must be at most 1000, got {t['repeats']}", file=where, field="repeats")
    if "seed" in t:
        check_seed(t["seed"], where)
    if "test_fraction" in t:
        if not 0 < t["test_fraction"] < 1:
            raise UserError(f"must be between 0 and 1, got {t['test_fraction']}", file=where,
                            field="test_fraction")
        t["test_fraction"] = float(t["test_fraction"])
    scheme = t.get("splits", KFOLD)
    if scheme == HOLDOUT:
        if ("test_fraction" in t) == ("train_rows" in t):
            raise UserError("holdout needs exactly one of 'test_fraction' or 'train_rows'",
                            file=where, field="splits")
        if "folds" in t:
            raise UserError("holdout has no folds; use 'repeats' for several random splits",
                            file=where, field="folds")
    elif "test_fraction" in t or "train_rows" in t:
        key = "test_fraction" if "test_fraction" in t else "train_rows"
        raise UserError(f"'{key}' applies to splits = \"holdout\" only", file=where, field=key)
    metrics = dict(DEFAULT_METRICS)
    if "metrics" in t:
        known = scorer_names()
        for task, names in t["metrics"].items():
            if task not in DEFAULT_METRICS:
                raise UserError(f"metrics are given per task: 'classification' or 'regression', "
                                f"not '{task}'", file=where, field=f"metrics.{task}")
            if isinstance(names, str):
                names = [names]
            if not isinstance(names, list) or not names:
                raise UserError("expected a non-empty list of scikit-learn scorer names",
                                file=where, field=f"metrics.{task}")
            for n in names:
                if not isinstance(n, str) or n not in known:
                    raise UserError(f"'{n}' is not a scikit-learn scorer name"
                                    f"{closest(str(n), known)}", file=where,
                                    field=f"metrics.{task}")
                if metric_task(n) != task:
                    raise UserError(f"'{n}' is a {metric_task(n)} metric; it cannot score "
                                    f"{task}", file=where, field=f"metrics.{task}")
            metrics[task] = tuple(names)
        t["metrics"] = metrics
    if "cell_timeout" in t:
        t["cell_timeout"] = parse_duration(t["cell_timeout"], where, "cell_timeout")
    if "cell_memory" in t:
        t["cell_memory"] = parse_size(t["cell_memory"], where, "cell_memory")
    return Protocol(**t)


def _entry_name(entry: Any, path: Path, kind: str, i: int) -> tuple[str, str]:
    """(name, message prefix) of the ``i``-th ``[[kind]]`` entry, checked."""
    where = f"{path}: {kind} entry {i}"
    if not isinstance(entry, dict):
        raise UserError(f"each [[{kind}]] must be a table", file=where)
    name = entry.get("name")
    if not isinstance(name, str) or not name:
        raise UserError(f"every {kind} needs a 'name'", file=where, field="name")
    where = f"{path}: {kind} '{name}' (entry {i})"
    if not is_name(name):
        raise UserError(f"'{name}' is not a usable name ({RULE})", file=where, field="name")
    return name, where


def _entries(entries: Any, path: Path, kind: str):
    """(position, name, message prefix, table) of each ``[[kind]]`` entry; at least one."""
    if not isinstance(entries, list) or not entries:
        raise UserError(f"a suite needs at least one [[{kind}]] entry", file=path)
    for i, entry in enumerate(entries, start=1):
        yield (i, *_entry_name(entry, path, kind, i), entry)


def _datasets(entries: Any, path: Path, expand: bool) -> list[DatasetSpec]:
    specs, seen = [], set()
    for i, name, where, entry in _entries(entries, path, "dataset"):
        if name in seen:
            raise UserError(f"the name '{name}' is used by an earlier dataset", file=where,
                            field="name")
        seen.add(name)
        source = entry.get("from")
        if source is None:
            raise UserError(f"missing: say where the data come from, one of "
                            f"{', '.join(SOURCES)} (from = \"file\" for a CSV or Parquet file)",
                            file=where, field="from")
        if source not in SOURCES:
            raise UserError(f"unknown source {source!r}{closest(str(source), SOURCES)}; use one "
                            f"of {', '.join(SOURCES)}", file=where, field="from")
        src = SOURCES[source]
        for key in entry:
            if key not in src.keys:
                raise UserError(f"unknown key '{key}'{closest(key, src.keys)}; a '{source}' "
                                f"dataset accepts {', '.join(src.keys)}", file=where, field=key)
        for key in src.required:
            if key not in entry:
                raise UserError(f"a '{source}' dataset needs '{key}'", file=where, field=key)
        if "task" in entry and source != "openml" \
                and entry["task"] not in ("classification", "regression"):
            raise UserError(f"'{entry['task']}' is not a task; use 'classification' or "
                            "'regression'", file=where, field="task")
        for key in ("categorical", "drop"):
            if key in entry and not (isinstance(entry[key], list)
                                     and all(isinstance(c, str) for c in entry[key])):
                raise UserError("expected a list of column names", file=where, field=key)
        if "params" in entry and not isinstance(entry["params"], dict):
            raise UserError("expected a table of parameters", file=where, field="params")
        options = {k: v for k, v in entry.items() if k not in ("name", "from")}
        spec = DatasetSpec(name=name, source=source, options=options, suite_file=path,
                           position=i)
        if src.check is not None:
            src.check(spec)
        if expand and source == "openml" and "suite" in options:
            for member in expand_benchmark_suite(spec):
                if member.name in seen:
                    raise UserError(f"the expanded name '{member.name}' is used by an earlier "
                                    "dataset", file=where, field="name")
                seen.add(member.name)
                specs.append(member)
        else:
            specs.append(spec)
    return specs


def _strategies(entries: Any, path: Path, tuning: TuningSettings) -> list[Strategy]:
    out, seen = [], set()
    for _, _, where, entry in _entries(entries, path, "strategy"):
        _check_table(entry, _STRATEGY_KEYS, where, "strategy")
        if "method" in entry and ("classifier" in entry or "regressor" in entry):
            raise UserError("give 'method' or 'classifier'/'regressor', not both", file=where,
                            field="method")
        for key, values in entry.get("grid", {}).items():
            if not isinstance(values, list) or not values:
                raise UserError("each grid entry is a non-empty list of values", file=where,
                                field=f"grid.{key}")
        for strategy in resolve(entry, where, _strategy_tuning(entry, tuning, where)):
            if strategy.name in seen:
                raise UserError(f"the name '{strategy.name}' is used by an earlier strategy",
                                file=where, field="name")
            seen.add(strategy.name)
            out.append(strategy)
    return out


def _speedup(table: Any, where: str, datasets, strategies) -> SpeedupSettings:
    t = dict(_check_table(table, _SPEEDUP_KEYS, where, "speedup"))
    if "workers" in t:
        if not t["workers"] or not all(isinstance(w, int) and not isinstance(w, bool) and w >= 1
                                       for w in t["workers"]):
            raise UserError("expected a list of whole numbers of at least 1", file=where,
                            field="workers")
        t["workers"] = tuple(sorted(set(t["workers"])))
    names = {d.name for d in datasets}
    snames = {s.name for s in strategies}
    for key, known in (("datasets", names), ("strategies", snames)):
        for n in t.get(key, []):
            if n not in known:
                raise UserError(f"'{n}' is not a {key[:-1]} of this suite{closest(n, known)}",
                                file=where, field=key)
        if key in t:
            t[key] = tuple(t[key])
    if t.get("repeats", 5) < 1:
        raise UserError("must be at least 1", file=where, field="repeats")
    if "noise_margin" in t:
        if not 0 < t["noise_margin"] < 10:
            raise UserError("expected a relative spread above 0, such as 0.15 for 15 %",
                            file=where, field="noise_margin")
        t["noise_margin"] = float(t["noise_margin"])
    return SpeedupSettings(**t)
