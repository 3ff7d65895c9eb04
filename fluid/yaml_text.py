"""YAML text to a plain document, with bounded work for any text.

:func:`parse_yaml` reads with :class:`ScenarioLoader`, a ``yaml.SafeLoader`` that

* refuses a mapping with the same key twice, and a key that is not a plain value;
* reads numbers as YAML 1.2 does: ``1e6``, ``1e-3`` and ``-2.5e+3`` are numbers (YAML 1.1, which
  PyYAML follows, would read them as text), for scenario files and ``--set`` values alike;
* counts the values of the document while composing it, every use of an alias counting its
  whole subtree again, and refuses the document past :data:`NODE_BUDGET` (a 767-byte alias bomb
  expands to billions of values; the count stops it after reading it, before anything is built
  from it); an alias inside its own anchor is refused too;
* keeps an integer of more than :data:`LONGEST_INTEGER` digits as a
  :class:`fluid.fields.LongNumber` (its sign and length only), which every field reader refuses
  with a short message.

Every problem is a :class:`~fluid.errors.ScenarioError` naming the file (and the line and column).
"""

from __future__ import annotations

import re
from typing import Any

import yaml

from .errors import ScenarioError, printable
from .fields import LongNumber

__all__ = ["ScenarioLoader", "parse_yaml", "NODE_BUDGET", "LONGEST_INTEGER"]

#: Values a document may hold once its aliases are expanded (each scalar, list and mapping: 1).
NODE_BUDGET = 1_000_000
#: Characters of the longest integer literal read as a number.
LONGEST_INTEGER = 100

# YAML 1.2 core schema floats (https://yaml.org/spec/1.2.2/#1023-core-schema): the exponent's
# sign and the decimal point are optional, unlike YAML 1.1.
_FLOAT_12 = re.compile(r"^[-+]?(?:\.[0-9]+|[0-9]+(?:\.[0-9]*)?)(?:[eE][-+]?[0-9]+)?$")


class ScenarioLoader(yaml.SafeLoader):
    """SafeLoader with duplicate keys refused, YAML 1.2 numbers and a budget of values."""

    def __init__(self, stream):
        super().__init__(stream)
        self._weights: dict[int, int] = {}  # id(node) -> values in its expanded subtree
        self._composed = 0

    def compose_node(self, parent, index):
        if self.check_event(yaml.AliasEvent):
            mark = self.peek_event().start_mark
            node = super().compose_node(parent, index)
            if id(node) not in self._weights:  # its anchor is still being composed
                raise yaml.composer.ComposerError(
                    None, None, "an alias refers to the value that contains it", mark)
            return node
        self._composed += 1
        if self._composed > NODE_BUDGET:
            self._over_budget(self.peek_event().start_mark)
        node = super().compose_node(parent, index)
        weights = self._weights
        weight = 1
        if isinstance(node, yaml.SequenceNode):
            weight += sum(weights[id(child)] for child in node.value)
        elif isinstance(node, yaml.MappingNode):
            weight += sum(weights[id(k)] + weights[id(v)] for k, v in node.value)
        if weight > NODE_BUDGET:
            self._over_budget(node.start_mark)
        weights[id(node)] = weight
        return node

    @staticmethod
    def _over_budget(mark) -> None:
        raise yaml.composer.ComposerError(
            None, None, f"holds more than {NODE_BUDGET:,} values once its aliases are "
            "expanded (the limit of a scenario document)", mark)


def _construct_mapping(loader: ScenarioLoader, node: yaml.MappingNode, deep: bool = False):
    loader.flatten_mapping(node)
    seen: dict[Any, Any] = {}
    for key_node, value_node in node.value:
        key = loader.construct_object(key_node, deep=deep)
        try:
            hash(key)
        except TypeError:
            raise yaml.constructor.ConstructorError(
                None, None, "a mapping key must be a plain value", key_node.start_mark
            ) from None
        if key in seen:
            raise yaml.constructor.ConstructorError(
                None, None, f"duplicate key {printable(repr(key), 60)}", key_node.start_mark
            )
        seen[key] = loader.construct_object(value_node, deep=deep)
    return seen


def _construct_int(loader: ScenarioLoader, node: yaml.ScalarNode):
    text = loader.construct_scalar(node)
    if len(text) > LONGEST_INTEGER:
        return LongNumber(sum(c.isdigit() for c in text), text.lstrip().startswith("-"))
    return loader.construct_yaml_int(node)


ScenarioLoader.add_constructor(yaml.resolver.BaseResolver.DEFAULT_MAPPING_TAG, _construct_mapping)
ScenarioLoader.add_constructor("tag:yaml.org,2002:int", _construct_int)
ScenarioLoader.add_implicit_resolver("tag:yaml.org,2002:float", _FLOAT_12,
                                     list("-+0123456789."))


def parse_yaml(text: str, file: str) -> Any:
    """The document in ``text`` (plain dicts, lists and scalars); ``file`` names it in errors."""
    try:
        return yaml.load(text, Loader=ScenarioLoader)  # noqa: S506 - a SafeLoader subclass
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        where = f"line {mark.line + 1}, column {mark.column + 1}: " if mark else ""
        raise ScenarioError(file, "", f"not valid YAML: {where}{exc.problem or exc}") from None
    except yaml.YAMLError as exc:
        raise ScenarioError(file, "", f"not valid YAML: {exc}") from None
    except RecursionError:
        raise ScenarioError(file, "", "not valid YAML: nested too deeply") from None
    except (ValueError, OverflowError, TypeError):
        # a tagged or implicit scalar that cannot be built (a date 2024-13-45, !!float abc, ...)
        raise ScenarioError(file, "", "not valid YAML: a value cannot be read as its type "
                            "(a date, a tagged number, ...)") from None
