"""Parallel speedup: Amdahl fit, thread limits inside the fit, CPU of worker processes, the
forest/boosting contrast, outputs from the store alone, bad [speedup] entries."""

from __future__ import annotations

import json
import multiprocessing as mp
import time

import numpy as np
import pandas as pd
import pytest
from threadpoolctl import threadpool_info

from harness.cli import main
from harness.execution.measure import measured
from harness.plan import make_plan
from harness.analysis.speedup import amdahl_speedup, fit_serial_fraction, summarize
from harness.execution.speedup_point import run_point
from harness.plan import plan_speedup, usable_cores, worker_counts
from harness.report.writer import write_report
from harness.store import Store
from harness.suite import SpeedupSettings, load_suite

TWO_CORES = pytest.mark.skipif(usable_cores() < 2, reason="needs at least two cores")


# ------------------------------------------------------------------ Amdahl's law fit
# Amdahl's law (Amdahl 1967): S(p) = 1 / (f + (1 - f) / p). The timings below are synthetic,
# made from the law itself (with and without noise), so the true serial fraction is known.

def synthetic_rows(f: float, workers, repeats: int, noise: float = 0.0, seed: int = 0,
                   t1: float = 10.0, strategy: str = "s") -> list[dict]:
    rng = np.random.default_rng(seed)
    rows = []
    for p in workers:
        for r in range(repeats):
            t = t1 * (f + (1 - f) / p) * (np.exp(rng.normal(0, noise)) if noise else 1.0)
            rows.append({"key": f"{strategy}-{p}", "run": 1, "dataset": "d", "strategy": strategy,
                         "family": "forest", "method": "random-forest", "task": "classification",
                         "workers": p, "repeat": r, "status": "ok", "message": "",
                         "n_train": 800, "n_test": 200, "fit_seconds": t,
                         "fit_cpu_seconds": t * p, "predict_seconds": 0.01, "other_load": 0.0,
                         "limits": json.dumps({"pools": [{"api": "openmp", "threads": p}],
                                               "n_jobs": {"n_jobs": p}}), "host": "h"})
    return rows


@pytest.mark.parametrize("f", [0.0, 0.05, 0.25, 0.6, 0.95, 1.0])
def test_fit_recovers_known_serial_fraction(f):
    workers = [1, 2, 4, 8, 16]
    assert fit_serial_fraction(workers, amdahl_speedup(workers, f)) == pytest.approx(f, abs=1e-7)


@pytest.mark.parametrize("f", [0.02, 0.3, 0.7])
def test_fit_recovers_serial_fraction_from_noisy_repeats(f):
    frame = pd.DataFrame(synthetic_rows(f, [1, 2, 4, 8, 16], repeats=5, noise=0.03, seed=3))
    points, fits = summarize(frame)
    fit = fits.iloc[0]
    assert fit["serial_fraction"] == pytest.approx(f, abs=0.03)
    assert fit["serial_fraction_low"] <= f <= fit["serial_fraction_high"]
    assert fit["serial_fraction_high"] - fit["serial_fraction_low"] < 0.2
    assert "least squares over 5 worker counts" in fit["fit"]
    # extrapolations follow the fitted law and bracket the true one
    assert fit["extrapolated_speedup_64"] == pytest.approx(
        amdahl_speedup(64, fit["serial_fraction"]))
    assert fit["extrapolated_speedup_64_low"] <= amdahl_speedup(64, f) \
        <= fit["extrapolated_speedup_64_high"]


def test_two_worker_counts_determine_the_fit_exactly():
    f = 0.2
    points, fits = summarize(pd.DataFrame(synthetic_rows(f, [1, 2], repeats=3)))
    fit = fits.iloc[0]
    s2 = 1 / (f + (1 - f) / 2)
    assert fit["measured_speedup"] == pytest.approx(s2)
    assert fit["serial_fraction"] == pytest.approx(2 / s2 - 1, abs=1e-7)
    assert "exactly determined by 2 worker counts" in fit["fit"]
    # identical repeats: nothing to resample, the interval has no width
    assert fit["serial_fraction_low"] == pytest.approx(fit["serial_fraction_high"])
    noisy = summarize(pd.DataFrame(synthetic_rows(f, [1, 2], repeats=5, noise=0.05)))[1].iloc[0]
    assert noisy["serial_fraction_high"] - noisy["serial_fraction_low"] > 0.01
    assert noisy["serial_fraction_low"] <= noisy["serial_fraction"] \
        <= noisy["serial_fraction_high"]


def test_points_speedup_efficiency_and_noise_flags():
    rows = synthetic_rows(0.5, [1, 2], repeats=3)
    rows[-1]["fit_seconds"] *= 1.5  # one repeat at 2 workers far off: the point is noisy
    points, fits = summarize(pd.DataFrame(rows), noise_margin=0.15)
    two = points[points.workers == 2].iloc[0]
    t1, t2 = 10.0, 10.0 * 0.75
    assert two["fit_seconds"] == pytest.approx(t2) and two["speedup"] == pytest.approx(t1 / t2)
    assert two["efficiency"] == pytest.approx(t1 / t2 / 2)
    assert two["noisy"] and two["spread"] == pytest.approx(0.5)
    assert not points[points.workers == 1].iloc[0]["noisy"]
    assert two["predict_rows_per_second"] == pytest.approx(200 / 0.01)
    assert two["limits_ok"]


def test_slowdown_is_reported_not_modelled():
    points, fits = summarize(pd.DataFrame(synthetic_rows(0.0, [1], 3) + [
        {**r, "workers": 2, "fit_seconds": 12.0, "key": "s-2"}
        for r in synthetic_rows(0.0, [1], 3)]))
    fit = fits.iloc[0]
    assert fit["serial_fraction"] == pytest.approx(1.0) and "slower" in fit["fit"]


def test_worker_counts_default_clip_and_baseline():
    assert worker_counts((), 6) == ([1, 2, 4, 6], [])
    assert worker_counts((), 8)[0] == [1, 2, 4, 8]
    counts, notes = worker_counts((1, 2, 4, 8), 2)
    assert counts == [1, 2] and "4, 8 exceed the 2 cores present; clipped to 2" in notes[0]
    counts, notes = worker_counts((4,), 2)
    assert counts == [1, 2] and any("baseline" in n for n in notes)


# ------------------------------------------------------------------ measurement

def _burn_then_wait(seconds, ready, stop):
    t0 = time.process_time()
    while time.process_time() - t0 < seconds:
        pass
    ready.set()
    stop.wait(30)


def test_cpu_time_counts_worker_processes_still_alive():
    """A worker process that keeps running after the call (as joblib's pool does) counts."""
    ctx = mp.get_context("fork")
    ready, stop = ctx.Event(), ctx.Event()
    with measured() as t:
        proc = ctx.Process(target=_burn_then_wait, args=(0.4, ready, stop))
        proc.start()
        assert ready.wait(30)
    stop.set()
    proc.join(10)
    assert t.cpu >= 0.3, t


PROBE_SUITE = """
[suite]
name = "probe"

[protocol]
splits = "holdout"
test_fraction = 0.25
repeats = 1

[[dataset]]
name = "blobs"
from = "generator"
make = "make_classification"
params = {{ n_samples = 800, n_features = 6, random_state = 0 }}

[[strategy]]
name = "threads-seen"
classifier = "tests.speedup_probe:ThreadsSeen"
params = {{ record = "{record}" }}

[speedup]
workers = [1, 2]
repeats = 2
"""


@TWO_CORES
def test_thread_limits_are_in_force_inside_each_fit(write_suite, tmp_path):
    record = tmp_path / "seen.jsonl"
    path = write_suite(PROBE_SUITE.format(record=record))
    before = {(i["filepath"], i["num_threads"]) for i in threadpool_info()}
    assert main(["speedup", str(path), "--out", str(tmp_path / "out"), "--quiet"]) == 0
    seen = [json.loads(line) for line in record.read_text().splitlines()]
    # per point: one warm-up fit and two timed ones, each in the point's own process
    assert [s["n_jobs"] for s in seen] == [1, 1, 1, 2, 2, 2]
    for s in seen:
        assert s["pools"], "no native thread pool was loaded"
        for api, threads in s["pools"].items():
            assert set(threads) == {s["n_jobs"]}, (api, s)
    # the sweep's own record of what it found inside the fits agrees
    with Store(tmp_path / "out") as store:
        frame = store.speedup_frame()
    assert len(frame) == 4 and (frame.status == "ok").all()
    for _, row in frame.iterrows():
        limits = json.loads(row["limits"])
        assert limits["n_jobs"] == {"n_jobs": row["workers"]}
        assert {p["threads"] for p in limits["pools"]} == {row["workers"]}
    # and this process's own limits were never touched
    assert {(i["filepath"], i["num_threads"]) for i in threadpool_info()} == before


CONTRAST_SUITE = """
[suite]
name = "contrast"

[protocol]
splits = "holdout"
test_fraction = 0.2
repeats = 1
seed = 1

[[dataset]]
name = "table"
from = "generator"
make = "make_classification"
params = { n_samples = 20000, n_features = 20, n_informative = 10, random_state = 1 }

[[strategy]]
name = "forest"
method = "random-forest"
params = { n_estimators = 60 }

[[strategy]]
name = "bagging"
method = "bagged-trees"
params = { n_estimators = 6 }

[[strategy]]
name = "boosting"
method = "gradient-boosting"
params = { n_estimators = 20 }

[speedup]
workers = [1, 2]
repeats = 2
"""


@pytest.mark.slow
@TWO_CORES
def test_two_workers_speed_up_a_forest_but_not_classic_boosting(write_suite):
    """Common practice: a forest's trees are independent and spread over cores almost
    perfectly; classic gradient boosting fits its stages one after another on the previous
    stages' residuals and has no n_jobs, so two workers leave its fit time unchanged."""
    suite = load_suite(write_suite(CONTRAST_SUITE))
    plan = make_plan(suite)
    points, _, _ = plan_speedup(plan, suite.speedup, 2)
    rows = [r for p in points for r in run_point(p, plan.datasets[p.dataset], 120)]
    frame = pd.DataFrame(rows)
    assert (frame.status == "ok").all(), frame.message.tolist()
    frame["limits"] = frame["limits"].map(json.dumps)
    table, _ = summarize(frame)
    t = table.set_index(["strategy", "workers"])
    assert t.loc[("forest", 1), "fit_seconds"] >= 1.0
    assert t.loc[("boosting", 1), "fit_seconds"] >= 1.0
    if t["other_load"].max() > 0.5:
        pytest.skip(f"other processes kept {t['other_load'].max():.2f} cores busy during the "
                    "fits; speedups measured now would say more about them than about the "
                    "methods")
    assert t.loc[("forest", 2), "speedup"] >= 1.4, t
    assert 0.8 <= t.loc[("boosting", 2), "speedup"] <= 1.2, t
    # bagging's workers are processes: their CPU time is counted, not lost
    cpu = t["fit_cpu_seconds"]
    assert cpu[("bagging", 2)] >= 0.7 * cpu[("bagging", 1)]
    assert t.loc[("forest", 2), "cores_busy"] >= 1.4


# ------------------------------------------------------------------ outputs from the store

def test_speedup_outputs_regenerate_from_the_store_alone(tmp_path):
    folder = tmp_path / "out"
    rows = synthetic_rows(0.1, [1, 2, 4], 3, noise=0.02, strategy="forest") + \
        synthetic_rows(0.9, [1, 2, 4], 3, noise=0.02, strategy="boosting", seed=1)
    with Store(folder) as store:
        run = store.start_run("t", "", "test", {"speedup": {"noise_margin": 0.15,
                                                          "workers": [1, 2, 4], "notes": []}})
        store.set_speedup_plan({r["key"] for r in rows})
        for key in sorted({r["key"] for r in rows}):
            store.put_speedup([r for r in rows if r["key"] == key], run)
    out = write_report(folder)
    names = {p.name for p in out.files}
    assert {"speedup.csv", "speedup.md", "serial_fraction.csv", "speedup.png",
            "fit_time_vs_workers.png"} <= names
    table = pd.read_csv(folder / "tables" / "speedup.csv")
    frame = pd.DataFrame(rows)
    for (st, w), part in table.groupby(["strategy", "workers"]):
        t1 = frame[(frame.strategy == st) & (frame.workers == 1)].fit_seconds.median()
        tp = frame[(frame.strategy == st) & (frame.workers == w)].fit_seconds.median()
        assert part.speedup.iloc[0] == pytest.approx(t1 / tp)
    fits = pd.read_csv(folder / "tables" / "serial_fraction.csv").set_index("strategy")
    assert fits.loc["forest", "serial_fraction"] < fits.loc["boosting", "serial_fraction"]
    text = (folder / "tables" / "serial_fraction.md").read_text()
    assert "extrapolations of the fitted law, not measurements" in text
    before = {n: (folder / "tables" / n).read_text() for n in
              ("speedup.csv", "speedup.md", "serial_fraction.csv", "serial_fraction.md")}
    for sub in ("tables", "plots"):
        for p in (folder / sub).iterdir():
            p.unlink()
    assert main(["report", str(folder)]) == 0
    assert {n: (folder / "tables" / n).read_text() for n in before} == before
    assert (folder / "plots" / "speedup.png").stat().st_size > 10_000


SMALL_SWEEP = """
[suite]
name = "sweep"

[protocol]
splits = "holdout"
test_fraction = 0.25
repeats = 1

[[dataset]]
name = "blobs"
from = "generator"
make = "make_classification"
params = { n_samples = 1500, n_features = 8, random_state = 0 }

[[strategy]]
name = "tree"
method = "single-tree"

[[strategy]]
name = "forest"
method = "random-forest"
params = { n_estimators = 10 }

[speedup]
workers = [1, 2, 64]
repeats = 2
"""


@TWO_CORES
def test_scale_command_measures_resumes_and_reports(write_suite, tmp_path, capsys):
    path = write_suite(SMALL_SWEEP)
    out = tmp_path / "out"
    assert main(["speedup", str(path), "--out", str(out), "--quiet"]) == 0
    captured = capsys.readouterr()
    assert "4 speedup points planned (workers 1, 2): 0 already stored, 4 measured" in captured.out
    assert "64 exceeds the" in captured.err and "clipped to" in captured.err
    assert "clipped to" in (out / "tables" / "speedup.md").read_text()
    prov = json.loads((out / "provenance.json").read_text())["speedup"]
    for key in ("cpu_model", "cores", "load_average_before", "load_average_after"):
        assert prov[key] is not None, key
    table = pd.read_csv(out / "tables" / "speedup.csv")
    assert len(table) == 4 and (table.status == "ok").all()
    assert (table.fit_seconds > 0).all() and (table.predict_rows_per_second > 0).all()
    assert main(["speedup", str(path), "--out", str(out), "--quiet"]) == 0
    assert "4 already stored, 0 measured" in capsys.readouterr().out


# ------------------------------------------------------------------ bad [speedup] entries

@pytest.mark.parametrize("entry, field, words", [
    ('datasets = ["nope"]', "datasets", "'nope' is not a dataset of this suite"),
    ("workers = [0]", "workers", "whole numbers of at least 1"),
    ("workers = []", "workers", "whole numbers of at least 1"),
    ('strategies = ["forst"]', "strategies", "did you mean 'forest'"),
    ("noise_margin = 0", "noise_margin", "relative spread"),
    ("repeat = 3", "repeat", "did you mean 'repeats'"),
])
@pytest.mark.parametrize("command", ["speedup", "run"])
def test_bad_speedup_entry_is_one_clear_line_and_exit_2(write_suite, tmp_path, capsys, entry,
                                                        field, words, command):
    body = SMALL_SWEEP.replace("workers = [1, 2, 64]\nrepeats = 2\n", entry + "\n")
    path = write_suite(body)
    out = tmp_path / "out"
    assert main([command, str(path), "--out", str(out)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1, err
    assert str(path) in err and "[speedup]" in err and f"field '{field}'" in err and words in err
    assert not out.exists()


def test_default_speedup_covers_every_dataset_and_strategy(write_suite):
    suite = load_suite(write_suite(SMALL_SWEEP))
    plan = make_plan(suite)
    points, counts, _ = plan_speedup(plan, SpeedupSettings(), 4)
    assert counts == [1, 2, 4]
    assert {(p.strategy.name, p.workers) for p in points} == \
        {(s, w) for s in ("tree", "forest") for w in (1, 2, 4)}
    assert len({p.key for p in points}) == len(points)


def test_few_repeats_label_the_interval_approximate():
    # coverage by simulation (benchmarks/speedup_interval_coverage.py): about 90 % at 3 repeats
    from harness.report.tables import speedup_intro

    few = speedup_intro([{"repeats": 3}], 0.15)
    assert "approximate 95% bootstrap interval" in few and "about 90%" in few
    enough = speedup_intro([{"repeats": 5}], 0.15)
    assert "approximate" not in enough
