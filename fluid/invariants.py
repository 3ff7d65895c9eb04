"""Conservation invariants (P-semiflows) of a scenario's net.

A P-semiflow is a non-negative integer weighting ``y`` of the places and pools with ``yᵀC = 0``,
where ``C`` is the incidence matrix (rows: places and pools; columns: transitions, plus one column
per source that only produces one token into its place, plus one column per place with patience:
its abandonment exit, which takes a token out of that place and puts it into ``abandon_to`` when
one is given). Along any firing sequence the weighted
token count ``Σ y_p · m_p`` then stays at its initial value. For a pool this is how its agents
are accounted for: ``front_desk + front_talk + front_wrap = staff`` says where every agent is.
A pool on no semiflow can leak or multiply agents.

A patience exit takes away whatever the abandoning token stands for: when a place with patience
also holds agents (a transition leaves a job and its agent waiting there together), the agent
leaves with the abandoning job and its pool drains. The exit's column forces weight 0 on such a
place, so the pool drops off every semiflow; :func:`patience_leaks` names the places responsible.

The semiflows of minimal support are computed with the Farkas algorithm as improved by
Martínez and Silva (1982, "A simple and fast algorithm to obtain all invariants of a generalised
Petri net"): columns of ``C`` are eliminated one at a time by non-negative combinations of pairs of
rows, and after each step only rows of minimal support are kept (the extreme rays of the cone
``{y ≥ 0 : yᵀC = 0}`` are exactly its minimal-support elements). Arithmetic is on Python
integers, so the weights are exact. Rows are sparse, the per-column counts that choose the next
column are kept up to date as rows come and go, and supports are looked up by node, so a step
costs what it changes rather than a scan of every row (and every pair of rows).
"""

from __future__ import annotations

import math
import warnings
from functools import reduce

import numpy as np

from .lp import linprog
from .scenario import Scenario

__all__ = [
    "incidence_matrix",
    "p_semiflows",
    "uncovered_pools",
    "patience_exits",
    "patience_leaks",
    "leak_message",
    "pool_invariant",
    "pool_invariants",
    "InvariantWarning",
    "DEFAULT_MAX_ROWS",
]

DEFAULT_MAX_ROWS = 5000


class InvariantWarning(RuntimeWarning):
    """The semiflow enumeration hit its row cap and fell back to one semiflow per node."""


def patience_exits(scenario: Scenario) -> dict[str, str | None]:
    """``{place: abandon_to or None}`` for every place with patience, in declaration order: each
    is an implicit exit of the net (an abandoning job leaves, or moves to ``abandon_to``)."""
    return {n: p.abandon_to for n, p in scenario.places.items() if p.patience is not None}


def incidence_matrix(
    scenario: Scenario, *, patience: bool = True
) -> tuple[list[str], list[str], np.ndarray]:
    """Return ``(rows, columns, C)``: rows are pools then job places (declaration order); columns
    are transitions, then sources, then (``patience``) one abandonment exit per place with
    patience, named ``PLACE.abandon``; ``C[i, j]`` = tokens column ``j`` puts into row ``i``
    minus the tokens it takes (integers). An exit takes 1 from its place and gives 1 to its
    ``abandon_to``, if any."""
    rows = [*scenario.pools, *scenario.places]
    exits = patience_exits(scenario) if patience else {}
    cols = [*scenario.transitions, *scenario.sources, *(f"{p}.abandon" for p in exits)]
    index = {name: i for i, name in enumerate(rows)}
    c = np.zeros((len(rows), len(cols)), dtype=np.int64)
    for j, t in enumerate(scenario.transitions.values()):
        for p, w in t.inputs.items():
            c[index[p], j] -= int(w)
        for p, w in t.outputs.items():
            c[index[p], j] += int(w)
    for k, s in enumerate(scenario.sources.values()):
        c[index[s.into], len(scenario.transitions) + k] += 1
    first_exit = len(scenario.transitions) + len(scenario.sources)
    for k, (p, to) in enumerate(exits.items()):
        c[index[p], first_exit + k] -= 1
        if to is not None:
            c[index[to], first_exit + k] += 1
    return rows, cols, c


def _normalise(values: list[int]) -> list[int]:
    g = reduce(math.gcd, (abs(v) for v in values if v), 0)
    return values if g <= 1 else [v // g for v in values]


def _support(y: list[int]) -> int:
    mask = 0
    for i, v in enumerate(y):
        if v:
            mask |= 1 << i
    return mask


def _nodes(mask: int):
    """The single-bit masks of the nodes in ``mask``, lowest first."""
    while mask:
        low = mask & -mask
        yield low
        mask ^= low


class _SupportIndex:
    """Distinct supports (bit masks) indexed by their lowest node: a support inside ``mask`` has
    its lowest node in ``mask``, so a subset query looks only at the buckets of ``mask``'s nodes
    instead of comparing ``mask`` with every support."""

    def __init__(self, masks=()):
        self.buckets: dict[int, set[int]] = {}
        for m in masks:
            self.add(m)

    def add(self, mask: int) -> None:
        self.buckets.setdefault(mask & -mask, set()).add(mask)

    def remove(self, mask: int) -> None:
        self.buckets[mask & -mask].remove(mask)

    def has_subset(self, mask: int, *, proper: bool = False) -> bool:
        """True when some indexed support lies inside ``mask`` (``proper``: other than
        ``mask`` itself)."""
        buckets = self.buckets
        for low in _nodes(mask):
            for m in buckets.get(low, ()):
                if m & mask == m and not (proper and m == mask):
                    return True
        return False


def _combine(j: int, pos_row, neg_row):
    """The non-negative combination of a row with a positive and a row with a negative entry in
    column ``j`` that zeroes it, divided by the gcd of its entries. Rows are ``(c, y, mask)``:
    ``c`` and ``y`` map column or node -> non-zero integer, ``mask`` is the support of ``y``."""
    cp, yp, mp = pos_row
    cn, yn, mn = neg_row
    fp, fn = -cn[j], cp[j]
    c = {}
    for k in cp.keys() | cn.keys():
        if k != j:
            v = fp * cp.get(k, 0) + fn * cn.get(k, 0)
            if v:
                c[k] = v
    # both y parts are >= 0 and fp, fn > 0: no entry of the union cancels
    y = {k: fp * yp.get(k, 0) + fn * yn.get(k, 0) for k in yp.keys() | yn.keys()}
    g = math.gcd(*c.values(), *y.values())
    if g > 1:
        c = {k: v // g for k, v in c.items()}
        y = {k: v // g for k, v in y.items()}
    return c, y, mp | mn


def _farkas(c: np.ndarray, max_rows: int) -> list[list[int]] | None:
    """Minimal-support semiflows of ``c`` (rows × columns), or None when the cap is exceeded.

    Each step eliminates one column (the one that creates the fewest new rows, the first among
    equals: the Martínez–Silva heuristic). The rows whose entry there is zero stay; each pair of a
    positive and a negative row gives a combination unless its support contains a staying row's
    support; of the combinations, those of minimal support stay (the first of equal supports).
    The rows are kept in order of support size, then age: the order the semiflows come out in.

    Rows are sparse and indexed: per column, which rows are positive or negative there (so a
    step reads only the rows it changes, and the counts that choose the next column are at
    hand); supports by node (:class:`_SupportIndex`). A staying row never loses its place to a
    combination: a combination's support contains the support of each of its two parents, and
    the rows before the step had minimal, distinct supports."""
    n_rows, n_cols = c.shape
    rows: dict[int, tuple] = {}  # age -> (remaining columns of C, the y part, support of y)
    col_pos: list[set[int]] = [set() for _ in range(n_cols)]
    col_neg: list[set[int]] = [set() for _ in range(n_cols)]
    n_pos = np.zeros(n_cols, dtype=np.int64)
    n_neg = np.zeros(n_cols, dtype=np.int64)
    supports = _SupportIndex()

    def enter(age: int, row) -> None:
        rows[age] = row
        for k, v in row[0].items():
            if v > 0:
                col_pos[k].add(age)
                n_pos[k] += 1
            else:
                col_neg[k].add(age)
                n_neg[k] += 1
        supports.add(row[2])

    def leave(age: int):
        row = rows.pop(age)
        for k, v in row[0].items():
            if v > 0:
                col_pos[k].discard(age)
                n_pos[k] -= 1
            else:
                col_neg[k].discard(age)
                n_neg[k] -= 1
        supports.remove(row[2])
        return row

    def in_order(ages) -> list[int]:
        return sorted(ages, key=lambda a: (rows[a][2].bit_count(), a))

    for i in range(n_rows):
        enter(i, ({int(j): int(c[i, j]) for j in np.flatnonzero(c[i])}, {i: 1}, 1 << i))
    age = n_rows
    done = np.zeros(n_cols, dtype=bool)
    for _ in range(n_cols):
        cost = n_pos * n_neg - n_pos - n_neg
        cost[done] = np.iinfo(np.int64).max
        j = int(np.argmin(cost))  # the first of the cheapest
        done[j] = True
        if not n_pos[j] and not n_neg[j]:
            continue  # every row is zero there: nothing changes
        pos = [leave(a) for a in in_order(col_pos[j])]
        neg = [leave(a) for a in in_order(col_neg[j])]
        # the support index now holds exactly the rows that stay
        staying = len(rows)
        combos = []
        for p in pos:
            for n in neg:
                # a combination whose support contains a staying row's support is never minimal
                if supports.has_subset(p[2] | n[2]):
                    continue
                combos.append(_combine(j, p, n))
                if staying + len(combos) > max_rows:
                    return None
        first: dict[int, tuple] = {}
        for row in combos:
            first.setdefault(row[2], row)
        among = _SupportIndex(first)
        for mask, row in first.items():
            if not among.has_subset(mask, proper=True):
                enter(age, row)
                age += 1
    return [[rows[a][1].get(i, 0) for i in range(n_rows)] for a in in_order(rows)]


def _lp_semiflow(c: np.ndarray, node: int, penalty: np.ndarray | None = None) -> np.ndarray | None:
    """A vertex of ``{y ≥ 0 : yᵀC = 0, y_node = 1}`` (a minimal-support semiflow through
    ``node``), or None when there is none."""
    n = c.shape[0]
    cost = np.ones(n) if penalty is None else penalty
    a_eq = np.vstack([c.T.astype(float), np.eye(n)[node]])
    b_eq = np.zeros(a_eq.shape[0])
    b_eq[-1] = 1.0
    res = linprog(cost, A_eq=a_eq, b_eq=b_eq, bounds=(0, None), method="highs")
    return res.x if res.status == 0 else None


def _to_integers(y: np.ndarray) -> list[int]:
    from fractions import Fraction

    fr = [Fraction(float(v)).limit_denominator(1000) if v > 1e-9 else Fraction(0) for v in y]
    lcm = reduce(lambda a, b: a * b // math.gcd(a, b), (f.denominator for f in fr), 1)
    return _normalise([int(f * lcm) for f in fr])


def _semiflow_rows(scenario: Scenario, max_rows: int) -> tuple[list[str], list[list[int]], bool]:
    names, _, c = incidence_matrix(scenario)
    found = _farkas(c, max_rows)
    if found is not None:
        return names, found, True
    # Fallback: one LP vertex per node that lies on a semiflow; each is a minimal-support
    # semiflow, but the list may miss some.
    flows: dict[int, list[int]] = {}
    for i in range(len(names)):
        y = _lp_semiflow(c, i)
        if y is not None:
            ints = _to_integers(y)
            flows.setdefault(_support(ints), ints)
    return names, list(flows.values()), False


def p_semiflows(scenario: Scenario, *, max_rows: int = DEFAULT_MAX_ROWS) -> list[dict[str, int]]:
    """All minimal-support P-semiflows of the net, each as ``{place or pool: weight}`` (weights
    are coprime positive integers; only the support is listed).

    The source columns make every place a source feeds (and everything upstream-tied to it) carry
    weight 0, so only closed token circuits, such as a pool and the places its agents visit,
    appear. The patience exits do the same to a place with patience and no ``abandon_to`` (and
    tie it to its ``abandon_to`` otherwise): a pool whose agents wait in such a place drops off
    (see :func:`patience_leaks`). If the enumeration needs more than ``max_rows`` intermediate rows, an
    :class:`InvariantWarning` is issued and the answer falls back to one minimal semiflow per
    place or pool that lies on any (found by linear programming), which may not be all of them.
    """
    names, flows, complete = _semiflow_rows(scenario, max_rows)
    if not complete:
        warnings.warn(
            f"{scenario.file}: more than {max_rows} intermediate rows while enumerating "
            "conservation invariants; listing one invariant per place or pool instead",
            InvariantWarning,
            stacklevel=2,
        )
    out = [{names[i]: v for i, v in enumerate(y) if v} for y in flows]
    order = {n: i for i, n in enumerate(names)}
    out.sort(key=lambda d: sorted(order[n] for n in d))
    return out


#: Row cap of the enumeration that :func:`uncovered_pools` tries before its LP.
COVERAGE_MAX_ROWS = 500


def uncovered_pools(scenario: Scenario) -> list[str]:
    """Pools that lie on no P-semiflow (their agents can leak or multiply), in declaration order.

    Every semiflow is a non-negative combination of the minimal-support ones (the extreme rays
    of the pointed cone ``{y ≥ 0 : yᵀC = 0}``), so a pool is covered exactly when one of those
    holds it. They are enumerated first (exact integers, no solver: validating a scenario needs
    no scipy.optimize); when that needs more than :data:`COVERAGE_MAX_ROWS` rows the answer
    comes from one LP instead, independent of any cap: maximise ``Σ w_r`` subject to
    ``w_r ≤ y_r``, ``w_r ≤ 1``, ``yᵀC = 0``, ``y ≥ 0``. The semiflows form a cone closed under
    addition, so at the optimum ``w_r = 1`` exactly for the pools that some semiflow covers.
    """
    pools = list(scenario.pools)
    if not pools:
        return []
    names, _, c = incidence_matrix(scenario)
    found = _farkas(c, COVERAGE_MAX_ROWS)
    if found is not None:
        covered = {names[i] for y in found for i, v in enumerate(y) if v}
        return [p for p in pools if p not in covered]
    return _uncovered_by_lp(pools, names, c)


def patience_leaks(scenario: Scenario) -> dict[str, list[str]]:
    """Pools that lose agents through patience exits: ``{pool: [place, ...]}``, pools in
    declaration order, each with the places with patience that lie on its semiflows once the
    exits are left out of the incidence matrix. These are the pools :func:`uncovered_pools`
    reports only because of the exits: an abandoning job in one of those places takes agents of
    the pool with it."""
    uncovered = uncovered_pools(scenario)
    exits = patience_exits(scenario)
    if not uncovered or not exits:
        return {}
    names, _, c = incidence_matrix(scenario, patience=False)
    found = _farkas(c, COVERAGE_MAX_ROWS)
    leaks: dict[str, list[str]] = {}
    for pool in uncovered:
        r = names.index(pool)
        if found is not None:
            flows = [y for y in found if y[r]]
        else:  # one minimal semiflow through the pool is enough to name a place
            y = _lp_semiflow(c, r)
            flows = [] if y is None else [_to_integers(y)]
        on = {names[i] for y in flows for i, v in enumerate(y) if v}
        places = [p for p in exits if p in on]
        if places:
            leaks[pool] = places
    return leaks


def leak_message(pool: str, places: list[str]) -> str:
    """One line saying that ``pool`` loses agents through the patience of ``places``."""
    if len(places) == 1:
        which = f"place {places[0]} has patience and its"
    else:
        which = f"places {', '.join(places)} have patience and their"
    return f"pool {pool} can lose agents: {which} abandoning jobs take the agent with them"


def _uncovered_by_lp(pools: list[str], names: list[str], c: np.ndarray) -> list[str]:
    """:func:`uncovered_pools` by its LP (rows ``names`` and incidence ``c`` as from
    :func:`incidence_matrix`)."""
    n, k = len(names), len(pools)
    pool_rows = [names.index(p) for p in pools]
    # variables: y (n), then w (k)
    a_eq = np.hstack([c.T.astype(float), np.zeros((c.shape[1], k))])
    a_ub = np.zeros((k, n + k))
    for i, r in enumerate(pool_rows):
        a_ub[i, r] = -1.0
        a_ub[i, n + i] = 1.0
    cost = np.concatenate([np.zeros(n), -np.ones(k)])
    bounds = [(0, None)] * n + [(0, 1)] * k
    res = linprog(
        cost,
        A_ub=a_ub,
        b_ub=np.zeros(k),
        A_eq=a_eq if a_eq.shape[0] else None,
        b_eq=np.zeros(a_eq.shape[0]) if a_eq.shape[0] else None,
        bounds=bounds,
        method="highs",
    )
    if res.status != 0:  # the zero vector is always feasible and w ≤ 1 bounds it: never expected
        from .errors import SolverError

        raise SolverError(f"pool coverage LP failed: {res.message}")
    w = res.x[n:]
    return [p for p, v in zip(pools, w) if v < 0.5]


def pool_invariant(
    scenario: Scenario, pool: str, *, max_rows: int = DEFAULT_MAX_ROWS
) -> dict[str, float]:
    """The semiflow used to locate the agents of ``pool``, normalised so that ``pool`` has weight
    1: ``{pool: 1.0, place: agents of pool held per token in place, ...}``.

    Prefers a minimal semiflow whose support holds no other pool (then the weights read directly
    as "agents of this pool per job in that place"); among several, the one of smallest support.
    Returns ``{}`` when the pool is on no semiflow (see :func:`uncovered_pools`).
    """
    if pool not in scenario.pools:
        raise KeyError(f"{pool!r} is not a pool")
    return _pool_invariant(scenario, pool, _semiflow_rows(scenario, max_rows))


def pool_invariants(
    scenario: Scenario, *, max_rows: int = DEFAULT_MAX_ROWS
) -> dict[str, dict[str, float]]:
    """:func:`pool_invariant` of every pool (the semiflows are enumerated once)."""
    rows = _semiflow_rows(scenario, max_rows)
    return {p: _pool_invariant(scenario, p, rows) for p in scenario.pools}


def _pool_invariant(scenario: Scenario, pool: str, rows) -> dict[str, float]:
    names, flows, complete = rows
    r = names.index(pool)
    pool_rows = {names.index(p) for p in scenario.pools}
    candidates = [y for y in flows if y[r] > 0]
    if not complete:
        # the fallback list may miss the best one: ask the LP directly, penalising other pools
        _, _, c = incidence_matrix(scenario)
        penalty = np.array(
            [1000.0 if i in pool_rows and i != r else 1.0 for i in range(len(names))]
        )
        y = _lp_semiflow(c, r, penalty)
        if y is not None:
            candidates.append(_to_integers(y))
    if not candidates:
        return {}

    def rank(y: list[int]) -> tuple[int, int]:
        others = sum(1 for i in pool_rows if i != r and y[i])
        return others, sum(1 for v in y if v)

    best = min(candidates, key=rank)
    return {names[i]: v / best[r] for i, v in enumerate(best) if v}
