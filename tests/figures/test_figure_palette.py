"""Tests for webapp.figures.palette, .text and .theme.

References: the Okabe–Ito colour order (Okabe & Ito 2008, Color Universal
Design), with the yellow darkened by design; HTML entity escaping as defined
by the HTML standard (&amp; &lt; &gt;), checked against Python's ``html.unescape``.
"""

from __future__ import annotations

import html

import numpy as np
import pandas as pd
import pytest

from webapp.analysis.errors import OrdinateError
from webapp.figures import (
    MARKER_SYMBOLS,
    NONE_GROUP,
    OKABE_ITO,
    axis_title,
    escape_text,
    group_names,
    group_order,
    group_style,
    group_styles,
)
from webapp.figures.text import escape_array, level_percent, template_literal
from webapp.figures.theme import NORMAL, NOTE_WIDTH, PRESENTATION, base_layout, wrap_note


def test_okabe_ito_order_with_darkened_yellow():
    # Okabe & Ito (2008): orange, sky blue, bluish green, yellow, blue, vermillion, reddish purple, black.
    assert OKABE_ITO == ("#E69F00", "#56B4E9", "#009E73", "#C9B200", "#0072B2", "#D55E00", "#CC79A7", "#000000")
    assert MARKER_SYMBOLS[:4] == ("circle", "square", "diamond", "triangle-up")


def test_first_groups_pair_colour_and_symbol():
    assert [group_style(i).colour for i in range(8)] == list(OKABE_ITO)
    assert [group_style(i).symbol for i in range(8)] == list(MARKER_SYMBOLS)


def test_styles_cycle_deterministically_and_stay_distinct():
    pairs = [(group_style(i).colour, group_style(i).symbol) for i in range(64)]
    assert len(set(pairs)) == 64
    assert group_style(70) == group_style(70)
    assert group_style(64).symbol.endswith("-open")
    assert group_style(128) == group_style(0)
    with pytest.raises(ValueError):
        group_style(-1)


def test_missing_values_form_the_none_group():
    names = group_names(np.array(["A", None, np.nan, "", "  ", pd.NA, "B"], dtype=object))
    assert names.tolist() == ["A", NONE_GROUP, NONE_GROUP, NONE_GROUP, NONE_GROUP, NONE_GROUP, "B"]
    assert group_names(np.array([3.0, 2.0, np.nan])).tolist() == ["3", "2", NONE_GROUP]
    assert group_names(None, 3).tolist() == ["All samples"] * 3


def test_group_order_is_natural_with_none_last():
    assert group_order(["10", "9", NONE_GROUP, "2"]) == ["2", "9", "10", NONE_GROUP]
    assert group_order(["beta", "Alpha", "gamma"]) == ["Alpha", "beta", "gamma"]
    styles = group_styles(["a", NONE_GROUP, "b"])
    assert styles[NONE_GROUP].colour == "#8C8C8C"
    assert styles["b"] == group_style(1)  # "(none)" does not take a palette slot


def test_escape_text():
    assert escape_text("<script>alert(1)</script>") == "&lt;script&gt;alert(1)&lt;/script&gt;"
    assert escape_text("<b>x</b> & y") == "&lt;b&gt;x&lt;/b&gt; &amp; y"
    assert escape_text("a&lt;b") == "a&amp;lt;b"  # "&" first: entities typed by the user stay literal
    for text in ["<b>", "a&b", "&amp;", "x < y > z", "plain", 42]:
        assert html.unescape(escape_text(text)) == str(text)
    assert template_literal("%{x}") == "%&#123;x}"
    escaped, changed = escape_array(np.array(["a", "b"]))
    assert not changed and escaped.tolist() == ["a", "b"]
    escaped, changed = escape_array(np.array(["a", "<b>"]))
    assert changed and escaped.tolist() == ["a", "&lt;b&gt;"]


def test_axis_title_and_levels():
    assert axis_title(1, 0.62) == "PC1 · 62.0 %"
    assert axis_title(3, 0.0367) == "PC3 · 3.7 %"
    with pytest.raises(OrdinateError):
        axis_title(0, 0.5)
    with pytest.raises(OrdinateError):
        axis_title(1, 1.5)
    assert level_percent(0.95) == "95 %" and level_percent(0.975) == "97.5 %" and level_percent(0.999) == "99.9 %"


def test_notes_wrap_and_presentation_sizes():
    long_note = "word " * 60
    assert all(len(line) <= NOTE_WIDTH for line in wrap_note(long_note))
    layout = base_layout(NORMAL, title="T", notes=[long_note])
    assert layout["annotations"][0]["text"].count("<br>") == len(wrap_note(long_note)) - 1
    assert PRESENTATION.font_size > NORMAL.font_size and PRESENTATION.marker_size > NORMAL.marker_size
