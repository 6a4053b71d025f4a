"""Tests for the critical difference diagram."""

from __future__ import annotations

import struct
from itertools import combinations

import numpy as np
import pytest
from matplotlib.image import imread

from harness.report.cd_diagram import cd_figure
from harness.analysis.stats import nemenyi_cd, nemenyi_groups

TITLE = "Critical difference (Nemenyi, α = 0.05)"
TEN = {
    "decision-tree": 7.10, "bagging[n_estimators=100]": 6.55,
    "random-forest[max_features=sqrt]": 6.10, "extra-trees[n_estimators=500]": 6.90,
    "gradient-boosting[learning_rate=0.1]": 6.25, "hist-gradient-boosting[max_depth=6]": 5.70,
    "hist-gradient-boosting[max_depth=None]": 5.70, "adaboost[n_estimators=200]": 3.50,
    "random-forest[max_depth=8]": 3.75, "bagging[max_samples=0.5]": 3.45,
}


def draw_cd_diagram(ranks, cd, groups, title, path):
    """The diagram saved as a PNG, as the report writer saves it."""
    cd_figure(ranks, cd, groups, title).savefig(path, dpi=150, format="png")
    return str(path)


def png_size(path) -> tuple[int, int]:
    """Width and height from a PNG's IHDR chunk, checking the signature on the way."""
    with open(path, "rb") as f:
        head = f.read(24)
    assert head[:8] == b"\x89PNG\r\n\x1a\n", "not a PNG signature"
    assert head[12:16] == b"IHDR"
    return struct.unpack(">II", head[16:24])


def check_png(path, min_bytes=5_000):
    width, height = png_size(path)
    assert path.stat().st_size > min_bytes
    pixels = imread(path)
    assert pixels.shape[:2] == (height, width)
    dark = (pixels[..., :3].mean(axis=2) < 0.5).mean()
    assert 0.005 < dark < 0.3  # some ink, mostly white background
    return width, height


def test_ten_strategies_png(tmp_path):
    cd = nemenyi_cd(10, 20)
    groups = nemenyi_groups(TEN, cd)
    assert len(groups) >= 2
    out = draw_cd_diagram(TEN, cd, groups, TITLE, tmp_path / "cd10.png")
    assert out == str(tmp_path / "cd10.png")
    width, height = check_png(tmp_path / "cd10.png")
    assert width > height > 200


def test_cd_none_and_single_group(tmp_path):
    draw_cd_diagram(TEN, None, [list(TEN)], "Average ranks", tmp_path / "none.png")
    check_png(tmp_path / "none.png")
    draw_cd_diagram({"a": 1.4, "b": 1.6}, 0.9, [{"a", "b"}], "Two", tmp_path / "two.png")
    check_png(tmp_path / "two.png", min_bytes=2_000)
    draw_cd_diagram({"a": 1.0, "b": 2.0, "c": 3.0}, 4.0, [], "No groups", tmp_path / "wide.png")
    check_png(tmp_path / "wide.png", min_bytes=2_000)


def test_long_names_widen_the_figure(tmp_path):
    short = {f"s{i}": r for i, r in enumerate(TEN.values())}
    draw_cd_diagram(short, 3.0, [], TITLE, tmp_path / "short.png")
    draw_cd_diagram(TEN, 3.0, [], TITLE, tmp_path / "long.png")
    assert png_size(tmp_path / "long.png")[0] > png_size(tmp_path / "short.png")[0] * 1.3


@pytest.mark.parametrize("cd", [None, 1.2, 3.0])
def test_no_text_overlaps_and_everything_fits(cd):
    groups = nemenyi_groups(TEN, cd if cd is not None else 2.0)
    fig = cd_figure(TEN, cd, groups, TITLE)
    renderer = fig.canvas.get_renderer()
    ax = fig.axes[0]
    texts = [t for t in ax.texts]
    boxes = [t.get_window_extent(renderer) for t in texts]
    canvas = fig.bbox
    for t, b in zip(texts, boxes):  # nothing is cut off
        assert b.x0 >= canvas.x0 - 1 and b.x1 <= canvas.x1 + 1, t.get_text()
        assert b.y0 >= canvas.y0 - 1 and b.y1 <= canvas.y1 + 1, t.get_text()
    for (t, b), (u, c) in combinations(zip(texts, boxes), 2):
        assert not b.overlaps(c), (t.get_text(), u.get_text())
    labels = [t for t in texts if any(n in t.get_text() for n in TEN)]
    assert len(labels) == 10
    # bars (thick lines) stay above every label
    bars = [ln for ln in ax.lines if ln.get_linewidth() >= 3]
    assert len(bars) == len(groups)
    label_top = max(t.get_window_extent(renderer).y1 for t in labels)
    for ln in bars:
        y = ax.transData.transform(np.column_stack(ln.get_data()))[:, 1]
        assert y.min() > label_top


def test_rank_labels_and_sides():
    fig = cd_figure({"best": 1.2, "mid": 2.5, "worst": 3.8}, None, [], "t")
    texts = {t.get_text(): t for t in fig.axes[0].texts}
    assert "best  1.20" in texts and "mid  2.50" in texts and "3.80  worst" in texts
    assert texts["best  1.20"].get_ha() == "right" and texts["3.80  worst"].get_ha() == "left"


def test_unknown_group_member_is_an_error(tmp_path):
    with pytest.raises(ValueError, match="without a rank"):
        draw_cd_diagram({"a": 1.0, "b": 2.0}, 1.0, [["a", "zzz"]], "t", tmp_path / "x.png")
    with pytest.raises(ValueError):
        draw_cd_diagram({}, 1.0, [], "t", tmp_path / "y.png")
