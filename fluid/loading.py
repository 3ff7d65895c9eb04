"""Reading a scenario: YAML (:mod:`fluid.yaml_text`: no duplicate keys, YAML 1.2 numbers, a
budget of values), ``--set`` overrides (:mod:`fluid.overrides`), and validation field by field
(:mod:`fluid.fields`); variants of a scenario (:func:`with_changes`) go through the same
overrides and validation.

Everything a user can get wrong is reported as one :class:`~fluid.errors.ScenarioError` naming
the file, the field path and the value (bounded); nothing else escapes :func:`load_scenario` for
bad input. The work is bounded for any input: the scenario file and the files it names are read
by :mod:`fluid.datafiles` (regular files only, inside the scenario's folder, at most so many
numbers), and profile and schedule steps may cut the horizon into at most
``Limits.intervals`` intervals. The validation rules are those of design.md §3; the structural
checks that need the whole net live in :mod:`fluid.validation`.
"""

from __future__ import annotations

import json
import warnings
from pathlib import Path
from typing import Any, Iterable, Mapping

from .clock import parse_start
from .datafiles import SCENARIO_BYTES, DataFolder, open_input
from .distributions import parse_distribution
from .errors import FieldError, ScenarioError, printable
from .fields import LARGEST_NUMBER, name as _name, number as _real, whole as _whole
from .scenario import (
    LARGEST_SEED,
    OUTCOMES,
    FrozenMap,
    Limits,
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
from .shifts import parse_shifts
from .sources import PoissonArrivals, ProfileArrivals, TraceArrivals, parse_random_rate
from .overrides import apply_override, parse_override
from .validation import check_structure, short_plans
from .yaml_text import parse_yaml as _parse_yaml

__all__ = [
    "load_scenario",
    "load_scenario_text",
    "scenario_from_document",
    "parse_override",
    "apply_override",
    "with_changes",
    "ScenarioWarning",
]

TOP_KEYS = ("name", "time_unit", "run", "sources", "pools", "places", "transitions", "targets",
            "shifts")
ROUTE_TOLERANCE = 1e-9


class ScenarioWarning(UserWarning):
    """Something in a scenario that is allowed but probably not meant (e.g. a leaking pool)."""


# --- entry points --------------------------------------------------------------------------------


def _read_scenario_file(path: str | Path) -> str:
    file = str(path)
    handle, size = open_input(path, "a YAML file")
    with handle:
        if size > SCENARIO_BYTES:
            raise ScenarioError(file, "", f"is larger than {SCENARIO_BYTES:,} bytes, the limit "
                                "of a scenario file")
        try:
            data = handle.read(SCENARIO_BYTES + 1)
        except OSError as exc:
            raise ScenarioError(file, "", f"cannot read: {exc.strerror}") from None
    if len(data) > SCENARIO_BYTES:
        raise ScenarioError(file, "", f"is larger than {SCENARIO_BYTES:,} bytes, the limit of a "
                            "scenario file")
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError:
        raise ScenarioError(file, "", "is not UTF-8 text") from None


def load_scenario(path: str | Path, overrides: Iterable[str | tuple[str, Any]] = (), *,
                  limits: Limits | None = None, horizon: float | None = None) -> Scenario:
    """Read, override and validate the scenario in ``path``.

    ``overrides`` are ``"PATH=VALUE"`` strings (as given to ``--set``) or ``(path, value)``
    pairs, applied in order to the YAML document before validation. ``limits``: the bounds on
    what it may ask for (:class:`fluid.scenario.Limits`; the defaults when None). ``horizon``:
    the horizon it will be run over when not its own ``run.horizon`` (time units; profile and
    schedule steps are counted and their coverage checked over it).
    """
    text = _read_scenario_file(path)
    return load_scenario_text(text, file=str(path), overrides=overrides,
                              base_dir=str(Path(path).resolve().parent), limits=limits,
                              horizon=horizon)


def load_scenario_text(
    text: str,
    file: str = "<string>",
    overrides: Iterable[str | tuple[str, Any]] = (),
    base_dir: str | None = None,
    *,
    limits: Limits | None = None,
    horizon: float | None = None,
) -> Scenario:
    """Like :func:`load_scenario` for YAML given as a string (files named in it, such as traces,
    are read relative to ``base_dir``, default the working directory, and must lie inside it
    unless ``limits.outside_files``)."""
    doc = _parse_yaml(text, file)
    if not isinstance(doc, dict):
        raise ScenarioError(file, "", "the document must be a mapping of the keys " + ", ".join(TOP_KEYS))
    for item in overrides:
        path, value = parse_override(item) if isinstance(item, str) else item
        apply_override(doc, path, value, file=file)
    scenario = scenario_from_document(doc, file=file, base_dir=base_dir, limits=limits,
                                      horizon=horizon)
    for field, message in short_plans(scenario, horizon or scenario.run.horizon):
        warnings.warn(f"{printable(file)}: {field}: {message}", ScenarioWarning, stacklevel=2)
    return scenario


def scenario_from_document(
    doc: Mapping, *, file: str = "<string>", base_dir: str | None = None,
    limits: Limits | None = None, horizon: float | None = None,
) -> Scenario:
    """Validate a YAML document (already parsed) and build the frozen :class:`Scenario`
    (``limits``, ``horizon``: as for :func:`load_scenario`)."""
    try:
        scenario = _build(doc, file, base_dir, limits or Limits(), horizon)
        check_structure(scenario, horizon)
    except FieldError as exc:
        raise exc.to_scenario_error(file) from None
    _warn_uncovered_pools(scenario)
    return scenario


def with_changes(scenario: Scenario, changes: Mapping[str, Any] | None = None, **kw) -> Scenario:
    """Return a validated copy of ``scenario`` with ``changes`` applied to its document.

    ``changes`` maps dotted paths to Python values, e.g. ``{"pools.front_desk": 12,
    "sources.calls.rate": 3.5}`` (the same paths as ``--set``, ``+`` included). Keyword
    arguments are also accepted as top-level paths. Raises :class:`fluid.errors.ScenarioError`
    if the result is not a valid scenario. A variant is thus exactly what the same YAML edited
    by hand would give; it keeps the scenario's limits.
    """
    doc = scenario.to_document()
    for path, value in {**(changes or {}), **kw}.items():
        apply_override(doc, path, value, file=scenario.file)
    return scenario_from_document(doc, file=scenario.file, base_dir=scenario.base_dir,
                                  limits=scenario.limits)


def _warn_uncovered_pools(scenario: Scenario) -> None:
    try:
        from .invariants import leak_message, patience_leaks, uncovered_pools
    except ImportError:  # the invariant module is optional while the package is being built
        return
    uncovered = uncovered_pools(scenario)
    leaks = patience_leaks(scenario) if uncovered else {}
    for pool in uncovered:
        if pool in leaks:
            message = (f"{leak_message(pool, leaks[pool])} (no conservation invariant covers "
                       "this pool once abandonment is counted)")
        else:
            message = ("no conservation invariant covers this pool: its agents can leak or "
                       "multiply (check that every transition that takes an agent gives it back)")
        warnings.warn(f"{scenario.file}: pools.{pool}: {message}", ScenarioWarning, stacklevel=3)


# --- building ------------------------------------------------------------------------------------

#: The longest scenario name and time unit (characters).
NAME_CHARS, UNIT_CHARS = 200, 40


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


def _names(value: Any, path: str) -> tuple[str, ...]:
    if not isinstance(value, list) or not value:
        raise FieldError(path, "must be a non-empty list of names", value)
    out = tuple(_name(v, f"{path}[{i}]") for i, v in enumerate(value))
    if len(set(out)) != len(out):
        raise FieldError(path, "names a transition twice", value)
    return out


def _text(value: Any, path: str, what: str, longest: int) -> str:
    """A one-line text (surrounding white space, such as the newline a YAML block leaves, is
    dropped) of at most ``longest`` characters."""
    if not isinstance(value, str) or not value.strip():
        raise FieldError(path, f"must be a non-empty text{what}", value)
    text = value.strip()
    if len(text) > longest or not text.isprintable():
        raise FieldError(path, f"must be one line of at most {longest} characters", value)
    return text


def _steps(step: float, path: str, horizon: float, limits: Limits) -> None:
    """Refuse a step that cuts the horizon into more intervals than the limit."""
    count = horizon / step
    if count > limits.intervals:
        raise FieldError(path, f"cuts the horizon {horizon:g} into {count:.3g} intervals, more "
                         f"than the limit of {limits.intervals:,} (raise it with "
                         f"{limits.flag('intervals')})", step)


def _build(doc: Mapping, file: str, base_dir: str | None, limits: Limits,
           horizon: float | None) -> Scenario:
    _known_keys(doc, TOP_KEYS, "")
    for required in ("sources", "places", "transitions"):
        if required not in doc:
            raise FieldError(required, "is required")
    name = _text(doc.get("name", Path(file).stem), "name", "", NAME_CHARS)
    time_unit = _text(doc.get("time_unit", "min"), "time_unit", " such as min or h", UNIT_CHARS)
    base = Path(base_dir) if base_dir else Path.cwd()
    folder = DataFolder(base, max_values=limits.file_values, outside_files=limits.outside_files)

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
    span = run.horizon if horizon is None or not horizon > 0 else horizon
    pools = {n: _build_pool(n, spec, span, limits) for n, spec in pools_doc.items()}
    places = {n: _build_place(n, _mapping(spec, f"places.{n}"), folder)
              for n, spec in places_doc.items()}
    sources = {n: _build_source(n, _mapping(spec, f"sources.{n}", allow_none=False), folder,
                                span, limits)
               for n, spec in sources_doc.items()}
    transitions = {n: _build_transition(n, spec) for n, spec in transitions_doc.items()}
    _check_outcomes(transitions_doc, places)
    targets = _build_targets(_mapping(doc.get("targets"), "targets"))
    shifts = parse_shifts(_mapping(doc.get("shifts"), "shifts"), pools)
    try:
        document = json.dumps(doc)
    except (TypeError, ValueError):  # a date, a set, ... left where no reader looked
        raise FieldError("", "holds a value that is not a number, a text, a list or a "
                         "mapping") from None
    return Scenario(
        name=name,
        time_unit=time_unit,
        run=run,
        sources=FrozenMap(sources),
        pools=FrozenMap(pools),
        places=FrozenMap(places),
        transitions=FrozenMap(transitions),
        targets=targets,
        shifts=FrozenMap(shifts),
        file=file,
        document=document,
        base_dir=str(base),
        limits=limits,
    )


def _build_run(spec: dict) -> RunSettings:
    _known_keys(spec, ("horizon", "warmup", "replications", "seed", "start"), "run")
    default = RunSettings()
    horizon = _real(spec.get("horizon", default.horizon), "run.horizon", strict=True)
    warmup = _real(spec.get("warmup", default.warmup), "run.warmup")
    if warmup >= horizon:
        raise FieldError("run.warmup", f"must be below the horizon ({horizon:g})", warmup)
    reps = _whole(spec.get("replications", default.replications), "run.replications", low=1)
    seed = _whole(spec.get("seed", default.seed), "run.seed", high=LARGEST_SEED)
    start = None if spec.get("start") is None else parse_start(spec["start"], "run.start")
    return RunSettings(horizon=horizon, warmup=warmup, replications=reps, seed=seed,
                       start=start)


def _build_pool(name: str, spec: Any, horizon: float, limits: Limits) -> Pool:
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
        _steps(step, f"{path}.schedule.step", horizon, limits)
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


def _build_place(name: str, spec: dict, folder: DataFolder) -> Place:
    path = f"places.{name}"
    _known_keys(spec, ("hold", "route", "priority", "patience", "abandon_to"), path)
    hold = parse_distribution(spec["hold"], f"{path}.hold", folder) if "hold" in spec else None
    patience = (
        parse_distribution(spec["patience"], f"{path}.patience", folder)
        if "patience" in spec else None
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


def _build_source(name: str, spec: dict, folder: DataFolder, horizon: float,
                  limits: Limits) -> Source:
    path = f"sources.{name}"
    _known_keys(spec, ("rate", "profile", "trace", "into", "random_rate"), path)
    if "into" not in spec:
        raise FieldError(f"{path}.into", "is required")
    into = _name(spec["into"], f"{path}.into")
    kinds = [k for k in ("rate", "profile", "trace") if k in spec]
    if len(kinds) != 1:
        raise FieldError(path, "needs exactly one of rate, profile or trace")
    random_rate = None
    if "random_rate" in spec:
        if "trace" in spec:
            raise FieldError(f"{path}.random_rate", "a trace source has recorded times, no "
                             "rate to vary: give it a rate or a profile for a day factor")
        random_rate = parse_random_rate(spec["random_rate"], f"{path}.random_rate")
    arrivals = _build_arrivals(spec, path, folder, horizon, limits)
    return Source(name, into, arrivals, random_rate=random_rate)


def _build_arrivals(spec: dict, path: str, folder: DataFolder, horizon: float, limits: Limits):
    """The arrival process of the source at ``path`` (its rate, profile or trace)."""
    if "rate" in spec:
        return PoissonArrivals(_real(spec["rate"], f"{path}.rate", strict=True))
    if "profile" in spec:
        prof = _mapping(spec["profile"], f"{path}.profile", allow_none=False)
        _known_keys(prof, ("step", "rates"), f"{path}.profile")
        if "step" not in prof or "rates" not in prof:
            raise FieldError(f"{path}.profile", "needs step and rates")
        step = _real(prof["step"], f"{path}.profile.step", strict=True)
        _steps(step, f"{path}.profile.step", horizon, limits)
        rates = prof["rates"]
        if not isinstance(rates, list) or not rates:
            raise FieldError(f"{path}.profile.rates", "must be a non-empty list", rates)
        rates_t = tuple(_real(r, f"{path}.profile.rates[{i}]") for i, r in enumerate(rates))
        if not any(r > 0 for r in rates_t):
            raise FieldError(f"{path}.profile.rates", "needs at least one positive rate")
        return ProfileArrivals(step=step, rates=rates_t)
    return TraceArrivals(_read_trace(spec["trace"], f"{path}.trace", folder))


def _read_trace(value: Any, path: str, folder: DataFolder) -> tuple[float, ...]:
    """The arrival times of a trace file (one or more per line, each >= 0, in order, each at
    most :data:`fluid.fields.LARGEST_NUMBER`); messages name the line, never quote it."""
    times, lines = folder.read_numbers(value, path, strip=",")
    previous = 0.0
    for i, t in enumerate(times):
        if not (LARGEST_NUMBER >= t >= 0):  # (also refuses nan and inf)
            raise FieldError(path, f"line {lines[i]} of {value} must be a time >= 0 and at "
                             f"most {LARGEST_NUMBER:g}")
        if t < previous:
            before = "line before" if lines[i - 1] < lines[i] else "time before it on its line"
            raise FieldError(path, f"line {lines[i]} of {value} is earlier than the {before}")
        previous = t
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
    _known_keys(spec, ("in", "out", "outcome"), path)
    if "in" not in spec:
        raise FieldError(f"{path}.in", "is required")
    outcome = spec.get("outcome", "served")
    if not isinstance(outcome, str) or outcome not in OUTCOMES:
        raise FieldError(f"{path}.outcome", f"must be one of: {', '.join(OUTCOMES)}", outcome)
    return Transition(
        name, inputs=_arcs(spec["in"], f"{path}.in"), outputs=_arcs(spec.get("out", []), f"{path}.out"),
        outcome=outcome,
    )



def _check_outcomes(transitions_doc: Mapping, places: Mapping[str, Place]) -> None:
    """An ``outcome`` is said only of a transition that ends jobs (no place among its outputs)."""
    for name, spec in transitions_doc.items():
        if "outcome" in spec:
            kept = [n for n in _arcs(spec.get("out", []), f"transitions.{name}.out") if n in places]
            if kept:
                raise FieldError(f"transitions.{name}.outcome", "is only for a transition that "
                                 f"ends jobs, but this one moves them on to place {kept[0]}")



def _abandoner_convention(value: Any, path: str) -> tuple[str, float | None]:
    """``against`` | ``excluded`` | ``{excluded_within: T}`` (T >= 0) -> (convention, T)."""
    if isinstance(value, dict):
        _known_keys(value, ("excluded_within",), path)
        if "excluded_within" not in value:
            raise FieldError(f"{path}.excluded_within", "is required")
        return "excluded_within", _real(value["excluded_within"], f"{path}.excluded_within")
    if isinstance(value, str) and value in ("against", "excluded"):
        return value, None
    raise FieldError(path, "must be against, excluded or {excluded_within: T}", value)


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
        _known_keys(value, ("within", "goal", "abandoned"), path)
        if "within" not in value or "goal" not in value:
            raise FieldError(path, "needs within and goal")
        goal = _real(value["goal"], f"{path}.goal", strict=True)
        if goal > 1:
            raise FieldError(f"{path}.goal", "is a share and must be <= 1", goal)
        convention, excluded_within = _abandoner_convention(value.get("abandoned", "against"),
                                                            f"{path}.abandoned")
        service[place] = ServiceTarget(place, _real(value["within"], f"{path}.within"), goal,
                                       convention, excluded_within)
    return Targets(service=FrozenMap(service), abandonment_max=abandonment_max)
