"""The fluid equations of a scenario as flat arrays for :mod:`fluid.kernel`.

:func:`build` lays out every row of the kernel (transitions, what enters and what has become
available in a place, what has finished a hold, what has abandoned) and the terms that connect
them, for one grid (step ``dt``, ``n`` points) and one :class:`FluidModel`:

* ``COUNTERS``: the counter equations of design.md §4.1 as written: every hold is a delay of its
  mean, patience is ignored;
* ``WITH_ABANDONMENT``: the fluid model with abandonment: a hold that is not deterministic
  releases its jobs as its distribution says (exponential by the exact one-step recursion, others
  by convolution with the CDF on the grid), and a waiting place with patience loses its content
  by age as the patience distribution says (Liu and Whitt 2011, 2012), to ``abandon_to`` when
  given. On a net with deterministic holds and no patience both models are the same equations.

The terms of each transition are laid out in the order the pre-kernel integration summed them,
so the counters are bit-for-bit those of that integration.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from .scenario import Scenario
from .structure import route_share

__all__ = ["FluidModel", "COUNTERS", "WITH_ABANDONMENT", "FlatNet", "build"]

#: Survival below which a waiting cohort is taken as gone, and CDF above which a hold is done.
SURVIVAL_FLOOR = 1e-15
CDF_CEILING = 1.0 - 1e-12


@dataclass(frozen=True)
class FluidModel:
    """Which fluid equations: ``holds`` "mean" (a hold is a delay of its mean) or "distribution"
    (jobs finish as the hold's distribution says); ``patience``: waiting places with patience
    lose content (abandonment) or not. ``name`` says it in words for outputs."""

    holds: str
    patience: bool
    name: str


COUNTERS = FluidModel("mean", False, "counter equations (holds as delays of their means; "
                      "patience ignored)")
WITH_ABANDONMENT = FluidModel("distribution", True, "fluid model with abandonment (holds and "
                              "patience by their distributions; age-structured queues, Liu and "
                              "Whitt 2011-2012)")


@dataclass
class FlatNet:
    """The kernel's arrays (see :func:`fluid.kernel.run`) and where each row of the scenario
    sits: ``rows[q]`` for transition q, ``abandon_rows[p]``, ``avail_rows[p]`` (what has become
    available in an impatient place p), ``in_rows[p]`` and ``hold_rows[p]`` (what has entered
    and what has finished the hold of a place with a distributed hold)."""

    n: int
    pad: int
    Z: np.ndarray
    arrays: dict
    rows: dict
    abandon_rows: dict
    avail_rows: dict
    in_rows: dict
    hold_rows: dict
    delay: dict
    distributed: tuple
    waiting_places: tuple
    cyclic: bool
    base_of: dict

    def with_levels(self, levels: dict) -> "FlatNet":
        """A fresh copy (nothing integrated yet) with the pools' staff on the grid replaced by
        ``levels`` (pool -> array); everything else is shared read-only."""
        arrays = dict(self.arrays)
        base = self.arrays["base"].copy()
        for pool, level in levels.items():
            base[self.base_of[pool]] = level
        arrays["base"] = base
        for key in ("coh_amt", "coh_step", "coh_head", "coh_len", "hol_age"):
            arrays[key] = np.zeros_like(self.arrays[key])
        return FlatNet(n=self.n, pad=self.pad, Z=np.zeros_like(self.Z), arrays=arrays,
                       rows=self.rows, abandon_rows=self.abandon_rows,
                       avail_rows=self.avail_rows, in_rows=self.in_rows,
                       hold_rows=self.hold_rows, delay=self.delay,
                       distributed=self.distributed, waiting_places=self.waiting_places,
                       cyclic=self.cyclic, base_of=self.base_of)

    def run(self) -> int:
        from .kernel import run

        a = self.arrays
        return int(run(self.n, self.pad, self.Z, a["base"], a["order"], a["grp_row"],
                       a["grp_spec"], a["spec_base"], a["spec_scale"], a["spec_term"],
                       a["term_row"], a["term_coef"], a["term_off"], self.cyclic,
                       a["job_order"], a["job_spec"], a["lin_row"], a["lin_spec"],
                       a["hold_row"], a["hold_in"], a["hold_kind"], a["hold_rate"], a["hold_first"],
                       a["hold_ptr"], a["hold_cdf"], a["ab_row"], a["ab_avail"],
                       a["ab_out_ptr"], a["ab_out_row"], a["ab_out_coef"], a["ab_ptr"],
                       a["ab_surv"], a["coh_amt"], a["coh_step"], a["coh_head"], a["coh_len"],
                       a["hol_age"]))

    def row(self, r: int) -> np.ndarray:
        return self.Z[r, self.pad:]


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


def _shift(a: np.ndarray, d: int) -> np.ndarray:
    """``a`` delayed by ``d`` steps (zero before the start)."""
    if d == 0:
        return a
    out = np.zeros_like(a)
    if d < len(a):
        out[d:] = a[:-d]
    return out


@lru_cache(maxsize=256)
def _cdf_table(dist, dt: float, limit: int) -> np.ndarray:
    """G[0] = 0 and G[i] = CDF of ``dist`` at (i + 1/2) dt for i >= 1 (a job finishing during a
    step is released at its end: see :mod:`fluid.kernel`), until it reaches CDF_CEILING (at
    most ``limit`` entries); past the table the hold counts as done."""
    out = [0.0]
    for i in range(1, limit):
        g = float(dist.cdf((i + 0.5) * dt))
        out.append(g)
        if g >= CDF_CEILING:
            break
    return np.asarray(out, dtype=float)


@lru_cache(maxsize=256)
def _survival_table(dist, dt: float, limit: int) -> np.ndarray:
    """S[0] = 1 (a cohort as it becomes available) and S[m] = F^c((m + 1/2) dt) for m >= 1
    (the midpoint rule: a cohort becomes available uniformly over its step), until it falls
    below SURVIVAL_FLOOR (at most ``limit`` entries)."""
    out = [1.0]
    for m in range(1, limit):
        s = 1.0 - float(dist.cdf((m + 0.5) * dt))
        if s <= SURVIVAL_FLOOR:
            out.append(0.0)
            break
        out.append(s)
    return np.asarray(out, dtype=float)


def _is_distributed(hold) -> bool:
    return hold is not None and hold.mean > 0 and hold.cv > 0


def build(scenario: Scenario, dt: float, t: np.ndarray, *, sources: dict, levels: dict,
          model: FluidModel = COUNTERS) -> FlatNet:
    """The flat form of ``scenario``'s fluid equations on the grid ``t`` (step ``dt``), with
    source counters ``sources`` (name -> array on the grid) and pool markings ``levels`` (pool ->
    staff on the grid)."""
    n = len(t)
    places = scenario.places
    trans = list(scenario.transitions)
    distributed = tuple(p for p, pl in places.items()
                        if model.holds == "distribution" and _is_distributed(pl.hold))
    # a hold longer than the grid releases nothing on it: cap the delay at n steps (the terms
    # then read zeros, as they would further back), so a huge hold costs no memory
    delay = {p: (0 if p in distributed else min(n, max(1, round(pl.hold_mean / dt)))
                 if pl.hold_mean > 0 else 0) for p, pl in places.items()}
    delay.update({p: 0 for p in scenario.pools})
    impatient = tuple(p for p, pl in places.items() if model.patience and pl.patience is not None)
    pad = max(delay.values(), default=0) + (2 if distributed else 1)  # a hold reads k - 2

    rows = {q: i for i, q in enumerate(trans)}
    nxt = len(trans)
    in_rows, hold_rows, abandon_rows, avail_rows = {}, {}, {}, {}
    for p in distributed:
        in_rows[p], hold_rows[p] = nxt, nxt + 1
        nxt += 2
    for p in impatient:
        abandon_rows[p] = nxt
        nxt += 1
        if p in distributed:
            avail_rows[p] = hold_rows[p]
        else:
            avail_rows[p] = nxt
            nxt += 1
    Z = np.zeros((nxt, n + pad))

    # base rows: M_p(t_k) plus what sources put into p by t_k - tau_p (known before the loop)
    base_list: list[np.ndarray] = []
    base_of: dict[str, int] = {}
    into = {p: [] for p in (*places, *scenario.pools)}
    for s in scenario.sources.values():
        into[s.into].append(s.name)
    for p in (*places, *scenario.pools):
        b = levels[p].copy() if p in levels else np.zeros(n)
        if p not in distributed:
            for s in into[p]:
                b += _shift(sources[s], delay[p])
        base_of[p] = len(base_list)
        base_list.append(b)
    abandon_into: dict[str, list[str]] = {p: [] for p in places}
    for p in impatient:
        if places[p].abandon_to is not None:
            abandon_into[places[p].abandon_to].append(p)

    def plain_terms(p: str) -> list[tuple[int, float, int]]:
        """What has become available in p, as terms (the base row holds the rest)."""
        if p in distributed:
            return [(hold_rows[p], 1.0, 0)]
        d = delay[p]
        terms = [(rows[c], float(scenario.transitions[c].outputs[p]), -d)
                 for c in scenario.inputs_of(p)]
        terms += [(abandon_rows[a], 1.0, -d) for a in abandon_into.get(p, ())]
        return terms

    spec_base, spec_scale, spec_term = [], [], [0]
    term_row, term_coef, term_off = [], [], []

    def add_spec(base_index: int, scale: float, terms) -> int:
        for r, c, off in terms:
            term_row.append(r)
            term_coef.append(c)
            term_off.append(off)
        spec_base.append(base_index)
        spec_scale.append(scale)
        spec_term.append(len(term_row))
        return len(spec_base) - 1

    edges: dict[str, set[str]] = {q: set() for q in trans}
    grp_specs: dict[str, list[int]] = {}
    job_spec: dict[str, int] = {}
    for q in trans:
        grp_specs[q] = []
        for p, a in scenario.transitions[q].inputs.items():
            plain = plain_terms(p)
            if delay[p] == 0 and p not in distributed:
                for c in scenario.inputs_of(p):
                    edges[c].add(q)
            if p in abandon_rows:
                plain = plain + [(abandon_rows[p], -1.0, 0)]
            terms = list(plain)
            order = scenario.priority_order(p)
            if order:
                i = order.index(q)
                for j, other in enumerate(order):
                    if j == i:
                        continue
                    w = -float(scenario.transitions[other].inputs[p])
                    terms.append((rows[other], w, 0 if j < i else -1))
                    if j < i:
                        edges[other].add(q)
            scale = route_share(scenario, p, q) / float(a)
            grp_specs[q].append(add_spec(base_of[p], scale, terms))
            if scenario.is_job_place(p):
                job_spec[q] = add_spec(base_of[p], scale, plain)
    order, cyclic = _order(trans, edges)
    if cyclic:
        # feeders of a job place without hold come first (such places form no circuit)
        job_edges = {c: set() for c in trans}
        for q in trans:
            p = scenario.job_input(q)
            if delay[p] == 0 and p not in distributed:
                for c in scenario.inputs_of(p):
                    job_edges[c].add(q)
        job_order, job_cyclic = _order(trans, job_edges)
        if job_cyclic:
            raise ValueError("zero-time circuit of job places: the counters have no solution")
    else:
        job_order = []
    grp_row = [rows[q] for q in trans]
    grp_spec = [0]
    for q in trans:
        grp_spec.append(grp_spec[-1] + len(grp_specs[q]))
    # the kernel reads a group's specs as one contiguous run: lay them out in group order
    flat_specs = [s for q in trans for s in grp_specs[q]]
    remap = {old: new for new, old in enumerate(flat_specs)}
    rest = [s for s in range(len(spec_base)) if s not in remap]
    for s in rest:
        remap[s] = len(remap)
    perm = flat_specs + rest
    new_base = [spec_base[s] for s in perm]
    new_scale = [spec_scale[s] for s in perm]
    new_term = [0]
    new_row, new_coef, new_off = [], [], []
    for s in perm:
        lo, hi = spec_term[s], spec_term[s + 1]
        new_row += term_row[lo:hi]
        new_coef += term_coef[lo:hi]
        new_off += term_off[lo:hi]
        new_term.append(len(new_row))

    # linear rows after the transitions: what entered a distributed place, what became
    # available in an impatient place without a distributed hold
    lin_row, lin_spec = [], []

    def add_lin(row: int, base_index: int, terms) -> None:
        new_row.extend(r for r, _, _ in terms)
        new_coef.extend(c for _, c, _ in terms)
        new_off.extend(o for _, _, o in terms)
        new_base.append(base_index)
        new_scale.append(1.0)
        new_term.append(len(new_row))
        lin_row.append(row)
        lin_spec.append(len(new_base) - 1)

    for p in distributed:
        b = np.zeros(n)
        for s in into[p]:
            b += sources[s]
        base_list.append(b)
        terms = [(rows[c], float(scenario.transitions[c].outputs[p]), 0)
                 for c in scenario.inputs_of(p)]
        terms += [(abandon_rows[a], 1.0, 0) for a in abandon_into.get(p, ())]
        add_lin(in_rows[p], len(base_list) - 1, terms)
    for p in impatient:
        if p not in distributed:
            add_lin(avail_rows[p], base_of[p], plain_terms(p))

    # hold rows
    hold_row, hold_in, hold_kind, hold_rate, hold_first, hold_ptr, hold_cdf = (
        [], [], [], [], [], [0], [])
    for p in distributed:
        hold = places[p].hold
        hold_row.append(hold_rows[p])
        hold_in.append(in_rows[p])
        if hold.name == "exponential":
            hold_kind.append(0)
            hold_rate.append(-math.expm1(-dt / hold.mean))
            hold_first.append(-math.expm1(-1.5 * dt / hold.mean))
        else:
            hold_kind.append(1)
            hold_rate.append(0.0)
            hold_first.append(0.0)
            hold_cdf.extend(_cdf_table(hold, float(dt), n + 1).tolist())
        hold_ptr.append(len(hold_cdf))

    # abandonment rows and their cohorts
    ab_row, ab_avail, ab_out_ptr, ab_out_row, ab_out_coef = [], [], [0], [], []
    ab_ptr, ab_surv = [0], []
    for p in impatient:
        ab_row.append(abandon_rows[p])
        ab_avail.append(avail_rows[p])
        for q in scenario.outputs_of(p):
            ab_out_row.append(rows[q])
            ab_out_coef.append(float(scenario.transitions[q].inputs[p]))
        ab_out_ptr.append(len(ab_out_row))
        ab_surv.extend(_survival_table(places[p].patience, float(dt), n + 2).tolist())
        ab_ptr.append(len(ab_surv))
    cap = max([ab_ptr[i + 1] - ab_ptr[i] for i in range(len(impatient))], default=0) + 2

    ints = lambda x: np.asarray(x, dtype=np.int64)  # noqa: E731
    floats = lambda x: np.asarray(x, dtype=np.float64)  # noqa: E731
    n_ab = len(impatient)
    arrays = dict(
        base=np.vstack(base_list) if base_list else np.zeros((1, n)),
        order=ints([trans.index(q) for q in order]), grp_row=ints(grp_row),
        grp_spec=ints(grp_spec), spec_base=ints(new_base), spec_scale=floats(new_scale),
        spec_term=ints(new_term), term_row=ints(new_row), term_coef=floats(new_coef),
        term_off=ints(new_off), job_order=ints([trans.index(q) for q in job_order]),
        job_spec=ints([remap[job_spec[q]] if q in job_spec else -1 for q in trans]),
        lin_row=ints(lin_row), lin_spec=ints(lin_spec),
        hold_row=ints(hold_row), hold_in=ints(hold_in), hold_kind=ints(hold_kind),
        hold_rate=floats(hold_rate), hold_first=floats(hold_first), hold_ptr=ints(hold_ptr),
        hold_cdf=floats(hold_cdf),
        ab_row=ints(ab_row), ab_avail=ints(ab_avail), ab_out_ptr=ints(ab_out_ptr),
        ab_out_row=ints(ab_out_row), ab_out_coef=floats(ab_out_coef), ab_ptr=ints(ab_ptr),
        ab_surv=floats(ab_surv), coh_amt=np.zeros((n_ab, cap)),
        coh_step=np.zeros((n_ab, cap), dtype=np.int64), coh_head=np.zeros(n_ab, dtype=np.int64),
        coh_len=np.zeros(n_ab, dtype=np.int64), hol_age=np.zeros((n_ab, n), dtype=np.int64),
    )
    return FlatNet(n=n, pad=pad, Z=Z, arrays=arrays, rows=rows, abandon_rows=abandon_rows,
                   avail_rows=avail_rows, in_rows=in_rows, hold_rows=hold_rows, delay=delay, distributed=distributed,
                   waiting_places=impatient, cyclic=cyclic, base_of=base_of)
