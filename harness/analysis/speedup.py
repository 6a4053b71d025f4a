"""What the speedup points say: speedup S(p) = T(1) / T(p) from median fit wall times,
efficiency S(p) / p, and the serial fraction f of Amdahl's law, S(p) = 1 / (f + (1 − f) / p)
(Amdahl 1967), fitted by least squares on the measured speedups, f kept in [0, 1].

Intervals (at `LEVEL`) come from a bootstrap over repeats: each worker count's repeats are
resampled, medians, speedups and f recomputed. With two worker counts (1 and p) the fit is
exactly determined; its interval then reflects the repeats' spread only. Speedups at
`EXTRAPOLATE_TO` cores are extrapolations of the fitted law, not measurements.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
from scipy.optimize import minimize_scalar

from harness.work_units import OK

BUSY_CORES = 0.25       # other processes keeping this many cores busy mark a point "busy"
EXTRAPOLATE_TO = (8, 16, 64)
BOOTSTRAP = 1000        # resamples of the repeats for the intervals
LEVEL = 0.95
# Below this many repeats the nominal 95 % interval of T(1)/T(p) covers the true speedup less
# often than stated: measured by benchmarks/speedup_interval_coverage.py (log-normal fit
# times, 2,000 simulations): 0.67 at 2 repeats, 0.90 at 3, 0.97 at 5 and more.
FULL_COVERAGE_REPEATS = 5
COVERAGE_BY_REPEATS = {2: 0.67, 3: 0.90, 4: 0.90}


def amdahl_speedup(workers, serial_fraction):
    """Amdahl's law: S(p) = 1 / (f + (1 − f) / p)."""
    p = np.asarray(workers, dtype=float)
    return 1.0 / (serial_fraction + (1.0 - serial_fraction) / p)


def fit_serial_fraction(workers, speedups) -> float:
    """Least-squares serial fraction f in [0, 1] of Amdahl's law for measured speedups.

    Minimises Σ (S(p) − 1 / (f + (1 − f)/p))² over f in [0, 1]: a grid of 201 values finds
    the basin, SciPy's bounded scalar minimiser polishes it.
    """
    p = np.asarray(workers, dtype=float)
    s = np.asarray(speedups, dtype=float)
    keep = np.isfinite(s) & (p > 1)
    if not keep.any():
        return float("nan")
    p, s = p[keep], s[keep]

    def loss(f):
        return float(np.sum((s - amdahl_speedup(p, f)) ** 2))

    grid = np.linspace(0.0, 1.0, 201)
    best = grid[int(np.argmin(((s - amdahl_speedup(p, grid[:, None])) ** 2).sum(axis=1)))]
    lo, hi = max(0.0, best - 0.005), min(1.0, best + 0.005)
    res = minimize_scalar(loss, bounds=(lo, hi), method="bounded", options={"xatol": 1e-10})
    candidates = [(loss(f), f) for f in (res.x, lo, hi, best)]
    return float(min(candidates)[1])


def bootstrap_medians(times, rng) -> np.ndarray:
    """`BOOTSTRAP` medians of the repeats resampled with replacement (the bootstrap over
    repeats behind every interval here)."""
    t = np.asarray(times, dtype=float)
    return np.median(rng.choice(t, size=(BOOTSTRAP, len(t)), replace=True), axis=1)


def speedup_interval(t1, tp, rng) -> tuple[float, float]:
    """The `LEVEL` percentile bootstrap interval of median(t1) / median(tp)."""
    ratio = bootstrap_medians(t1, rng) / bootstrap_medians(tp, rng)
    lo, hi = np.quantile(ratio, [(1 - LEVEL) / 2, (1 + LEVEL) / 2])
    return float(lo), float(hi)


def _limits_text(limits: dict | None) -> str:
    if not limits:
        return ""
    pools = {}
    for pool in limits.get("pools", []):
        pools.setdefault(pool["api"], set()).add(pool["threads"])
    parts = [f"{api}={','.join(map(str, sorted(v)))}" for api, v in sorted(pools.items())]
    jobs = sorted({str(v) for v in limits.get("n_jobs", {}).values()})
    parts.append(f"n_jobs={','.join(jobs)}" if jobs else "no n_jobs")
    return " ".join(parts)


def _limits_ok(limits: dict | None, workers: int) -> bool:
    if not limits:
        return False
    return (all(pool["threads"] == workers for pool in limits.get("pools", []))
            and all(v == workers for v in limits.get("n_jobs", {}).values()))


def summarize(frame: pd.DataFrame, noise_margin: float = 0.15,
              seed: int = 0) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Stored speedup rows → (one row per point, one row per dataset × strategy fit).

    Points: median fit wall time with min, max and quartiles over repeats, relative spread
    (max − min) / median and whether it exceeds ``noise_margin``, median CPU seconds and
    cores busy (CPU / wall), prediction rows per second (test rows / median predict time),
    cores kept busy by other processes, the limits seen inside the fits, speedup with its
    bootstrap interval and efficiency. Fits: serial fraction with its interval and the
    extrapolated speedups. Deterministic for a given store (seeded bootstrap).
    """
    if frame.empty:
        return pd.DataFrame(), pd.DataFrame()
    frame = frame.copy()
    frame["limits"] = [json.loads(v) if isinstance(v, str) and v else None
                       for v in frame["limits"]]
    ok = frame[frame["status"] == OK]
    points, fits = [], []
    rng = np.random.default_rng(seed)
    for (ds, st), part in frame.groupby(["dataset", "strategy"], sort=False):
        good = ok[(ok["dataset"] == ds) & (ok["strategy"] == st)]
        family = part["family"].iloc[0]
        method = part["method"].iloc[0] if "method" in part else "custom"
        times = {int(w): g["fit_seconds"].to_numpy(float)
                 for w, g in good.groupby("workers")}
        counts = sorted(times)
        base = times.get(1)
        boot = {w: bootstrap_medians(t, rng) for w, t in times.items()}
        boot_s = {w: boot[1] / boot[w] for w in counts} if base is not None else {}
        for w, g in part.groupby("workers"):
            w = int(w)
            row = {"dataset": ds, "strategy": st, "family": family, "method": method,
                   "workers": w}
            gg = g[g["status"] == OK]
            if gg.empty:
                bad = g.iloc[0]
                row.update(status=bad["status"], message=bad["message"], repeats=0)
                points.append(row)
                continue
            t = gg["fit_seconds"].to_numpy(float)
            med = float(np.median(t))
            spread = float((t.max() - t.min()) / med) if len(t) > 1 and med > 0 else np.nan
            limits = [lim for lim in gg["limits"]]
            texts = sorted({_limits_text(lim) for lim in limits})
            cpu = float(np.median(gg["fit_cpu_seconds"].to_numpy(float)))
            pred = float(np.median(gg["predict_seconds"].to_numpy(float)))
            row.update(status=OK, message="", repeats=len(t), fit_seconds=med,
                       fit_seconds_min=float(t.min()), fit_seconds_max=float(t.max()),
                       fit_seconds_q1=float(np.quantile(t, 0.25)),
                       fit_seconds_q3=float(np.quantile(t, 0.75)), spread=spread,
                       noisy=bool(spread > noise_margin) if np.isfinite(spread) else False,
                       fit_cpu_seconds=cpu, cores_busy=cpu / med if med > 0 else np.nan,
                       predict_rows_per_second=float(gg["n_test"].iloc[0]) / pred
                       if pred > 0 else np.nan,
                       other_load=float(np.median(gg["other_load"].to_numpy(float))),
                       limits=" | ".join(texts),
                       limits_ok=all(_limits_ok(lim, w) for lim in limits))
            row["busy"] = bool(row["other_load"] > BUSY_CORES)
            if base is not None:
                s = float(np.median(base)) / med
                lo, hi = np.quantile(boot_s[w], [(1 - LEVEL) / 2, (1 + LEVEL) / 2])
                row.update(speedup=s, speedup_low=float(lo), speedup_high=float(hi),
                           efficiency=s / w)
            points.append(row)
        fit = {"dataset": ds, "strategy": st, "family": family, "method": method,
               "worker_counts": len(counts), "max_workers": max(counts) if counts else np.nan}
        if base is None or len(counts) < 2:
            fit["fit"] = ("no fit: needs 1 worker and at least one more worker count"
                          if counts else "no fit: no point measured")
            fits.append(fit)
            continue
        med_s = [float(np.median(base)) / float(np.median(times[w])) for w in counts]
        f = fit_serial_fraction(counts, med_s)
        fb = np.array([fit_serial_fraction(counts, [boot_s[w][b] for w in counts])
                       for b in range(BOOTSTRAP)])
        f_lo, f_hi = np.quantile(fb, [(1 - LEVEL) / 2, (1 + LEVEL) / 2])
        single = min(len(times[w]) for w in counts) < 2
        how = (f"exactly determined by {len(counts)} worker counts (1 and {counts[-1]})"
               if len(counts) == 2 else f"least squares over {len(counts)} worker counts")
        how += ("; no interval (one repeat)" if single else
                f"; {LEVEL:.0%} interval: bootstrap over repeats")
        if any(s < 1.0 for s in med_s[1:]):
            how += "; slower with more workers, which Amdahl's law cannot describe"
        fit.update(serial_fraction=f, serial_fraction_low=float(f_lo),
                   serial_fraction_high=float(f_hi), fit=how,
                   measured_speedup=med_s[-1])
        for q in EXTRAPOLATE_TO:
            fit[f"extrapolated_speedup_{q}"] = float(amdahl_speedup(q, f))
            fit[f"extrapolated_speedup_{q}_low"] = float(amdahl_speedup(q, f_hi))
            fit[f"extrapolated_speedup_{q}_high"] = float(amdahl_speedup(q, f_lo))
        fits.append(fit)
    return pd.DataFrame(points), pd.DataFrame(fits)
