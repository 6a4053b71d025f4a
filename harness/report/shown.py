"""How much of a big store the figures show: the datasets of the per-dataset figures and the
pairs of the verdict pictures. Every dataset and pair is in the tables; the report says when a
figure shows only some. No plotting library here: the report's own process decides what is
drawn without loading one (`harness.report.drawing`)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from harness.analysis.verdict import Verdict

# Figures with one panel per dataset show at most this many datasets (the first by name):
# past that they take longer to draw than everything else and are too tall to read.
MAX_PANELS = 12
# Pairs drawn at most: k strategies make k(k − 1)/2 pairs (300 for 25), whose triangles would
# take longer to draw than all the rest of the report and make a page too tall to read.
MAX_PAIRS = 24


def drawn_pairs(v: Verdict) -> pd.DataFrame:
    """The rows of ``v.across`` the pictures show: every pair, or past `MAX_PAIRS` the pairs
    of the best-ranked strategy (at most `MAX_PAIRS` of them)."""
    if len(v.across) <= MAX_PAIRS:
        return v.across
    a = v.across
    return a[(a["a"] == v.best) | (a["b"] == v.best)].head(MAX_PAIRS)


def drawn_posterior(v: Verdict) -> dict[tuple[str, str], np.ndarray]:
    """The posterior samples of the pairs the pictures show, copied (so that those of the
    other pairs, 20 MB for 300 pairs, can be let go)."""
    if v.across is None or not v.posterior:
        return {}
    return {k: np.array(v.posterior[k]) for k in zip(*(drawn_pairs(v)[c] for c in "ab"))
            if k in v.posterior}
