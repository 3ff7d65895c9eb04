"""Reading a scenario: YAML without duplicate keys, ``--set`` overrides, and validation; variants
of a scenario (:func:`with_changes`) go through the same overrides and validation.

Everything a user can get wrong is reported as one :class:`~fluid.errors.ScenarioError` naming
the file, the field path and the value; nothing else escapes :func:`load_scenario` for bad
input. The validation rules are those of design.md §3; the structural checks that need the whole
net live in :mod:`fluid.validation`.
"""

from __future__ import annotations

import json
import math
import re
import warnings
from pathlib import Path
from typing import Any, Iterable, Mapping

import yaml

from .distributions import parse_distribution
from .errors import FieldError, ScenarioError
from .scenario import (
    FrozenMap,
    Place,
    Pool,
    RunSettings,
    Scenario,
    Schedule,
    ServiceTarget,
    Source,
    Targets,
    Transition,
)
from .sources import PoissonArrivals, ProfileArrivals, TraceArrivals
from .validation import check_structure

__all__ = [
    "load_scenario",
    "load_scenario_text",
    "scenario_from_document",
    "parse_override",
    "apply_override",
    "with_changes",
    "ScenarioWarning",
]

NAME_PATTERN = re.compile(r"^[a-z][a-z0-9_]*$")
TOP_KEYS = ("name", "time_unit", "run", "sources", "pools", "places", "transitions", "targets")
ROUTE_TOLERANCE = 1e-9


class ScenarioWarning(UserWarning):
    """Something in a scenario that is allowed but probably not meant (e.g. a leaking pool)."""


# --- YAML ----------------------------------------------------------------------------------------


class _UniqueKeyLoader(yaml.SafeLoader):
    """SafeLoader that refuses a mapping with the same key twice."""


def _construct_mapping(loader: _UniqueKeyLoader, node: yaml.MappingNode, deep: bool = False):
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
                None, None, f"duplicate key {key!r}", key_node.start_mark
            )
        seen[key] = loader.construct_object(value_node, deep=deep)
    return seen


_UniqueKeyLoader.add_constructor(
    yaml.resolver.BaseResolver.DEFAULT_MAPPING_TAG, _construct_mapping
)


def _parse_yaml(text: str, file: str) -> Any:
    try:
        return yaml.load(text, Loader=_UniqueKeyLoader)  # noqa: S506 - a SafeLoader subclass
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        where = f"line {mark.line + 1}, column {mark.column + 1}: " if mark else ""
        raise ScenarioError(file, "", f"not valid YAML: {where}{exc.problem or exc}") from None
    except yaml.YAMLError as exc:
        raise ScenarioError(file, "", f"not valid YAML: {exc}") from None
    except RecursionError:
        raise ScenarioError(file, "", "not valid YAML: nested too deeply") from None


# --- overrides -----------------------------------------------------------------------------------


def parse_override(text: str, file: str = "--set") -> tuple[str, Any]:
    """Split ``PATH=VALUE`` and read VALUE as a YAML scalar (``12`` is an int, ``3.5`` a float,
    ``{dist: exponential, mean: 3}`` a mapping)."""
    if "=" not in text:
        raise ScenarioError(file, "", "expected PATH=VALUE", text)
    path, _, raw = text.partition("=")
    path = path.strip()
    if not path:
        raise ScenarioError(file, "", "expected PATH=VALUE", text)
    return path, _parse_yaml(raw, f"--set {path}")


def _split_path(path: str) -> list[str | int]:
    parts: list[str | int] = []
    for word in path.split("."):
        match = re.fullmatch(r"([^\[\]]*)((?:\[\d+\])*)", word)
        if not match or not match.group(1):
            raise FieldError(path, "is not a field path like pools.front_desk or rates[2]")
        parts.append(match.group(1))
        parts.extend(int(i) for i in re.findall(r"\[(\d+)\]", match.group(2)))
    return parts


def apply_override(doc: dict, path: str, value: Any, *, file: str = "<string>") -> None:
    """Set ``path`` (dotted, with ``[i]`` for list items) to ``value`` in the YAML document.

    Convenience for pools written in the long form: ``pools.NAME=12`` sets that pool's
    ``staff`` and keeps its priority; ``pools.NAME.priority=[...]`` on a pool written as a
    plain number turns it into the long form.
    """
    try:
        parts = _split_path(path)
    except FieldError as exc:
        raise exc.to_scenario_error(file) from None
    if not isinstance(doc, dict):
        raise ScenarioError(file, "", "the document must be a mapping")
    if len(parts) >= 2 and parts[0] == "pools" and isinstance(doc.get("pools"), dict):
        pools = doc["pools"]
        name = parts[1]
        if len(parts) == 2 and isinstance(pools.get(name), dict) and not isinstance(value, dict):
            pools[name]["staff"] = value
            return
        if len(parts) > 2 and name in pools and not isinstance(pools[name], dict):
            pools[name] = {"staff": pools[name]}
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


# --- entry points --------------------------------------------------------------------------------


def load_scenario(path: str | Path, overrides: Iterable[str | tuple[str, Any]] = ()) -> Scenario:
    """Read, override and validate the scenario in ``path``.

    ``overrides`` are ``"PATH=VALUE"`` strings (as given to ``--set``) or ``(path, value)``
    pairs, applied in order to the YAML document before validation.
    """
    file = str(path)
    try:
        text = Path(path).read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ScenarioError(file, "", "no such file") from None
    except IsADirectoryError:
        raise ScenarioError(file, "", "is a directory, expected a YAML file") from None
    except UnicodeDecodeError:
        raise ScenarioError(file, "", "is not UTF-8 text") from None
    except OSError as exc:
        raise ScenarioError(file, "", f"cannot read: {exc.strerror}") from None
    return load_scenario_text(
        text, file=file, overrides=overrides, base_dir=str(Path(path).resolve().parent)
    )


def load_scenario_text(
    text: str,
    file: str = "<string>",
    overrides: Iterable[str | tuple[str, Any]] = (),
    base_dir: str | None = None,
) -> Scenario:
    """Like :func:`load_scenario` for YAML given as a string (files named in it, such as traces,
    are read relative to ``base_dir``, default the working directory)."""
    doc = _parse_yaml(text, file)
    if not isinstance(doc, dict):
        raise ScenarioError(file, "", "the document must be a mapping of the keys " + ", ".join(TOP_KEYS))
    for item in overrides:
        path, value = parse_override(item) if isinstance(item, str) else item
        apply_override(doc, path, value, file=file)
    return scenario_from_document(doc, file=file, base_dir=base_dir)


def scenario_from_document(
    doc: Mapping, *, file: str = "<string>", base_dir: str | None = None
) -> Scenario:
    """Validate a YAML document (already parsed) and build the frozen :class:`Scenario`."""
    try:
        scenario = _build(doc, file, base_dir)
        check_structure(scenario)
    except FieldError as exc:
        raise exc.to_scenario_error(file) from None
    _warn_uncovered_pools(scenario)
    return scenario


def with_changes(scenario: Scenario, changes: Mapping[str, Any] | None = None, **kw) -> Scenario:
    """Return a validated copy of ``scenario`` with ``changes`` applied to its document.

    ``changes`` maps dotted paths to Python values, e.g. ``{"pools.front_desk": 12,
    "sources.calls.rate": 3.5}`` (the same paths as ``--set``). Keyword arguments are also
    accepted as top-level paths. Raises :class:`fluid.errors.ScenarioError` if the result is not
    a valid scenario. A variant is thus exactly what the same YAML edited by hand would give.
    """
    doc = scenario.to_document()
    for path, value in {**(changes or {}), **kw}.items():
        apply_override(doc, path, value, file=scenario.file)
    return scenario_from_document(doc, file=scenario.file, base_dir=scenario.base_dir)


def _warn_uncovered_pools(scenario: Scenario) -> None:
    try:
        from .invariants import uncovered_pools
    except ImportError:  # the invariant module is optional while the package is being built
        return
    for pool in uncovered_pools(scenario):
        warnings.warn(
            f"{scenario.file}: pools.{pool}: no conservation invariant covers this pool: its "
            "agents can leak or multiply (check that every transition that takes an agent "
            "gives it back)",
            ScenarioWarning,
            stacklevel=3,
        )


# --- building ------------------------------------------------------------------------------------


def _mapping(value: Any, path: str, *, allow_none: bool = True) -> dict:
    if value is None and allow_none:
        return {}
    if not isinstance(value, dict):
        raise FieldError(path, "must be a mapping", value)
    return value


def _known_keys(spec: dict, allowed: Iterable[str], path: str) -> None:
    allowed = tuple(allowed)
    for key in spec:
        if key not in allowed:
            where = f"{path}.{key}" if path else str(key)
            raise FieldError(where, f"unknown key (expected one of: {', '.join(allowed)})")


def _real(value: Any, path: str, *, low: float = 0.0, strict: bool = False) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise FieldError(path, "must be a finite number", value)
    if value < low or (strict and value == low):
        raise FieldError(path, f"must be {'>' if strict else '>='} {low:g}", value)
    return float(value)


def _whole(value: Any, path: str, *, low: int = 0) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        if isinstance(value, float) and value.is_integer():
            value = int(value)
        else:
            raise FieldError(path, "must be a whole number", value)
    if value < low:
        raise FieldError(path, f"must be >= {low}", value)
    return value


def _name(value: Any, path: str) -> str:
    if not isinstance(value, str) or not NAME_PATTERN.match(value):
        raise FieldError(path, "a name must match [a-z][a-z0-9_]*", value)
    return value


def _names(value: Any, path: str) -> tuple[str, ...]:
    if not isinstance(value, list) or not value:
        raise FieldError(path, "must be a non-empty list of names", value)
    out = tuple(_name(v, f"{path}[{i}]") for i, v in enumerate(value))
    if len(set(out)) != len(out):
        raise FieldError(path, "names a transition twice", value)
    return out


def _build(doc: Mapping, file: str, base_dir: str | None) -> Scenario:
    _known_keys(doc, TOP_KEYS, "")
    for required in ("sources", "places", "transitions"):
        if required not in doc:
            raise FieldError(required, "is required")
    name = doc.get("name", Path(file).stem)
    if not isinstance(name, str) or not name.strip():
        raise FieldError("name", "must be a non-empty text", name)
    time_unit = doc.get("time_unit", "min")
    if not isinstance(time_unit, str) or not time_unit.strip():
        raise FieldError("time_unit", "must be a non-empty text such as min or h", time_unit)
    base = Path(base_dir) if base_dir else Path.cwd()

    seen: dict[str, str] = {}

    def declare(n: Any, path: str) -> str:
        n = _name(n, path)
        if n in seen:
            raise FieldError(path, f"name already used by {seen[n]}", n)
        seen[n] = path
        return n

    pools_doc = _mapping(doc.get("pools"), "pools")
    places_doc = _mapping(doc.get("places"), "places")
    sources_doc = _mapping(doc.get("sources"), "sources", allow_none=False)
    transitions_doc = _mapping(doc.get("transitions"), "transitions", allow_none=False)
    for section, part in (
        ("pools", pools_doc),
        ("places", places_doc),
        ("sources", sources_doc),
        ("transitions", transitions_doc),
    ):
        for key in part:
            declare(key, f"{section}.{key}")
    if not sources_doc:
        raise FieldError("sources", "needs at least one source")
    if not transitions_doc:
        raise FieldError("transitions", "needs at least one transition")

    run = _build_run(_mapping(doc.get("run"), "run"))
    pools = {n: _build_pool(n, spec) for n, spec in pools_doc.items()}
    places = {n: _build_place(n, _mapping(spec, f"places.{n}"), base) for n, spec in places_doc.items()}
    sources = {n: _build_source(n, _mapping(spec, f"sources.{n}", allow_none=False), base)
               for n, spec in sources_doc.items()}
    transitions = {n: _build_transition(n, spec) for n, spec in transitions_doc.items()}
    targets = _build_targets(_mapping(doc.get("targets"), "targets"))
    return Scenario(
        name=name.strip(),
        time_unit=time_unit.strip(),
        run=run,
        sources=FrozenMap(sources),
        pools=FrozenMap(pools),
        places=FrozenMap(places),
        transitions=FrozenMap(transitions),
        targets=targets,
        file=file,
        document=json.dumps(doc),
        base_dir=str(base),
    )


def _build_run(spec: dict) -> RunSettings:
    _known_keys(spec, ("horizon", "warmup", "replications", "seed"), "run")
    default = RunSettings()
    horizon = _real(spec.get("horizon", default.horizon), "run.horizon", strict=True)
    warmup = _real(spec.get("warmup", default.warmup), "run.warmup")
    if warmup >= horizon:
        raise FieldError("run.warmup", f"must be below the horizon ({horizon:g})", warmup)
    reps = _whole(spec.get("replications", default.replications), "run.replications", low=1)
    seed = _whole(spec.get("seed", default.seed), "run.seed")
    return RunSettings(horizon=horizon, warmup=warmup, replications=reps, seed=seed)


def _build_pool(name: str, spec: Any) -> Pool:
    path = f"pools.{name}"
    if not isinstance(spec, dict):
        return Pool(name=name, staff=_whole(spec, path))
    _known_keys(spec, ("staff", "priority", "schedule"), path)
    priority = _names(spec["priority"], f"{path}.priority") if "priority" in spec else ()
    schedule = None
    if "schedule" in spec:
        sched = _mapping(spec["schedule"], f"{path}.schedule", allow_none=False)
        _known_keys(sched, ("step", "staff"), f"{path}.schedule")
        if "step" not in sched or "staff" not in sched:
            raise FieldError(f"{path}.schedule", "needs step and staff")
        step = _real(sched["step"], f"{path}.schedule.step", strict=True)
        staff_list = sched["staff"]
        if not isinstance(staff_list, list) or not staff_list:
            raise FieldError(f"{path}.schedule.staff", "must be a non-empty list", staff_list)
        staff_t = tuple(_whole(s, f"{path}.schedule.staff[{i}]") for i, s in enumerate(staff_list))
        schedule = Schedule(step=step, staff=staff_t)
        if "staff" in spec:
            raise FieldError(f"{path}.staff", "give either staff or schedule, not both")
        staff = staff_t[0]
    else:
        if "staff" not in spec:
            raise FieldError(f"{path}.staff", "is required")
        staff = _whole(spec["staff"], f"{path}.staff")
    return Pool(name=name, staff=staff, priority=priority, schedule=schedule)


def _build_place(name: str, spec: dict, base: Path) -> Place:
    path = f"places.{name}"
    _known_keys(spec, ("hold", "route", "priority", "patience", "abandon_to"), path)
    hold = parse_distribution(spec["hold"], f"{path}.hold", base) if "hold" in spec else None
    patience = (
        parse_distribution(spec["patience"], f"{path}.patience", base) if "patience" in spec else None
    )
    route = None
    if "route" in spec:
        r = _mapping(spec["route"], f"{path}.route", allow_none=False)
        if not r:
            raise FieldError(f"{path}.route", "must name at least one transition")
        route = FrozenMap(
            {_name(k, f"{path}.route"): _real(v, f"{path}.route.{k}") for k, v in r.items()}
        )
        total = sum(route.values())
        if abs(total - 1.0) > ROUTE_TOLERANCE:
            raise FieldError(f"{path}.route", f"proportions sum to {total:.6g}, expected 1")
    priority = _names(spec["priority"], f"{path}.priority") if "priority" in spec else ()
    if route is not None and priority:
        raise FieldError(f"{path}.priority", "a place takes either route or priority, not both")
    abandon_to = None
    if "abandon_to" in spec:
        abandon_to = _name(spec["abandon_to"], f"{path}.abandon_to")
        if patience is None:
            raise FieldError(f"{path}.abandon_to", "needs patience on the same place")
    return Place(name, hold=hold, route=route, priority=priority, patience=patience,
                 abandon_to=abandon_to)


def _build_source(name: str, spec: dict, base: Path) -> Source:
    path = f"sources.{name}"
    _known_keys(spec, ("rate", "profile", "trace", "into"), path)
    if "into" not in spec:
        raise FieldError(f"{path}.into", "is required")
    into = _name(spec["into"], f"{path}.into")
    kinds = [k for k in ("rate", "profile", "trace") if k in spec]
    if len(kinds) != 1:
        raise FieldError(path, "needs exactly one of rate, profile or trace")
    if "rate" in spec:
        return Source(name, into, PoissonArrivals(_real(spec["rate"], f"{path}.rate", strict=True)))
    if "profile" in spec:
        prof = _mapping(spec["profile"], f"{path}.profile", allow_none=False)
        _known_keys(prof, ("step", "rates"), f"{path}.profile")
        if "step" not in prof or "rates" not in prof:
            raise FieldError(f"{path}.profile", "needs step and rates")
        step = _real(prof["step"], f"{path}.profile.step", strict=True)
        rates = prof["rates"]
        if not isinstance(rates, list) or not rates:
            raise FieldError(f"{path}.profile.rates", "must be a non-empty list", rates)
        rates_t = tuple(_real(r, f"{path}.profile.rates[{i}]") for i, r in enumerate(rates))
        if not any(r > 0 for r in rates_t):
            raise FieldError(f"{path}.profile.rates", "needs at least one positive rate")
        return Source(name, into, ProfileArrivals(step=step, rates=rates_t))
    return Source(name, into, TraceArrivals(_read_trace(spec["trace"], f"{path}.trace", base)))


def _read_trace(value: Any, path: str, base: Path) -> tuple[float, ...]:
    if not isinstance(value, str) or not value:
        raise FieldError(path, "must be a file name", value)
    file = base / value
    try:
        words = file.read_text(encoding="utf-8").split()
    except (OSError, UnicodeDecodeError) as exc:
        raise FieldError(path, f"cannot read {file}: {getattr(exc, 'strerror', exc)}", value) from None
    times = []
    for i, word in enumerate(words):
        try:
            t = float(word.rstrip(","))
        except ValueError:
            raise FieldError(path, f"line {i + 1} of {value} is not a time", word) from None
        if not math.isfinite(t) or t < 0:
            raise FieldError(path, f"line {i + 1} of {value} must be a time >= 0", word)
        if times and t < times[-1]:
            raise FieldError(path, f"line {i + 1} of {value} is earlier than the line before", word)
        times.append(t)
    if not times:
        raise FieldError(path, f"{value} holds no arrival times", value)
    return tuple(times)


def _arcs(value: Any, path: str) -> FrozenMap:
    if isinstance(value, list):
        arcs: dict[str, int] = {}
        for i, n in enumerate(value):
            n = _name(n, f"{path}[{i}]")
            if n in arcs:
                raise FieldError(f"{path}[{i}]", "listed twice (use a mapping with a weight)", n)
            arcs[n] = 1
        return FrozenMap(arcs)
    if isinstance(value, dict):
        return FrozenMap({
            _name(k, path): _whole(w, f"{path}.{k}", low=1) for k, w in value.items()
        })
    raise FieldError(path, "must be a list of names or a mapping name -> weight", value)


def _build_transition(name: str, spec: Any) -> Transition:
    path = f"transitions.{name}"
    spec = _mapping(spec, path, allow_none=False)
    _known_keys(spec, ("in", "out"), path)
    if "in" not in spec:
        raise FieldError(f"{path}.in", "is required")
    return Transition(
        name, inputs=_arcs(spec["in"], f"{path}.in"), outputs=_arcs(spec.get("out", []), f"{path}.out")
    )


def _build_targets(spec: dict) -> Targets:
    service: dict[str, ServiceTarget] = {}
    abandonment_max = None
    for key, value in spec.items():
        path = f"targets.{key}"
        value = _mapping(value, path, allow_none=False)
        if key == "abandonment":
            _known_keys(value, ("max",), path)
            if "max" not in value:
                raise FieldError(f"{path}.max", "is required")
            abandonment_max = _real(value["max"], f"{path}.max")
            if abandonment_max > 1:
                raise FieldError(f"{path}.max", "is a share and must be <= 1", abandonment_max)
            continue
        place = _name(key, "targets")
        _known_keys(value, ("within", "goal"), path)
        if "within" not in value or "goal" not in value:
            raise FieldError(path, "needs within and goal")
        goal = _real(value["goal"], f"{path}.goal", strict=True)
        if goal > 1:
            raise FieldError(f"{path}.goal", "is a share and must be <= 1", goal)
        service[place] = ServiceTarget(place, _real(value["within"], f"{path}.within"), goal)
    return Targets(service=FrozenMap(service), abandonment_max=abandonment_max)
