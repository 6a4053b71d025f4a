"""Seed an openml-python cache with small invented datasets, tasks and a suite, for offline tests.

Files are written in the layout openml-python 0.15.1 reads back (its cache folder for the
configured server, see ``openml.config.get_cache_directory()``), the layout
``harness/datasets/openml/cache.py`` knows and pyproject.toml's openml range stands for:

    datasets/<id>/description.xml   features.xml   qualities.xml
    datasets/<id>/dataset.arff      (or dataset_<id>.pq when the description has a parquet_url)
    tasks/<id>/task.xml             datasplits.arff

plus ``suites/<id or alias>.json``, woodlot's own record of a suite's task list (the client
keeps none). The server is a closed loopback port, so any download the client attempts fails
at once instead of reaching a network.
"""

from __future__ import annotations

import hashlib
import json
import os
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterator
from xml.sax.saxutils import escape

import numpy as np
import pandas as pd

from harness.datasets.spec import DatasetSpec

CLOSED_SERVER = "http://127.0.0.1:9/api/v1/xml"
NS = 'xmlns:oml="http://openml.org/openml"'


@contextmanager
def openml_configured(root: Path, server: str = CLOSED_SERVER, *,
                      cache_env: bool = True) -> Iterator[Path]:
    """Point openml-python at a fresh cache under ``root`` through its own configuration.

    Writes openml's config file (``$XDG_CONFIG_HOME/openml/config``) naming ``server`` and a
    ``cachedir``; with ``cache_env`` also sets ``OPENML_CACHE_DIR`` (which takes precedence).
    The client reads both when ``openml.config._setup()`` runs, as it does on import. Yields
    the per-server cache folder; restores the previous configuration afterwards. (``_setup`` is
    private; it is called here because no public call re-reads the config file and the
    environment short of a fresh interpreter.)
    """
    import openml

    before = openml.config.get_config_as_dict()
    names = ("XDG_CONFIG_HOME", "OPENML_CACHE_DIR", "OPENML_SKIP_PARQUET", "no_proxy",
             "NO_PROXY", "WOODLOT_OPENML_ATTEMPTS", "WOODLOT_OPENML_BACKOFF")
    saved = {k: os.environ.get(k) for k in names}
    config_home = root / "config"
    (config_home / "openml").mkdir(parents=True, exist_ok=True)
    (config_home / "openml" / "config").write_text(
        f"server = {server}\ncachedir = {root / 'cache-from-config'}\n"
        "connection_n_retries = 1\n")
    try:
        os.environ["XDG_CONFIG_HOME"] = str(config_home)
        if cache_env:
            os.environ["OPENML_CACHE_DIR"] = str(root / "cache")
        else:
            os.environ.pop("OPENML_CACHE_DIR", None)
        os.environ.pop("OPENML_SKIP_PARQUET", None)
        os.environ["no_proxy"] = os.environ["NO_PROXY"] = "*"
        os.environ["WOODLOT_OPENML_ATTEMPTS"] = "2"
        os.environ["WOODLOT_OPENML_BACKOFF"] = "0.01"
        openml.config._setup()
        yield Path(openml.config.get_cache_directory())
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v
        openml.config._setup(before)


# ------------------------------------------------------------------------------ invented data

@dataclass
class Column:
    name: str
    kind: str  # "numeric", "integer", "nominal", "string"
    values: list = field(default_factory=list)  # nominal values


@dataclass
class Table:
    did: int
    name: str
    frame: pd.DataFrame
    columns: list[Column]
    target: str
    row_id: str | None = None
    ignore: tuple[str, ...] = ()
    version: int = 1
    parquet: bool = False

    @property
    def n_classes(self) -> int:
        col = next(c for c in self.columns if c.name == self.target)
        return len(col.values) if col.kind == "nominal" else 0


def orchard(did: int = 4242, n: int = 60, seed: int = 0) -> Table:
    """Classification: numeric, integer and nominal features, missing values, a row id and
    two ignored columns (one of them free text), target ``species`` with three classes."""
    rng = np.random.default_rng(seed)
    species = np.array(["oak", "ash", "elm"])[rng.permutation(np.arange(n) % 3)]
    height = np.round(rng.normal(10, 2, n) + (species == "oak") * 4, 2)
    height[rng.choice(n, 6, replace=False)] = np.nan
    soil = rng.choice(np.array(["clay", "loam", "sand"], dtype=object), n)
    soil[rng.choice(n, 4, replace=False)] = None
    frame = pd.DataFrame({
        "row_key": 1000 + np.arange(n),
        "collector": rng.integers(1, 6, n),
        "height": height,
        "girth": rng.integers(20, 90, n),
        "soil": soil,
        "survey_note": [f"plot {i} by the {('north', 'south')[i % 2]} fence" for i in range(n)],
        "species": species,
    })
    cols = [Column("row_key", "integer"), Column("collector", "integer"),
            Column("height", "numeric"), Column("girth", "integer"),
            Column("soil", "nominal", ["clay", "loam", "sand"]), Column("survey_note", "string"),
            Column("species", "nominal", ["oak", "ash", "elm"])]
    return Table(did, "orchard-survey", frame, cols, target="species", row_id="row_key",
                 ignore=("collector", "survey_note"), version=2)


def river(did: int = 4243, n: int = 60, seed: int = 1) -> Table:
    """Regression stored as Parquet (categorical columns as pandas categories), with a row id."""
    rng = np.random.default_rng(seed)
    seasons = ["spring", "summer", "autumn", "winter"]
    season = pd.Categorical(rng.choice(seasons, n), categories=seasons)
    rain = np.round(rng.gamma(2.0, 3.0, n), 2)
    level = np.round(rng.normal(1.5, 0.3, n), 3)
    level[rng.choice(n, 5, replace=False)] = np.nan
    frame = pd.DataFrame({
        "gauge_id": np.arange(n, dtype=np.int64),
        "rain": rain,
        "season": season,
        "station": pd.Categorical(rng.choice(["upper", "lower"], n), categories=["upper", "lower"]),
        "level": level,
        "flow": np.round(3 * rain + rng.normal(0, 1, n), 3),
    })
    cols = [Column("gauge_id", "integer"), Column("rain", "numeric"),
            Column("season", "nominal", seasons), Column("station", "nominal", ["upper", "lower"]),
            Column("level", "numeric"), Column("flow", "numeric")]
    return Table(did, "river-gauge", frame, cols, target="flow", row_id="gauge_id", parquet=True)


def meadow(did: int = 4244, n: int = 200, seed: int = 2) -> Table:
    """A larger classification table with five classes (used to test the suite filters)."""
    rng = np.random.default_rng(seed)
    classes = ["a", "b", "c", "d", "e"]
    frame = pd.DataFrame({"clover": rng.normal(size=n), "grass": rng.normal(size=n),
                          "kind": np.array(classes)[np.arange(n) % 5]})
    cols = [Column("clover", "numeric"), Column("grass", "numeric"),
            Column("kind", "nominal", classes)]
    return Table(did, "meadow-count", frame, cols, target="kind")


# ------------------------------------------------------------------------------- cache files

def _arff_value(v, kind: str) -> str:
    if v is None or (isinstance(v, float) and np.isnan(v)):
        return "?"
    if kind == "string":
        return "'" + str(v).replace("\\", "\\\\").replace("'", "\\'") + "'"
    if kind == "integer":
        return str(int(v))
    return str(v)


def arff_text(t: Table) -> str:
    lines = [f"@RELATION {t.name}", ""]
    for c in t.columns:
        kind = {"numeric": "REAL", "integer": "INTEGER", "string": "STRING"}.get(c.kind)
        lines.append(f"@ATTRIBUTE {c.name} " + (kind or "{" + ",".join(c.values) + "}"))
    lines += ["", "@DATA"]
    for row in t.frame.itertuples(index=False):
        lines.append(",".join(_arff_value(v, c.kind) for v, c in zip(row, t.columns)))
    return "\n".join(lines) + "\n"


def write_dataset(cache: Path, t: Table, *, data: bool = True, qualities: bool = True) -> Path:
    """Description, features, qualities and (with ``data``) the data file of one dataset."""
    d = cache / "datasets" / str(t.did)
    d.mkdir(parents=True, exist_ok=True)
    arff = arff_text(t)
    parquet_url = (f"<oml:parquet_url>http://127.0.0.1:9/datasets/0000/{t.did:04d}/"
                   f"dataset_{t.did}.pq</oml:parquet_url>") if t.parquet else ""
    extra = "".join(f"<oml:ignore_attribute>{a}</oml:ignore_attribute>" for a in t.ignore)
    if t.row_id:
        extra += f"<oml:row_id_attribute>{t.row_id}</oml:row_id_attribute>"
    (d / "description.xml").write_text(f"""<oml:data_set_description {NS}>
  <oml:id>{t.did}</oml:id>
  <oml:name>{t.name}</oml:name>
  <oml:version>{t.version}</oml:version>
  <oml:description>Invented for woodlot's tests.</oml:description>
  <oml:format>ARFF</oml:format>
  <oml:upload_date>2024-01-01T00:00:00</oml:upload_date>
  <oml:licence>Public</oml:licence>
  <oml:url>http://127.0.0.1:9/data/v1/download/{t.did}/{t.name}.arff</oml:url>
  {parquet_url}
  <oml:file_id>{t.did}</oml:file_id>
  <oml:default_target_attribute>{t.target}</oml:default_target_attribute>
  {extra}
  <oml:visibility>public</oml:visibility>
  <oml:status>active</oml:status>
  <oml:md5_checksum>{hashlib.md5(arff.encode()).hexdigest()}</oml:md5_checksum>
</oml:data_set_description>
""", encoding="utf8")
    feats = []
    for i, c in enumerate(t.columns):
        kind = "nominal" if c.kind == "nominal" else ("string" if c.kind == "string"
                                                     else "numeric")
        nominal = "".join(f"<oml:nominal_value>{escape(v)}</oml:nominal_value>"
                          for v in c.values)
        missing = int(t.frame[c.name].isna().sum())
        feats.append(f"""  <oml:feature>
    <oml:index>{i}</oml:index>
    <oml:name>{c.name}</oml:name>
    <oml:data_type>{kind}</oml:data_type>
    {nominal}
    <oml:is_target>{str(c.name == t.target).lower()}</oml:is_target>
    <oml:is_ignore>{str(c.name in t.ignore).lower()}</oml:is_ignore>
    <oml:is_row_identifier>{str(c.name == t.row_id).lower()}</oml:is_row_identifier>
    <oml:number_of_missing_values>{missing}</oml:number_of_missing_values>
  </oml:feature>""")
    (d / "features.xml").write_text(f"<oml:data_features {NS}>\n" + "\n".join(feats)
                                    + "\n</oml:data_features>\n", encoding="utf8")
    if qualities:
        q = {"NumberOfInstances": len(t.frame), "NumberOfFeatures": len(t.columns),
             "NumberOfClasses": t.n_classes,
             "NumberOfMissingValues": int(t.frame.isna().sum().sum())}
        body = "".join(f"<oml:quality><oml:name>{k}</oml:name><oml:value>{float(v)}"
                       f"</oml:value></oml:quality>" for k, v in q.items())
        (d / "qualities.xml").write_text(f"<oml:data_qualities {NS}>{body}"
                                         "</oml:data_qualities>\n", encoding="utf8")
    if data:
        if t.parquet:
            t.frame.to_parquet(d / f"dataset_{t.did}.pq", index=False)
        else:
            (d / "dataset.arff").write_text(arff, encoding="utf8")
    return d


TASK_TYPES = {1: "Supervised Classification", 2: "Supervised Regression", 5: "Clustering",
              4: "Supervised Data Stream Classification"}


def write_task(cache: Path, tid: int, t: Table, *, type_id: int = 1, repeats: int = 2,
               folds: int = 3, seed: int = 0, splits: bool = True
               ) -> dict[tuple[int, int], tuple[np.ndarray, np.ndarray]]:
    """A task description and (for supervised tasks) its splits file: ``repeats`` × ``folds``
    cross-validation over the table's rows, in a shuffled order. Returns the splits written."""
    d = cache / "tasks" / str(tid)
    d.mkdir(parents=True, exist_ok=True)
    source = (f'<oml:input name="source_data"><oml:data_set>'
              f'<oml:data_set_id>{t.did}</oml:data_set_id>'
              + (f'<oml:target_feature>{t.target}</oml:target_feature>' if type_id != 5 else "")
              + '</oml:data_set></oml:input>')
    procedure = "" if type_id == 5 else f"""
  <oml:input name="estimation_procedure">
    <oml:estimation_procedure>
      <oml:id>1</oml:id>
      <oml:type>crossvalidation</oml:type>
      <oml:data_splits_url>http://127.0.0.1:9/api_splits/get/{tid}/Task_{tid}_splits.arff</oml:data_splits_url>
      <oml:parameter name="number_repeats">{repeats}</oml:parameter>
      <oml:parameter name="number_folds">{folds}</oml:parameter>
      <oml:parameter name="percentage"></oml:parameter>
      <oml:parameter name="stratified_sampling">true</oml:parameter>
    </oml:estimation_procedure>
  </oml:input>
  <oml:input name="evaluation_measures">
    <oml:evaluation_measures><oml:evaluation_measure>predictive_accuracy</oml:evaluation_measure></oml:evaluation_measures>
  </oml:input>"""
    (d / "task.xml").write_text(f"""<oml:task {NS}>
  <oml:task_id>{tid}</oml:task_id>
  <oml:task_name>Task {tid}: {t.name}</oml:task_name>
  <oml:task_type_id>{type_id}</oml:task_type_id>
  <oml:task_type>{TASK_TYPES[type_id]}</oml:task_type>
  {source}{procedure}
</oml:task>
""", encoding="utf8")
    out: dict[tuple[int, int], tuple[np.ndarray, np.ndarray]] = {}
    if type_id == 5 or not splits:
        return out
    rng = np.random.default_rng(seed)
    n = len(t.frame)
    lines = [f"@RELATION Task_{tid}_splits", "", "@ATTRIBUTE type {TRAIN,TEST}",
             "@ATTRIBUTE rowid INTEGER", "@ATTRIBUTE repeat INTEGER", "@ATTRIBUTE fold INTEGER",
             "", "@DATA"]
    for r in range(repeats):
        order = rng.permutation(n)
        parts = np.array_split(order, folds)
        for f in range(folds):
            test = parts[f]
            train = np.concatenate([p for i, p in enumerate(parts) if i != f])
            out[(r, f)] = (train, test)
            lines += [f"TRAIN,{i},{r},{f}" for i in train]
            lines += [f"TEST,{i},{r},{f}" for i in test]
    (d / "datasplits.arff").write_text("\n".join(lines) + "\n", encoding="utf8")
    return out


def write_suite(cache: Path, key: int | str, suite_id: int, alias: str, tasks: list[int],
                name: str = "Orchard benchmark") -> Path:
    """woodlot's record of a benchmark suite's task list (see the module docstring)."""
    d = cache / "suites"
    d.mkdir(parents=True, exist_ok=True)
    record = {"id": suite_id, "alias": alias, "name": name, "tasks": tasks, "unsupported": {}}
    path = d / f"{key}.json"
    path.write_text(json.dumps(record), encoding="utf8")
    return path


class Seeded:
    """The cache most tests share: datasets 4242 (ARFF), 4243 (Parquet) and 4244 (metadata
    only); tasks 77, 78 (supervised), 79 (no data), 80 (clustering), 81 (data stream); suite
    9001 alias ``orchard-bench`` of tasks 77-80."""

    def __init__(self, root: Path, cache: Path):
        self.root, self.cache = root, cache
        self.suite_file = root / "suites" / "trees.toml"
        self.orchard, self.river, self.meadow = orchard(), river(), meadow()
        write_dataset(cache, self.orchard)
        write_dataset(cache, self.river)
        write_dataset(cache, self.meadow, data=False)  # metadata only
        self.splits77 = write_task(cache, 77, self.orchard, seed=5)
        self.splits78 = write_task(cache, 78, self.river, type_id=2, repeats=1, folds=4)
        write_task(cache, 79, self.meadow, splits=False)
        write_task(cache, 80, self.orchard, type_id=5)
        write_task(cache, 81, self.orchard, type_id=4)
        write_suite(cache, 9001, 9001, "orchard-bench", [77, 78, 79, 80])
        write_suite(cache, "orchard-bench", 9001, "orchard-bench", [77, 78, 79, 80])

    def spec(self, name="orchard", position=2, **options) -> DatasetSpec:
        return DatasetSpec(name=name, source="openml", options=options,
                           suite_file=self.suite_file, position=position)
