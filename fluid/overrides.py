"""``--set PATH=VALUE`` overrides of a scenario document (also the changes of
:func:`fluid.loading.with_changes`).

A value is read as YAML (the same reader as scenario files: ``12`` is an int, ``1e6`` a float).
An override changes what the document has, or adds a key inside an existing entry; a pool,
place, source or transition it does not have is refused with the names it has (a typo would
otherwise add an idle pool), unless written ``+SECTION.NAME=VALUE``, which adds one on purpose.
"""

from __future__ import annotations

import re
from typing import Any, Iterable

from .errors import FieldError, ScenarioError, printable
from .fields import whole as _whole
from .yaml_text import parse_yaml as _parse_yaml

__all__ = ["parse_override", "apply_override", "NAMED_SECTIONS"]


# --- overrides -----------------------------------------------------------------------------------

#: Sections whose keys are names a scenario declares, with the word for one entry.
NAMED_SECTIONS = {"pools": "pool", "places": "place", "sources": "source",
                  "transitions": "transition"}
#: Sections a document may leave out whose fields ``--set`` may still give.
OPTIONAL_SECTIONS = ("run", "targets")


def parse_override(text: str, file: str = "--set") -> tuple[str, Any]:
    """Split ``PATH=VALUE`` and read VALUE as a YAML scalar (``12`` is an int, ``3.5`` and
    ``1e6`` floats, ``{dist: exponential, mean: 3}`` a mapping). ``+SECTION.NAME=VALUE`` adds a
    new pool, place, source or transition (see :func:`apply_override`)."""
    if "=" not in text:
        raise ScenarioError(file, "", "expected PATH=VALUE", text)
    path, _, raw = text.partition("=")
    path = path.strip()
    if not path.lstrip("+").strip():
        raise ScenarioError(file, "", "expected PATH=VALUE", text)
    return path, _parse_yaml(raw, f"--set {printable(path, 100)}")


def _split_path(path: str) -> list[str | int]:
    parts: list[str | int] = []
    for word in path.split("."):
        match = re.fullmatch(r"([^\[\]]*)((?:\[\d{1,9}\])*)", word)
        if not match or not match.group(1):
            raise FieldError(path, "is not a field path like pools.front_desk or rates[2]")
        parts.append(match.group(1))
        parts.extend(int(i) for i in re.findall(r"\[(\d+)\]", match.group(2)))
    return parts


def _listing(names: Iterable[Any], limit: int = 12) -> str:
    names = [printable(n, 40) for n in names]
    if not names:
        return "none"
    more = f", ... ({len(names)} in all)" if len(names) > limit else ""
    return ", ".join(names[:limit]) + more


def apply_override(doc: dict, path: str, value: Any, *, file: str = "<string>") -> None:
    """Set ``path`` (dotted, with ``[i]`` for list items) to ``value`` in the YAML document.

    Only what the document already has can be changed, plus keys inside an existing entry
    (``places.queue.patience`` on a place without patience) and the fields of a ``run`` or
    ``targets`` section the document leaves out: a pool, place, source or
    transition that is not there is refused with the names that are, since a typo would
    otherwise add an idle pool and leave the real one as it was. ``+pools.NAME=VALUE`` (and
    ``+places.``, ``+sources.``, ``+transitions.``) adds one on purpose.

    ``sources.NAME.random_rate.cv=C`` on a source without ``random_rate`` gives it a gamma day
    factor with that cv.

    Convenience for pools written in the long form: ``pools.NAME=12`` sets that pool's
    ``staff`` and keeps its priority (a pool with a schedule has no single staff level: change
    its ``schedule.staff`` or give the whole pool); ``pools.NAME.priority=[...]`` on a pool
    written as a plain number turns it into the long form.
    """
    adding = path.startswith("+")
    shown = path
    if adding:
        path = path[1:].strip()
    try:
        parts = _split_path(path)
    except FieldError as exc:
        raise exc.to_scenario_error(file) from None
    if not isinstance(doc, dict):
        raise ScenarioError(file, "", "the document must be a mapping")
    head = parts[0]
    if head in NAMED_SECTIONS and len(parts) >= 2 and isinstance(parts[1], str):
        kind, entry = NAMED_SECTIONS[head], parts[1]
        section = doc.get(head)
        exists = isinstance(section, dict) and entry in section
        where = f"{head}.{entry}"
        if adding:
            if len(parts) != 2:
                raise ScenarioError(file, shown, f"+ adds a whole {kind}: write "
                                    f"+{where}=VALUE")
            if exists:
                raise ScenarioError(file, where, f"{kind} {entry} exists already (drop the + "
                                    "to change it)")
            if section is None:
                section = doc[head] = {}
            if not isinstance(section, dict):
                raise ScenarioError(file, head, "is not a mapping (from --set)")
            section[entry] = value
            return
        if not exists:
            known = _listing(section) if isinstance(section, dict) else "none"
            raise ScenarioError(file, where, f"no {kind} named {printable(entry, 40)} "
                                f"({head}: {known}); to add one, write --set +{where}=VALUE")
    elif adding:
        raise ScenarioError(file, shown, "+ adds a pool, place, source or transition, e.g. "
                            "+pools.new_desk=3")
    if head == "pools" and len(parts) >= 2 and isinstance(parts[1], str):
        pools, entry = doc["pools"], parts[1]
        current = pools[entry]
        if len(parts) == 2 and isinstance(current, dict) and not isinstance(value, dict):
            if "schedule" in current:
                try:
                    n = _whole(value, f"pools.{entry}")
                except FieldError as exc:
                    raise exc.to_scenario_error(file) from None
                raise ScenarioError(file, f"pools.{entry}", "this pool has a schedule, so it "
                                    "has no single staff level to set: change "
                                    f"pools.{entry}.schedule.staff, or replace the pool, e.g. "
                                    f"--set 'pools.{entry}={{staff: {n}}}'")
            current["staff"] = value
            return
        if len(parts) > 2 and not isinstance(current, dict):
            pools[entry] = {"staff": current}
    if (head == "sources" and len(parts) == 4 and parts[2] == "random_rate"
            and isinstance(doc["sources"][parts[1]], dict)
            and "random_rate" not in doc["sources"][parts[1]]):
        # (sources.NAME.random_rate.cv=C on a source without a day factor gives it one)
        doc["sources"][parts[1]]["random_rate"] = {"dist": "gamma"}
    if head in OPTIONAL_SECTIONS and len(parts) >= 2 and head not in doc:
        doc[head] = {}  # (a section the document leaves out: its fields can still be set)
    node: Any = doc
    for i, key in enumerate(parts[:-1]):
        here = _join(parts[: i + 1])
        if isinstance(key, int):
            if not isinstance(node, list) or key >= len(node):
                raise ScenarioError(file, here, "no such list item (from --set)")
            node = node[key]
        else:
            if not isinstance(node, dict) or key not in node:
                raise ScenarioError(file, here, "no such field to change (from --set)")
            node = node[key]
    last = parts[-1]
    if isinstance(last, int):
        if not isinstance(node, list) or last >= len(node):
            raise ScenarioError(file, path, "no such list item (from --set)")
    elif not isinstance(node, dict):
        raise ScenarioError(file, path, "its parent is not a mapping (from --set)")
    node[last] = value


def _join(parts: list[str | int]) -> str:
    out = ""
    for p in parts:
        out += f"[{p}]" if isinstance(p, int) else (f".{p}" if out else p)
    return out
