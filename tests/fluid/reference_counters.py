"""The counter integration as it was before the compiled kernel (pure Python over lists),
kept verbatim as the reference that :mod:`fluid.counters` must reproduce bit for bit on nets
without patience (tests/fluid/test_kernel.py)."""

from __future__ import annotations

import math

import numpy as np

from fluid.counters import _shift, _source_counter, _staff_on_grid  # noqa: F401 (helpers kept)
from fluid.structure import route_share

MAX_SWEEPS = 50
_INF = math.inf


def _order(names: list[str], edges: dict[str, set[str]]) -> tuple[list[str], bool]:
    """Kahn's topological order of ``names`` (edge j -> q: q reads j at the same step); on a
    cycle, continue with the remaining node of fewest unresolved inputs and report ``True``."""
    indeg = {q: 0 for q in names}
    for j, succ in edges.items():
        for q in succ:
            if q != j:
                indeg[q] += 1
    cyclic = any(j in succ for j, succ in edges.items())
    pos = {q: i for i, q in enumerate(names)}
    done: list[str] = []
    left = set(names)
    while left:
        ready = [q for q in left if indeg[q] == 0]
        if not ready:
            cyclic = True
            ready = [min(left, key=lambda q: (indeg[q], pos[q]))]
        q = min(ready, key=pos.__getitem__)
        left.remove(q)
        done.append(q)
        for s in edges.get(q, ()):
            if s in left and s != q:
                indeg[s] -= 1
    return done, cyclic


def reference_counters(scenario, dt, horizon, staff=None, extra_staff=None):
    """Counters (transition -> array) of the pre-kernel integration on the grid (dt, horizon)."""
    if dt <= 0 or horizon <= 0:
        raise ValueError("dt and horizon must be positive")
    n = int(math.floor(horizon / dt + 1e-9)) + 1
    t = dt * np.arange(n)

    trans = list(scenario.transitions)
    delay = {p: (max(1, round(pl.hold_mean / dt)) if pl.hold_mean > 0 else 0)
             for p, pl in scenario.places.items()}
    delay.update({p: 0 for p in scenario.pools})
    pad = max(delay.values(), default=0) + 1

    src_z = {s: _source_counter(scenario, s, t) for s in scenario.sources}
    level = {p: _staff_on_grid(scenario, p, t, staff, extra_staff) for p in scenario.pools}
    # M_p(t_k) plus what sources put into p by t_k − τ_p: everything known before the loop
    base = {}
    for p in (*scenario.places, *scenario.pools):
        b = level[p].copy() if p in level else np.zeros(n)
        for s in scenario.sources_into(p):
            b += _shift(src_z[s], delay[p])
        base[p] = b.tolist()

    Z = {q: [0.0] * (n + pad) for q in trans}
    edges: dict[str, set[str]] = {q: set() for q in trans}
    specs: dict[str, list] = {}
    job_specs: dict[str, tuple] = {}
    for q in trans:
        specs[q] = []
        for p, a in scenario.transitions[q].inputs.items():
            d = delay[p]
            terms = [(Z[c], float(scenario.transitions[c].outputs[p]), pad - d)
                     for c in scenario.inputs_of(p)]
            if d == 0:
                for c in scenario.inputs_of(p):
                    edges[c].add(q)
            plain = tuple(terms)
            order = scenario.priority_order(p)
            if order:
                i = order.index(q)
                for j, other in enumerate(order):
                    if j == i:
                        continue
                    w = -float(scenario.transitions[other].inputs[p])
                    terms.append((Z[other], w, pad if j < i else pad - 1))
                    if j < i:
                        edges[other].add(q)
            spec = (base[p], route_share(scenario, p, q) / float(a), tuple(terms))
            specs[q].append(spec)
            if scenario.is_job_place(p):
                job_specs[q] = (base[p], spec[1], plain)
    order, cyclic = _order(trans, edges)
    plan = [(Z[q], specs[q]) for q in order]
    if not cyclic:
        for k in range(n):
            kk = k + pad
            for zq, qspecs in plan:
                best = _INF
                for bl, scale, terms in qspecs:
                    s = bl[k]
                    for zl, c, off in terms:
                        s += c * zl[k + off]
                    v = s * scale
                    if v < best:
                        best = v
                prev = zq[kk - 1]
                zq[kk] = best if best > prev else prev
    else:
        # feeders of a job place without hold come first (such places form no circuit)
        job_edges = {c: set() for c in trans}
        for q in trans:
            p = scenario.job_input(q)
            if delay[p] == 0:
                for c in scenario.inputs_of(p):
                    job_edges[c].add(q)
        job_order, job_cyclic = _order(trans, job_edges)
        if job_cyclic:
            raise ValueError("zero-time circuit of job places: the counters have no solution")
        job_plan = [(Z[q], job_specs[q]) for q in job_order]
        _integrate_cyclic(n, pad, plan, job_plan)

    return {q: np.asarray(Z[q][pad:]) for q in trans}


def _integrate_cyclic(n: int, pad: int, plan: list, job_plan: list) -> int:
    """Step loop when same-time dependencies form a cycle: start each step from an upper bound
    (each transition limited by its job place alone, fed by upper bounds) and sweep until no
    value changes. Returns the number of steps that hit the sweep cap."""
    unconverged = 0
    for k in range(n):
        kk = k + pad
        for zq, (bl, scale, terms) in job_plan:
            s = bl[k]
            for zl, c, off in terms:
                s += c * zl[k + off]
            v = s * scale
            prev = zq[kk - 1]
            zq[kk] = v if v > prev else prev
        for _ in range(MAX_SWEEPS):
            changed = False
            for zq, qspecs in plan:
                best = _INF
                for bl, scale, terms in qspecs:
                    s = bl[k]
                    for zl, c, off in terms:
                        s += c * zl[k + off]
                    v = s * scale
                    if v < best:
                        best = v
                prev = zq[kk - 1]
                new = best if best > prev else prev
                old = zq[kk]
                if abs(new - old) > 1e-12 * (1.0 + abs(old)):
                    changed = True
                zq[kk] = new
            if not changed:
                break
        else:
            unconverged += 1
    return unconverged


