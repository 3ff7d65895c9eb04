"""fluid.yaml_text: the alias budget, YAML 1.2 numbers, long integers, duplicate keys; and the
bounded rendering of values in error messages (fluid.errors.short_repr, printable)."""

from __future__ import annotations

import pytest

from fluid import yaml_text
from fluid.errors import FieldError, ScenarioError, printable, short_repr, whole_number_text
from fluid.fields import LongNumber
from fluid.yaml_text import parse_yaml


def _bomb(levels: int, width: int = 9) -> str:
    """A YAML alias bomb: level i is a list of ``width`` aliases of level i - 1, so the
    document holds about width**levels values once expanded, in a few hundred bytes."""
    parts = ["&a0 [" + ", ".join(["x"] * width) + "]"]
    for i in range(1, levels):
        parts.append(f"&a{i} [" + ", ".join([f"*a{i - 1}"] * width) + "]")
    return "[" + ", ".join(parts) + "]"


# --- the alias budget ----------------------------------------------------------------------------


def test_an_alias_bomb_is_refused_while_composing():
    text = "name: " + _bomb(9)  # 9 levels of 9: about 4.3e8 values once expanded
    assert len(text) < 800
    with pytest.raises(ScenarioError, match="more than 1,000,000 values once its aliases"):
        parse_yaml(text, "bomb.yaml")


def test_each_use_of_an_alias_counts_its_whole_subtree(monkeypatch):
    # "a: &x [1, 2, 3]" is 4 values (the list and its items), the key "a" 1, the root mapping 1;
    # each "*x" then counts 4 again: 1 + (1 + 4) + 3 * (1 + 4) = 21 values in all
    text = "a: &x [1, 2, 3]\nb: *x\nc: *x\nd: *x\n"
    monkeypatch.setattr(yaml_text, "NODE_BUDGET", 21)
    assert parse_yaml(text, "f")["d"] == [1, 2, 3]
    monkeypatch.setattr(yaml_text, "NODE_BUDGET", 20)
    with pytest.raises(ScenarioError, match="more than 20 values"):
        parse_yaml(text, "f")


def test_the_budget_also_stops_a_long_plain_document(monkeypatch):
    monkeypatch.setattr(yaml_text, "NODE_BUDGET", 100)
    with pytest.raises(ScenarioError, match="more than 100 values"):
        parse_yaml("[" + ", ".join(["1"] * 200) + "]", "f")


def test_a_recursive_alias_is_refused():
    with pytest.raises(ScenarioError, match="alias refers to the value that contains it"):
        parse_yaml("a: &loop [1, *loop]\n", "f")


def test_an_undefined_alias_and_a_duplicate_key_are_refused():
    with pytest.raises(ScenarioError, match="undefined alias"):
        parse_yaml("a: *nothing\n", "f")
    with pytest.raises(ScenarioError, match="duplicate key 'a'"):
        parse_yaml("a: 1\na: 2\n", "f")


# --- numbers -------------------------------------------------------------------------------------


@pytest.mark.parametrize("text, value", [
    # YAML 1.2 core schema floats (yaml.org/spec/1.2.2, 10.2.3): exponent sign and point optional
    ("1e6", 1e6), ("1e-3", 1e-3), ("-2.5e+3", -2500.0), ("1.0e6", 1e6), ("+.5", 0.5),
    ("2E2", 200.0),
    # unchanged from YAML 1.1
    ("12", 12), ("-3", -3), ("0x10", 16), ("1.5", 1.5), ("1.0e+6", 1e6), (".inf", float("inf")),
    ("1e6x", "1e6x"), ("e6", "e6"), ("1e", "1e"),
])
def test_numbers_read_as_yaml_1_2(text, value):
    got = parse_yaml(f"v: {text}\n", "f")["v"]
    assert got == value and type(got) is type(value)


def test_an_integer_of_more_than_100_digits_is_kept_as_its_length():
    doc = parse_yaml(f"a: {'9' * 400}\nb: -{'1' * 5000}\nc: {'7' * 100}\n", "f")
    assert doc["a"] == LongNumber(400) and doc["b"] == LongNumber(5000, negative=True)
    assert doc["c"] == int("7" * 100)
    assert short_repr(doc["a"]) == "an integer of 400 digits"


def test_values_no_type_can_hold_are_one_error():
    for text in ("name: 2024-13-45\n", "a: !!float abc\n", "a: !!int x\n"):
        with pytest.raises(ScenarioError, match="not valid YAML: a value cannot be read"):
            parse_yaml(text, "f")
    with pytest.raises(ScenarioError, match="nested too deeply"):
        parse_yaml("a: " + "[" * 3000 + "]" * 3000, "f")


# --- bounded rendering ---------------------------------------------------------------------------


@pytest.mark.parametrize("value", [0, -7, 2.5, 1e-300, "queue", True, None, [1, "a"],
                                   {"dist": "x", "mean": 3}, (1,), (1, 2), [[1], {"a": []}]])
def test_short_values_render_as_repr(value):
    assert short_repr(value) == repr(value)


def test_a_shared_structure_renders_without_being_expanded():
    level: list = ["x"] * 9
    for _ in range(12):  # 9**13 (2.5e12) items if expanded, 13 small lists in memory
        level = [level] * 9
    text = short_repr(level)
    assert text.startswith("[[[[[[") and text.endswith("...") and len(text) <= 63


def test_long_values_are_cut_and_huge_integers_are_counted():
    assert short_repr("x" * 10_000) == "'" + "x" * 59 + "..."
    assert short_repr(list(range(100)), limit=20) == "[0, 1, 2, 3, 4, 5, 6..."
    assert whole_number_text(10**30 - 1) == "9" * 30
    assert whole_number_text(10**399) == "an integer of 400 digits"
    assert whole_number_text(-(10**20000)).startswith("an integer of about 2000")
    assert short_repr(object()) == "<object>"


def test_paths_and_messages_stay_on_one_line():
    assert printable("queue\n") == "queue\\n"
    assert printable("a" * 300, 10) == "a" * 10 + "..."
    err = FieldError("places.queue\n", "bad\nthing", "x\ny")
    text = str(err.to_scenario_error("f.yaml"))
    assert "\n" not in text and text == "f.yaml: places.queue\\n: bad\\nthing (got 'x\\ny')"
