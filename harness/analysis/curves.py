"""What the ensemble-size curves say: for each ensemble strategy on one dataset, whether more
members would help, whether fewer would do as well, or whether the score falls as members are
added. The noise yardstick is the standard error of the final score over folds."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from harness.strategies import BOOSTING, SINGLE_TREE

RISING, FLAT, FALLING = "rising", "flat", "falling"


@dataclass(frozen=True)
class CurveAdvice:
    strategy: str
    family: str
    shape: str          # RISING: still gaining at its last size; FLAT: a smaller size is
                        # within the noise of the last; FALLING: the last size is worse than
                        # an earlier one by more than the noise
    metric: str
    last_size: int
    last_score: float
    before_last_size: int
    before_last_score: float
    enough_size: int    # FLAT: the smallest size within the noise of the last score
    peak_size: int      # FALLING: the size with the best mean score
    peak_score: float

    @property
    def stages(self) -> bool:
        """Whether the members are boosting stages (otherwise trees of a bagging ensemble)."""
        return self.family == BOOSTING


def mean_curve(curves) -> pd.Series:
    """Mean score over folds at each ensemble size every fold's curve has (``curves``: one
    list of [members, score] per fold). Folds of a tuned strategy may end at different
    sizes; a mean over only some folds would jump between them."""
    per_fold = [dict((int(n), float(v)) for n, v in c) for c in curves]
    common = sorted(set.intersection(*(set(f) for f in per_fold))) if per_fold else []
    return pd.Series({n: float(np.mean([f[n] for f in per_fold])) for n in common},
                     dtype=float)


def curve_advice(ok: pd.DataFrame, metric: str) -> list[CurveAdvice]:
    """One `CurveAdvice` per strategy of ``ok`` (successful cells of one dataset) that has
    an ensemble-size curve with at least three sizes; ``metric`` is the one the curves score."""
    out = []
    for name, cells in ok[ok["curve"].notna()].groupby("strategy", sort=False):
        family = str(cells["family"].iloc[0])
        if family == SINGLE_TREE:
            continue
        mean = mean_curve(cells["curve"])
        if len(mean) < 3:
            continue
        final = cells[metric].to_numpy(float)
        noise = float(np.std(final, ddof=1) / np.sqrt(len(final))) if len(final) > 1 else 0.0
        noise = max(noise, 1e-9)
        sizes, values = mean.index.to_numpy(), mean.to_numpy()
        peak = int(np.argmax(values))
        if values[peak] - values[-1] > noise:
            shape = FALLING
        elif values[-1] - values[-2] > noise:
            shape = RISING
        else:
            shape = FLAT
        enough = int(sizes[np.argmax(values >= values[-1] - noise)])
        if shape == FLAT and enough == sizes[-1]:
            shape = RISING  # nothing smaller is as good: the last members still count
        out.append(CurveAdvice(strategy=str(name), family=family, shape=shape, metric=metric,
                               last_size=int(sizes[-1]), last_score=float(values[-1]),
                               before_last_size=int(sizes[-2]),
                               before_last_score=float(values[-2]), enough_size=enough,
                               peak_size=int(sizes[peak]), peak_score=float(values[peak])))
    return out
