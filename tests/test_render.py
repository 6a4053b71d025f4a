"""How the report shows numbers, metrics and colours to a reader."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest

from harness.report.render import (Table, as_read, markdown_table, metric_heading, number,
                                   to_html, to_markdown)
from harness.report.style import METHOD_COLORS, OKABE_ITO, plain, strategy_colors


@pytest.mark.parametrize("value, text", [
    (1140.5, "1140"), (12345.6, "12,346"), (0.000123456, "0.0001235"), (0.5, "0.5"),
    (2.0, "2"), (-3.25, "-3.25"), (7, "7"), (123456, "123,456"), (np.nan, ""), (None, ""),
    (1e-9, "0.000000001"), (-0.0, "0"), (True, "yes")])
def test_numbers_never_in_scientific_notation(value, text):
    assert number(value) == text
    assert not re.search(r"\de[+-]?\d", number(value))


def test_metrics_as_people_read_them():
    assert metric_heading("neg_root_mean_squared_error") == "RMSE (lower is better)"
    assert metric_heading("accuracy") == "accuracy (higher is better)"
    assert metric_heading("neg_mean_poisson_deviance") == "mean poisson deviance (lower is better)"
    assert as_read("neg_log_loss", -0.25) == 0.25 and as_read("r2", 0.5) == 0.5


def test_text_is_escaped_in_markdown_and_html():
    frame = pd.DataFrame({"strategy": ["gb[x=<b>1</b>|2]"], "score": [0.5]})
    md = markdown_table(frame)
    assert "<b>" not in md and "&lt;b&gt;" in md and "\\|2" in md
    t = Table("t", "T", frame, frame, intro="a < b")
    assert "<b>" not in to_html(t) and "a &lt; b" in to_html(t)
    assert to_markdown(t).startswith("# T\n\na < b")


def test_a_method_keeps_its_colour_whatever_else_is_compared():
    one = strategy_colors({"rf": "random-forest", "gb": "gradient-boosting"})
    two = strategy_colors({"forest": "random-forest", "tree": "single-tree",
                           "x": "custom", "ada": "adaboost"})
    assert one["rf"] == two["forest"]
    # Okabe & Ito's palette (Color Universal Design, 2008): the eight published colours
    assert set(METHOD_COLORS.values()) <= set(OKABE_ITO.values())
    assert OKABE_ITO["vermillion"] == "#D55E00" and OKABE_ITO["bluish green"] == "#009E73"
    variants = strategy_colors({"gb-a": "gradient-boosting", "gb-b": "gradient-boosting"})
    assert variants["gb-a"] != variants["gb-b"]


def test_names_in_plots_are_plain_text():
    assert plain("cost $5") == r"cost \$5"
