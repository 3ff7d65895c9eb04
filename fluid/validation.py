"""Structural checks of a scenario: rules that need the whole net (design.md §3).

Each check raises :class:`~fluid.errors.FieldError` with the path of the field to fix; the loader
adds the file name.
"""

from __future__ import annotations

from .errors import FieldError
from .scenario import Scenario

__all__ = ["check_structure", "short_plans", "ZERO_TIME"]

#: A holding time or patience below ZERO_TIME × horizon counts as zero for the zero-time-circuit
#: check: jobs circling through such places would make a billion events per job over the run,
#: or stop the simulated clock once now + hold rounds to now.
ZERO_TIME = 1e-9


def check_structure(s: Scenario, horizon: float | None = None) -> None:
    """Raise FieldError on the first structural problem found in ``s``. ``horizon``: the
    horizon it will be run over (default ``s.run.horizon``), which sets the tolerance of the
    zero-time-circuit check."""
    _check_arcs(s)
    _check_sources(s)
    _check_outputs(s)
    _check_abandon_to(s)
    _check_targets(s)
    _check_zero_time_circuits(s, horizon if horizon and horizon > 0 else s.run.horizon)


def short_plans(s: Scenario, horizon: float) -> list[tuple[str, str]]:
    """``(field, message)`` for every arrival profile and staffing schedule that ends before
    ``horizon`` (time units), saying which value holds after its end."""
    unit = s.time_unit
    out = []
    for src in s.sources.values():
        a = src.arrivals
        if a.kind == "profile" and len(a.rates) * a.step < horizon:
            end = len(a.rates) * a.step
            out.append((f"sources.{src.name}.profile",
                        f"the profile ({_count(len(a.rates), 'rate')} of step {a.step:g}) ends "
                        f"at {end:g} {unit}, before the horizon {horizon:g}: the last rate "
                        f"({a.rates[-1]:g} per {unit}) holds from {end:g} on"))
    for pool in s.pools.values():
        sched = pool.schedule
        if sched is not None and len(sched.staff) * sched.step < horizon:
            end = len(sched.staff) * sched.step
            out.append((f"pools.{pool.name}.schedule",
                        f"the schedule ({_count(len(sched.staff), 'staff level')} of step "
                        f"{sched.step:g}) ends at {end:g} {unit}, before the horizon "
                        f"{horizon:g}: the last level ({_count(sched.staff[-1], 'agent')}) "
                        f"holds from {end:g} on"))
    return out


def _count(n: int, word: str) -> str:
    return f"{n} {word}{'' if n == 1 else 's'}"


def _check_arcs(s: Scenario) -> None:
    for t in s.transitions.values():
        for side, arcs in (("in", t.inputs), ("out", t.outputs)):
            for node in arcs:
                if node not in s.places and node not in s.pools:
                    kind = "a source" if node in s.sources else "unknown"
                    raise FieldError(
                        f"transitions.{t.name}.{side}",
                        f"{kind} name {node!r}: expected a place or a pool",
                    )
        job_in = [p for p in t.inputs if p in s.places]
        job_out = [p for p in t.outputs if p in s.places]
        if not job_in:
            raise FieldError(
                f"transitions.{t.name}.in",
                "takes no job: every transition must take a job from one place "
                "(agents alone cannot fire a transition)",
            )
        if len(job_in) > 1:
            raise FieldError(
                f"transitions.{t.name}.in",
                f"takes jobs from two places ({', '.join(job_in)}): joins of jobs are not "
                "supported",
            )
        if len(job_out) > 1:
            raise FieldError(
                f"transitions.{t.name}.out",
                f"sends one job to two places ({', '.join(job_out)})",
            )
        for side, arcs, places in (("in", t.inputs, job_in), ("out", t.outputs, job_out)):
            for p in places:
                if arcs[p] != 1:
                    raise FieldError(
                        f"transitions.{t.name}.{side}.{p}",
                        "a job place takes weight 1 (one job per firing)",
                        arcs[p],
                    )


def _check_sources(s: Scenario) -> None:
    for src in s.sources.values():
        if src.into in s.pools:
            raise FieldError(f"sources.{src.name}.into", "a source cannot feed a pool", src.into)
        if src.into not in s.places:
            raise FieldError(f"sources.{src.name}.into", "unknown place", src.into)


def _check_outputs(s: Scenario) -> None:
    for kind, nodes in (("places", s.places), ("pools", s.pools)):
        for name, node in nodes.items():
            outs = s.outputs_of(name)
            path = f"{kind}.{name}"
            route = getattr(node, "route", None)
            if route is not None:
                for t in route:
                    if t not in outs:
                        raise FieldError(
                            f"{path}.route",
                            f"{t!r} is not an output transition of {name} "
                            f"(outputs: {', '.join(outs) or 'none'})",
                        )
                missing = [t for t in outs if t not in route]
                if missing:
                    raise FieldError(
                        f"{path}.route", f"gives no proportion for {', '.join(missing)}"
                    )
            if node.priority:
                if set(node.priority) != set(outs):
                    raise FieldError(
                        f"{path}.priority",
                        f"must list exactly the output transitions of {name} "
                        f"({', '.join(outs) or 'none'})",
                        list(node.priority),
                    )
            if kind == "places" and not outs:
                raise FieldError(path, "no transition takes jobs from this place: they would never leave")
            if len(outs) > 1 and route is None and not node.priority:
                raise FieldError(
                    path,
                    f"has several output transitions ({', '.join(outs)}) but neither route nor "
                    "priority",
                )


def _check_abandon_to(s: Scenario) -> None:
    for place in s.places.values():
        if place.abandon_to is None:
            continue
        path = f"places.{place.name}.abandon_to"
        if place.abandon_to in s.pools:
            raise FieldError(path, "must be a job place, not a pool", place.abandon_to)
        if place.abandon_to not in s.places:
            raise FieldError(path, "unknown place", place.abandon_to)
        if place.abandon_to == place.name:
            raise FieldError(path, "cannot send a job back to the place it abandons", place.abandon_to)


def _check_targets(s: Scenario) -> None:
    for name in s.targets.service:
        if name not in s.places:
            raise FieldError(
                f"targets.{name}", "a service target must name a job place (or be 'abandonment')"
            )


def _check_zero_time_circuits(s: Scenario, horizon: float) -> None:
    """A job could circle through places with no holding time forever at one instant (or, with
    holds below ZERO_TIME × horizon, a billion times over the run)."""
    tolerance = ZERO_TIME * horizon
    graph: dict[str, set[str]] = {p: set() for p, place in s.places.items()
                                  if place.hold_mean < tolerance}
    for t in s.transitions:
        a, b = s.job_input(t), s.job_output(t)
        if a in graph and b in graph:
            graph[a].add(b)
    for p in s.places.values():
        # a patience of (near) zero moves the job on at once, like a hold of zero
        if p.abandon_to and p.name in graph and p.abandon_to in graph:
            if p.patience is not None and p.patience.mean < tolerance:
                graph[p.name].add(p.abandon_to)
    state: dict[str, int] = {}
    for start in graph:
        if state.get(start):
            continue
        stack = [(start, iter(sorted(graph[start])))]
        state[start] = 1
        path = [start]
        while stack:
            node, it = stack[-1]
            nxt = next(it, None)
            if nxt is None:
                state[node] = 2
                stack.pop()
                path.pop()
            elif state.get(nxt) == 1:
                cycle = path[path.index(nxt):] + [nxt]
                raise FieldError(
                    f"places.{nxt}",
                    "zero-time circuit: jobs could cycle " + " -> ".join(cycle)
                    + " without any holding time (holds and patience below "
                    f"{ZERO_TIME:g} × the horizon {horizon:g} = {tolerance:.3g} "
                    f"{s.time_unit} count as none)",
                )
            elif not state.get(nxt):
                state[nxt] = 1
                path.append(nxt)
                stack.append((nxt, iter(sorted(graph[nxt]))))
