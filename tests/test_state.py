"""Tests of the view state and its URL form (webapp/state.py).

The external reference here is the URL standard itself: query strings are
percent-encoded per RFC 3986 and read back with the standard library's
``urllib.parse`` (WHATWG form decoding, where ``+`` is a space), so the tests
check round trips through those rules rather than against stored strings.
"""

from __future__ import annotations

import dataclasses
import re
from pathlib import Path
from urllib.parse import parse_qsl

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from webapp.state import url_codec as state_module
from webapp.state import (
    NO_COLOUR,
    PARAMETERS,
    STATE_VERSION,
    TRANSFORMS,
    ViewState,
    ViewStateError,
    parse_query,
    to_query,
)

DOCS = Path(__file__).resolve().parents[1] / "docs" / "url-state.md"

# --------------------------------------------------------------------------------------
# Strategies: valid states, with labels chosen to break naive URL handling
# --------------------------------------------------------------------------------------

tricky_labels = st.sampled_from(
    [
        "B-001",
        "a,b",
        "salt & pepper",
        "x=y",
        "100%",
        "%41",
        "+plus+",
        " leading space",
        "trailing space ",
        "pH",
        "Viscosity (mPa s)",
        "Particle size d50 (µm)",
        "ä ö ü ß",
        "漢字",
        "emoji 🧪",
        "auto",
        "none",
        "~",
        "~auto",
        "~~",
        "a:b",
        "line\nbreak",
        "tab\there",
        "?q#frag",
        "/path/",
    ]
)
labels = st.one_of(tricky_labels, st.text(alphabet=st.characters(codec="utf-8"), min_size=1, max_size=12))
tokens = st.from_regex(r"[A-Za-z0-9_-]{16,64}", fullmatch=True)
pcs = st.integers(min_value=1, max_value=state_module.MAX_PC)

valid_states = st.builds(
    ViewState,
    dataset=st.none() | tokens,
    variables_off=st.lists(labels, max_size=5),
    excluded=st.lists(labels, max_size=8),
    excluded_set=st.none() | tokens,
    transforms=st.dictionaries(labels, st.sampled_from(TRANSFORMS), max_size=4),
    missing=st.sampled_from(state_module.MISSING_POLICIES),
    centring=st.sampled_from(state_module.CENTRINGS),
    scaling=st.sampled_from(state_module.SCALINGS),
    id_column=st.none() | labels,
    ranges=st.lists(
        st.tuples(*[st.floats(min_value=-1e6, max_value=1e6, allow_nan=False)] * 2), max_size=state_module.MAX_RANGES
    ),
    row_correction=st.sampled_from(state_module.ROW_CORRECTIONS),
    savgol=st.none() | st.sampled_from([(3, 2, 0), (5, 2, 1), (15, 2, 1), (21, 3, 2), (999, 6, 2), (7, 0, 0)]),
    components=st.none() | pcs,
    confidence=st.floats(min_value=0.5, max_value=0.9999, exclude_min=True),
    pc_x=pcs,
    pc_y=pcs,
    sigma_levels=st.lists(
        st.floats(min_value=0.0, max_value=10.0, exclude_min=True), max_size=6, unique=True
    ),
    ellipse_by=st.sampled_from(state_module.ELLIPSE_MODES),
    hotelling=st.booleans(),
    colour_by=st.none() | st.just(NO_COLOUR) | labels,
    arrows=st.booleans(),
    biplot_scaling=st.sampled_from(state_module.BIPLOT_SCALINGS),
    arrow_limit=st.none() | st.integers(min_value=1, max_value=state_module.MAX_ARROWS),
    labels=st.booleans(),
    loading_pc=pcs,
    picked=st.none() | labels,
    batch=st.none() | tokens,
    saved_view=st.none() | tokens,
    present=st.booleans(),
    slide=st.integers(min_value=1, max_value=state_module.MAX_SLIDE),
    slide_figure=st.sampled_from(state_module.SLIDE_FIGURES),
    follow=st.none() | tokens,
)


# --------------------------------------------------------------------------------------
# Round trip and canonical form
# --------------------------------------------------------------------------------------


@settings(max_examples=400)
@given(valid_states)
def test_round_trip_is_exact_for_every_valid_state(view):
    assert parse_query(to_query(view)) == (view, ())
    assert parse_query("?" + to_query(view)) == (view, ())


@given(valid_states, st.randoms(use_true_random=False))
def test_order_of_parameters_does_not_matter(view, random):
    pieces = to_query(view).split("&")
    random.shuffle(pieces)
    assert parse_query("&".join(pieces)) == (view, ())


@given(valid_states)
def test_every_field_is_written_once_in_the_documented_order(view):
    names = [name for name, _ in parse_qsl(to_query(view), keep_blank_values=True)]
    unique_in_order = list(dict.fromkeys(names))
    assert unique_in_order == ["v", *(p.name for p in PARAMETERS)]
    singles = [p.name for p in PARAMETERS if not p.repeated]
    assert all(names.count(name) == 1 for name in ["v", *singles])


# Arbitrary query text, and query text assembled from real parameter names with
# both sensible and nonsensical values, to reach every branch of the reader.
parameter_names = st.sampled_from(["v", *(p.name for p in PARAMETERS), "foo", ""])
loose_values = st.one_of(
    st.text(max_size=15),
    st.sampled_from(["0", "1", "2", "auto", "none", "-1", "1e9", "0.95", "1,2", ",", "nan", "inf", "~", "a:log10"]),
)
assembled_queries = st.lists(st.tuples(parameter_names, loose_values), max_size=12).map(
    lambda pairs: "&".join(f"{name}={value}" for name, value in pairs)
)


@settings(max_examples=400)
@given(st.one_of(st.text(), assembled_queries))
def test_reading_any_text_never_raises_and_rewriting_is_a_fixed_point(query):
    view, notices = parse_query(query)
    assert isinstance(view, ViewState)
    assert all(isinstance(n, str) and n for n in notices)
    assert "default view is shown" not in " ".join(notices)  # the safety net is never needed
    canonical = to_query(view)
    assert parse_query(canonical) == (view, ())
    assert to_query(parse_query(canonical)[0]) == canonical


def test_plus_sign_and_encoded_plus_follow_form_decoding():
    # WHATWG application/x-www-form-urlencoded: "+" is a space, "%2B" is a plus sign.
    view, notices = parse_query("ex=a+b&ex=c%2Bd")
    assert notices == ()
    assert view.excluded == ("a b", "c+d")
    assert "ex=c%2Bd" in to_query(view)


def test_commas_in_labels_survive_and_sigma_uses_commas():
    view = ViewState(excluded=("B,001", "B,002"), sigma_levels=(3, 1))
    query = to_query(view)
    assert "ex=B,001&ex=B,002" in query
    assert "sigma=1,3" in query
    assert parse_query(query) == (view, ())


# --------------------------------------------------------------------------------------
# Defaults
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("query", ["", "?", "v=1", "?v=1", None])
def test_missing_parameters_take_defaults_without_notices(query):
    assert parse_query(query) == (ViewState(), ())


def test_default_values():
    view = ViewState()
    assert (view.dataset, view.variables_off, view.excluded, view.transforms) == (None, (), (), ())
    assert (view.missing, view.centring, view.scaling, view.id_column) == ("drop", "mean", "unit", None)
    assert (view.components, view.confidence) == (None, 0.95)
    assert (view.pc_x, view.pc_y, view.sigma_levels, view.ellipse_by) == (1, 2, (2.0,), "group")
    assert (view.hotelling, view.colour_by, view.arrows, view.biplot_scaling) == (False, None, True, "correlation")
    assert (view.labels, view.loading_pc, view.picked, view.present, view.slide) == (False, 1, None, False, 1)


def test_default_query_spells_out_every_setting():
    assert to_query(ViewState()) == (
        "v=1&ds=&rows=samples&off=&offset=&ex=&exset=&tf=&missing=drop&centre=mean&scale=unit&id=auto&rng=&rowc=none&sg=off&k=auto&conf=0.95"
        "&x=1&y=2&sigma=2&ellipse=group&t2ellipse=0&colour=auto&arrows=1&biplot=correlation"
        "&narrows=auto&labels=0&lpc=1&lover=&pick=&batch=&view=&present=0&slide=1&show=scores&follow="
    )


def test_empty_sigma_means_no_ellipses():
    view, notices = parse_query("sigma=")
    assert notices == ()
    assert view.sigma_levels == ()
    assert "sigma=&" in to_query(view)


def test_pc_x_may_equal_pc_y_without_notice():
    view, notices = parse_query("x=3&y=3")
    assert (view.pc_x, view.pc_y, notices) == (3, 3, ())


def test_colour_keywords_and_escaped_column_names():
    assert parse_query("colour=auto")[0].colour_by is None
    assert parse_query("colour=none")[0].colour_by == NO_COLOUR
    assert parse_query("colour=site")[0].colour_by == "site"
    assert parse_query("colour=~none")[0].colour_by == "none"
    assert parse_query("colour=~~x")[0].colour_by == "~x"
    assert "colour=~none" in to_query(ViewState(colour_by="none"))
    assert parse_query("id=~auto")[0].id_column == "auto"


def test_lists_are_canonical_sorted_and_deduplicated():
    view = ViewState(
        excluded=["B-7", "B-1", "B-7"],
        transforms=[("pH", "log10"), ("Ca", "sqrt"), ("Mg", "none")],
        sigma_levels=[3, 1, 3.0],
    )
    assert view.excluded == ("B-1", "B-7")
    assert view.transforms == (("Ca", "sqrt"), ("pH", "log10"))
    assert view.sigma_levels == (1.0, 3.0)
    assert view == ViewState(excluded=("B-1", "B-7"), transforms={"pH": "log10", "Ca": "sqrt"}, sigma_levels=(1, 3))


def test_transform_variable_names_may_contain_colons():
    view, notices = parse_query("tf=ratio%20a:b:log10")
    assert notices == ()
    assert view.transforms == (("ratio a:b", "log10"),)


# --------------------------------------------------------------------------------------
# Tampering: each problem gives the default for that setting and one notice
# --------------------------------------------------------------------------------------

TAMPERED = [
    # (query, field, expected value, words the notice must contain)
    ("scale=banana", "scaling", "unit", ["scale=banana", "unit, none, pareto, range", "using 'unit'"]),
    ("missing=zero", "missing", "drop", ["missing=zero", "drop, mean, iterative"]),
    ("centre=median", "centring", "mean", ["centre=median"]),
    ("biplot=both", "biplot_scaling", "correlation", ["biplot=both"]),
    ("ellipse=each", "ellipse_by", "group", ["ellipse=each"]),
    ("sigma=-1", "sigma_levels", (2.0,), ["sigma=-1", "above 0"]),
    ("sigma=abc", "sigma_levels", (2.0,), ["sigma=abc"]),
    ("sigma=0", "sigma_levels", (2.0,), ["sigma=0"]),
    ("sigma=1,nan", "sigma_levels", (2.0,), ["sigma=1,nan"]),
    ("sigma=11", "sigma_levels", (2.0,), ["sigma=11", "at most 10"]),
    ("sigma=1,2,3,4,5,6,7", "sigma_levels", (2.0,), ["sigma=1,2,3,4,5,6,7", "up to 6"]),
    ("k=0", "components", None, ["k=0", "using 'auto'"]),
    ("k=abc", "components", None, ["k=abc"]),
    ("k=101", "components", None, ["k=101"]),
    ("k=2.5", "components", None, ["k=2.5"]),
    ("conf=2", "confidence", 0.95, ["conf=2", "0.9999", "using '0.95'"]),
    ("conf=0.5", "confidence", 0.95, ["conf=0.5"]),
    ("conf=nan", "confidence", 0.95, ["conf=nan"]),
    ("conf=-0.9", "confidence", 0.95, ["conf=-0.9"]),
    ("x=0", "pc_x", 1, ["x=0", "1 to 100"]),
    ("x=1e9", "pc_x", 1, ["x=1e9"]),
    ("x=1000000000", "pc_x", 1, ["x=1000000000"]),
    ("y=-2", "pc_y", 2, ["y=-2"]),
    ("y=%202", "pc_y", 2, ["y= 2"]),
    ("lpc=0", "loading_pc", 1, ["lpc=0"]),
    ("slide=0", "slide", 1, ["slide=0"]),
    ("t2ellipse=yes", "hotelling", False, ["t2ellipse=yes", "0 (off) or 1 (on)"]),
    ("arrows=2", "arrows", True, ["arrows=2"]),
    ("labels=true", "labels", False, ["labels=true"]),
    ("present=", "present", False, ["present="]),
    ("ds=../etc", "dataset", None, ["ds=../etc", "no dataset is opened"]),
    ("ds=short", "dataset", None, ["ds=short"]),
    ("ds=" + "A" * 65, "dataset", None, ["ds="]),
    ("ds=abcdefghijklmnop%2F", "dataset", None, ["ds=abcdefghijklmnop/"]),
    ("colour=~", "colour_by", None, ["colour=~"]),
    ("id=", "id_column", None, ["id="]),
    ("tf=pH:banana", "transforms", (), ["tf=pH:banana", "left it out"]),
    ("tf=pH", "transforms", (), ["tf=pH"]),
]


@pytest.mark.parametrize("query, field, expected, words", TAMPERED)
def test_each_kind_of_tampering_gives_the_default_and_one_notice(query, field, expected, words):
    view, notices = parse_query(query)
    assert getattr(view, field) == expected
    assert view == ViewState().replace(**{field: expected})  # nothing else is disturbed
    assert len(notices) == 1
    for word in words:
        assert word in notices[0]


def test_unknown_parameter_is_ignored_with_a_notice():
    view, notices = parse_query("scale=pareto&foo=bar")
    assert view == ViewState(scaling="pareto")
    assert notices == ("Ignored the unknown setting 'foo=bar'; this version of Ordinate does not use 'foo'.",)


def test_duplicated_single_parameter_takes_the_first_with_a_notice():
    view, notices = parse_query("scale=pareto&x=3&scale=none&scale=unit")
    assert (view.scaling, view.pc_x) == ("pareto", 3)
    assert notices == ("The setting 'scale' appeared 3 times; used the first one ('pareto') and ignored the rest.",)


def test_duplicated_transform_for_one_variable_keeps_the_first():
    view, notices = parse_query("tf=pH:log10&tf=pH:sqrt&tf=pH:log10")
    assert view.transforms == (("pH", "log10"),)
    assert len(notices) == 1 and "tf=pH:sqrt" in notices[0]


def test_newer_version_is_read_as_well_as_possible_with_a_notice():
    view, notices = parse_query(f"v={STATE_VERSION + 1}&scale=pareto&x=2")
    assert (view.scaling, view.pc_x) == ("pareto", 2)
    assert len(notices) == 1
    assert "newer version" in notices[0]


@pytest.mark.parametrize("version", ["abc", "0", "-1", ""])
def test_unreadable_version_gives_a_notice(version):
    view, notices = parse_query(f"v={version}&scale=range")
    assert view.scaling == "range"
    assert len(notices) == 1 and f"v={version}" in notices[0]


def test_several_problems_give_one_notice_each():
    _, notices = parse_query("scale=banana&k=0&foo=1&x=x")
    assert len(notices) == 4


def test_very_many_problems_are_summarised():
    _, notices = parse_query("&".join(f"junk{i}=1" for i in range(50)))
    assert len(notices) == state_module._MAX_NOTICES
    assert notices[-1] == "31 further problems with this link were ignored as well."


def test_long_values_are_shortened_in_notices():
    _, notices = parse_query("scale=" + "b" * 5000)
    assert len(notices[0]) < 300 and "…" in notices[0]


NOTICE_QUERIES = [q for q, *_ in TAMPERED] + [
    "foo=bar",
    "=x",
    "scale=unit&scale=none",
    "v=99",
    "v=abc",
    "tf=a:log10&tf=a:ln",
]


@pytest.mark.parametrize("query", NOTICE_QUERIES)
def test_notices_are_readable_sentences(query):
    (notice,) = parse_query(query)[1]
    assert re.match(r"[A-Z]", notice), notice  # starts as a sentence
    assert notice.endswith("."), notice
    assert len(notice) < 250
    for jargon in ("Traceback", "Error", "None", "ValueError", "\\x", "{", "[", "ViewState", "_"):
        if jargon == "_" and "'-' or '_'" in notice:
            continue  # the dataset notice names the underscore as an allowed character
        assert jargon not in notice, (jargon, notice)


# --------------------------------------------------------------------------------------
# The constructor and replace: programming errors raise
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "changes",
    [
        {"scaling": "banana"},
        {"missing": "zero"},
        {"pc_x": 0},
        {"pc_y": 101},
        {"pc_x": True},
        {"pc_x": 1.0},
        {"components": 0},
        {"confidence": 1.0},
        {"confidence": 0.5},
        {"confidence": float("nan")},
        {"sigma_levels": (-1.0,)},
        {"sigma_levels": (float("nan"),)},
        {"sigma_levels": (1, 2, 3, 4, 5, 6, 7)},
        {"dataset": "../etc/passwd"},
        {"dataset": ""},
        {"excluded": "B-001"},
        {"excluded": ("",)},
        {"variables_off": (3,)},
        {"transforms": (("pH", "cube"),)},
        {"transforms": (("pH", "log10"), ("pH", "ln"))},
        {"id_column": ""},
        {"picked": ""},
        {"picked": "\ud800"},
        {"hotelling": 1},
        {"slide": 0},
    ],
)
def test_invalid_values_raise_view_state_error(changes):
    with pytest.raises(ViewStateError):
        ViewState().replace(**changes)
    assert issubclass(ViewStateError, ValueError)


def test_replace_returns_a_validated_copy():
    base = ViewState()
    changed = base.replace(scaling="pareto", excluded=["B-2", "B-1"])
    assert changed.scaling == "pareto" and changed.excluded == ("B-1", "B-2")
    assert base.scaling == "unit"  # frozen: the original is untouched
    with pytest.raises(dataclasses.FrozenInstanceError):
        base.scaling = "none"


def test_states_are_hashable_and_equal_when_canonical_forms_agree():
    assert hash(ViewState(excluded=("b", "a"))) == hash(ViewState(excluded=("a", "b")))


# --------------------------------------------------------------------------------------
# Cache keys agree with the documented effect of each parameter
# --------------------------------------------------------------------------------------

ALTERNATIVE_VALUES = {
    "dataset": "Z" * 16,
    "variables_off": ("pH",),
    "excluded": ("B-001",),
    "excluded_set": "Xs7xT0c9LrV2aZk8",
    "transforms": (("pH", "log10"),),
    "missing": "mean",
    "centring": "none",
    "scaling": "pareto",
    "id_column": "batch",
    "variables_off_set": "Vs3xT0c9LrV2aZk8Qp",
    "rows_are": "variables",
    "ranges": ((1100.0, 1700.0), (2000.0, 2400.0)),
    "row_correction": "snv",
    "savgol": (15, 2, 1),
    "components": 3,
    "confidence": 0.99,
    "pc_x": 3,
    "pc_y": 4,
    "sigma_levels": (1.0, 3.0),
    "ellipse_by": "all",
    "hotelling": True,
    "colour_by": NO_COLOUR,
    "arrows": False,
    "biplot_scaling": "distance",
    "arrow_limit": 5,
    "labels": True,
    "loading_pc": 2,
    "loading_overlay": (2, 3),
    "picked": "B-009",
    "batch": "Nb7xT0c9LrV2aZk8",
    "saved_view": "Vw3xT0c9LrV2aZk8Qp",
    "present": True,
    "slide": 4,
    "slide_figure": "variance",
    "follow": "Fw3xT0c9LrV2aZk8Qp",
}


def test_every_field_has_one_parameter():
    fields = [f.name for f in dataclasses.fields(ViewState)]
    assert sorted(p.field for p in PARAMETERS) == sorted(fields)
    assert sorted(ALTERNATIVE_VALUES) == sorted(fields)


@pytest.mark.parametrize("parameter", PARAMETERS, ids=lambda p: p.name)
def test_recipe_and_diagnostics_keys_follow_the_parameter_effects(parameter):
    base = ViewState()
    changed = base.replace(**{parameter.field: ALTERNATIVE_VALUES[parameter.field]})
    assert (changed.recipe_key() != base.recipe_key()) == (parameter.effect == "recipe")
    assert (changed.diagnostics_key() != base.diagnostics_key()) == (parameter.effect in ("recipe", "diagnostics"))


# --------------------------------------------------------------------------------------
# Versioning: the upgrade chain
# --------------------------------------------------------------------------------------


def test_upgrade_chain_has_a_step_for_every_older_format():
    assert sorted(state_module._UPGRADES) == list(range(1, STATE_VERSION))


def test_upgrade_steps_run_in_order_for_old_links(monkeypatch):
    # Simulate a future format 2 that renamed `scale` to `scaling`: a format-1 link must be upgraded.
    def rename_scale(pairs):
        renamed = [("scaling" if name == "scale" else name, value) for name, value in pairs]
        return renamed, ["This link uses an older format; it was updated."]

    future_parameters = tuple(
        dataclasses.replace(p, name="scaling") if p.name == "scale" else p for p in PARAMETERS
    )
    monkeypatch.setattr(state_module, "STATE_VERSION", 2)
    monkeypatch.setattr(state_module, "_UPGRADES", {1: rename_scale})
    monkeypatch.setattr(state_module, "PARAMETERS", future_parameters)
    monkeypatch.setattr(state_module, "_BY_NAME", {p.name: p for p in future_parameters})

    upgraded = (ViewState(scaling="pareto"), ("This link uses an older format; it was updated.",))
    assert parse_query("v=1&scale=pareto") == upgraded
    assert parse_query("scale=range")[0].scaling == "range"  # no `v` means format 1
    assert parse_query("v=2&scaling=none") == (ViewState(scaling="none"), ())
    assert to_query(ViewState(scaling="none")).startswith("v=2&")


# --------------------------------------------------------------------------------------
# Documentation: every parameter is documented, with its real default and effect
# --------------------------------------------------------------------------------------

EFFECT_WORDS = {
    "data": "loads another dataset",
    "recipe": "refits",
    "diagnostics": "recomputes diagnostics",
    "drawing": "redraws",
}


def _documented_rows() -> dict[str, list[str]]:
    rows = {}
    for line in DOCS.read_text(encoding="utf-8").splitlines():
        match = re.match(r"\|\s*`([^`]+)`\s*\|", line)
        if match:
            rows[match.group(1)] = [cell.strip() for cell in line.strip().strip("|").split("|")]
    return rows


def test_every_parameter_written_by_to_query_is_documented():
    # The docs-test pattern: adding a parameter without documenting it fails here.
    documented = _documented_rows()
    written = {name for name, _ in parse_qsl(to_query(ViewState()), keep_blank_values=True)}
    missing = written - set(documented)
    assert not missing, f"document these parameters in docs/url-state.md: {sorted(missing)}"
    stale = set(documented) - written
    assert not stale, f"docs/url-state.md describes parameters that do not exist: {sorted(stale)}"


def test_documented_defaults_and_effects_match_the_code():
    documented = _documented_rows()
    defaults = dict(parse_qsl(to_query(ViewState()), keep_blank_values=True))
    for parameter in PARAMETERS:
        _, _, _, default_cell, effect_cell = documented[parameter.name]
        expected_default = "(empty)" if defaults[parameter.name] == "" else f"`{defaults[parameter.name]}`"
        assert default_cell == expected_default, parameter.name
        assert effect_cell == EFFECT_WORDS[parameter.effect], parameter.name
    assert documented["v"][3] == f"`{STATE_VERSION}`"


# --------------------------------------------------------------------------------------
# How many arrows a view draws
# --------------------------------------------------------------------------------------


def test_arrow_limit_defaults_to_twenty_on_the_page_and_ten_on_slides():
    # The defaults are the specification (10 on slides, 20 elsewhere).
    assert ViewState().arrows_shown == 20
    assert ViewState(present=True).arrows_shown == 10
    assert ViewState(arrow_limit=7, present=True).arrows_shown == 7
    assert "narrows=auto" in to_query(ViewState())
    assert parse_query("narrows=12") == (ViewState(arrow_limit=12), ())
    assert parse_query("narrows=auto") == (ViewState(), ())


@pytest.mark.parametrize("text", ["0", "201", "-3", "many", ""])
def test_unusable_arrow_limit_is_ignored_with_a_notice(text):
    state, notices = parse_query(f"narrows={text}")
    assert state.arrow_limit is None
    assert len(notices) == 1 and "narrows" in notices[0] and "'auto'" in notices[0]


def test_arrow_limit_is_validated():
    with pytest.raises(ViewStateError):
        ViewState(arrow_limit=0)
    with pytest.raises(ViewStateError):
        ViewState(arrow_limit=True)


# --------------------------------------------------------------------------------------
# Spectral recipe parameters: rng, rowc, sg
# --------------------------------------------------------------------------------------


def test_spectral_parameters_read_and_write_in_one_form():
    view, notices = parse_query("rng=2000-2400,1100-1700,1600-1800&rowc=msc&sg=15,2,1")
    assert notices == ()
    assert view.ranges == ((1100.0, 1800.0), (2000.0, 2400.0))  # sorted, overlapping ranges merged
    assert view.row_correction == "msc" and view.savgol == (15, 2, 1)
    query = to_query(view)
    assert "rng=1100-1800,2000-2400&rowc=msc&sg=15,2,1" in query
    assert parse_query(query) == (view, ())


def test_negative_and_fractional_positions_survive():
    view = ViewState(ranges=((-2.5, -0.5), (0.125, 3e-7)))
    assert parse_query(to_query(view)) == (view, ())
    assert parse_query("rng=-2.5--0.5")[0].ranges == ((-2.5, -0.5),)


@pytest.mark.parametrize(
    "query, field",
    [
        ("sg=4,2,1", "savgol"),  # even window
        ("sg=5,5,0", "savgol"),  # order not below the window
        ("sg=7,1,2", "savgol"),  # derivative above the order
        ("sg=7,2", "savgol"),
        ("sg=1001,2,1", "savgol"),
        ("rng=1100", "ranges"),
        ("rng=a-b", "ranges"),
        ("rng=" + ",".join(f"{i}-{i}.5" for i in range(21)), "ranges"),
        ("rowc=detrend", "row_correction"),
    ],
)
def test_unusable_spectral_settings_fall_back_with_a_notice(query, field):
    view, notices = parse_query(query)
    assert getattr(view, field) == getattr(ViewState(), field)
    assert len(notices) == 1 and notices[0].startswith(f"Ignored the setting '{query.split('=')[0]}=")


def test_links_without_spectral_parameters_read_as_before():
    view, notices = parse_query("v=1&scale=pareto&k=3")
    assert notices == ()
    assert (view.ranges, view.row_correction, view.savgol) == ((), "none", None)
