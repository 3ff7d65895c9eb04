"""The sparse throughput LP, the dual-based bottleneck test and the indexed semiflow enumeration
against the implementations they replace (tests/fluid/reference_lp.py, kept verbatim):

* the sparse LP hands HiGHS the same problem as the dense one, so every rate, dual and offset
  is equal to the last bit;
* the limiting pools read from the marking duals (with a one-agent LP where a dual leaves the
  question open) are exactly the pools whose one more agent raises the output, found by one LP
  per pool (design.md §4.1: "LP dual of its marking, or a one-agent difference");
* the semiflows are the same list, in the same order.

On the shipped configs, the hand nets of tests/fluid/nets.py, the invented benchmark nets and
the random nets of the property tests (tests/fluid/test_lp.py, tests/desim/test_properties.py).
"""

from __future__ import annotations

import pathlib
import warnings

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fluid import load_scenario, load_scenario_text
from fluid.bench_nets import multi_skill_yaml
from fluid.invariants import _farkas, incidence_matrix
from fluid.loading import with_changes
from fluid.lp import ThroughputModel, lp_bottlenecks, throughput_lp
from fluid.structure import lp_applies

from . import nets
from .reference_lp import dense_throughput_lp, one_agent_bottlenecks, reference_farkas
from .test_lp import stage_chains
from ..desim import test_properties as properties

CONFIGS = sorted((pathlib.Path(__file__).resolve().parents[2] / "configs").glob("*.yaml"))
RANDOM = settings(max_examples=40, deadline=None, derandomize=True,
                  suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])


def _quiet(load, *args):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # uncovered pools are part of what is tested
        return load(*args)


def _hand_nets() -> list:
    texts = [nets.single_pool(3.0, 5, 2.0), nets.single_pool(2.0, 5, 2.0),
             nets.single_pool(2.5, 5, 2.0),  # exactly at capacity: a degenerate optimum
             nets.two_agents(), nets.two_agents(rate=1.25), nets.SAME_TIME_CYCLE, nets.LEAKY]
    texts += [nets.cold_transfer(b) for b in range(0, 7)]
    # front capacity f/3 against supervisors' s (answer rate), both at once at f = 3s
    texts += [nets.hand_over(f, s, rate) for f in (6, 9, 10, 12) for s in (1, 2, 3, 4)
              for rate in (2.0, 3.0, 5.0)]
    return [_quiet(nets.load, t) for t in texts]


def _bench_nets() -> list:
    out = []
    for k in (1, 2, 5):
        s = load_scenario_text(multi_skill_yaml(k, priorities=False), file=f"<bench {k}>")
        out.append(s)
        # the shared desk with enough staff, then every own desk short: other bottlenecks
        out.append(with_changes(s, {"pools.shared": 40}))
        out.append(with_changes(s, {f"pools.desk_{i}": 1 for i in range(k)}))
    return out


def _lp_nets() -> list:
    every = [load_scenario(p) for p in CONFIGS] + _hand_nets() + _bench_nets()
    return [s for s in every if lp_applies(s)]


LP_NETS = _lp_nets()
IDS = [f"{i}-{s.name.split(' (')[0]}" for i, s in enumerate(LP_NETS)]


# --- the sparse LP equals the dense one ---------------------------------------------------------


def _assert_same(a, b) -> None:
    assert a.rates == b.rates
    assert a.source_rates == b.source_rates
    assert a.marking_duals == b.marking_duals
    assert a.offsets == b.offsets
    assert a.objective == b.objective
    assert a.status == b.status


def _same_lp(s) -> None:
    _assert_same(throughput_lp(s), dense_throughput_lp(s))
    model = ThroughputModel(s)
    for pool, p in s.pools.items():
        for staff in (p.staff + 1, 0.37 * p.staff):
            # one model re-solved at other staff = a fresh (dense) LP built for that staff
            _assert_same(model.solve({pool: staff}), dense_throughput_lp(s, staff={pool: staff}))
    ending = {q: (1.0 if s.ends_job(q) else 0.0) for q in s.transitions}
    _assert_same(throughput_lp(s, weights=ending), dense_throughput_lp(s, weights=ending))


@pytest.mark.parametrize("s", LP_NETS, ids=IDS)
def test_sparse_lp_equals_the_dense_lp(s):
    _same_lp(s)


@RANDOM
@given(stage_chains())
def test_sparse_lp_equals_the_dense_lp_on_random_nets(text):
    _same_lp(nets.load(text))


# --- bottlenecks from the duals equal the one-agent differences ---------------------------------


def _same_bottlenecks(s) -> None:
    found = lp_bottlenecks(s)
    sol, output, limiting = one_agent_bottlenecks(s)
    assert found.limiting == limiting
    assert found.output == output
    _assert_same(found.solution, sol)
    # only pools with a dual above the certain bound needed their own LP
    assert set(found.limiting) <= set(found.confirmed) <= set(s.pools)


@pytest.mark.parametrize("s", LP_NETS, ids=IDS)
def test_dual_bottlenecks_equal_one_agent_differences(s):
    _same_bottlenecks(s)


@RANDOM
@given(stage_chains())
def test_dual_bottlenecks_equal_one_agent_differences_on_random_chains(text):
    _same_bottlenecks(nets.load(text))


@RANDOM
@given(properties.nets(patience=True))
def test_dual_bottlenecks_equal_one_agent_differences_on_random_service_nets(net):
    s = _quiet(properties.load, net)
    if lp_applies(s):
        _same_bottlenecks(s)


def test_a_pool_at_exactly_its_capacity_is_not_limiting():
    # λ = N/h = 2.5: one more agent changes nothing, whatever dual the degenerate optimum gives
    found = lp_bottlenecks(nets.load(nets.single_pool(2.5, 5, 2.0)))
    assert found.limiting == ()


def test_the_duals_settle_the_pools_that_do_not_limit():
    # benchmark net with 5 classes: only the shared desk limits (its dual is positive and one
    # more agent confirms it); the five own desks have zero duals and need no LP of their own
    s = load_scenario_text(multi_skill_yaml(5, priorities=False))
    found = lp_bottlenecks(s)
    assert found.limiting == ("shared",)
    assert found.confirmed == ("shared",)


# --- the semiflow enumeration ---------------------------------------------------------------------


def _same_semiflows(c: np.ndarray, caps=(0, 1, 3, 10, 500, 5000)) -> None:
    for cap in caps:
        assert _farkas(c, cap) == reference_farkas(c, cap), cap


@pytest.mark.parametrize("s", [load_scenario(p) for p in CONFIGS] + _hand_nets() + _bench_nets()
                         + [_quiet(nets.load, nets.MULTIPLYING), nets.load(nets.overflow()),
                            nets.load(nets.priority_desk(1.0, 3.0))])
def test_semiflows_equal_the_reference(s):
    _same_semiflows(incidence_matrix(s)[2])


@RANDOM
@given(stage_chains())
def test_semiflows_equal_the_reference_on_random_chains(text):
    _same_semiflows(incidence_matrix(nets.load(text))[2])


@RANDOM
@given(properties.nets(patience=True))
def test_semiflows_equal_the_reference_on_random_service_nets(net):
    _same_semiflows(incidence_matrix(_quiet(properties.load, net))[2])


@settings(max_examples=300, deadline=None, derandomize=True)
@given(st.integers(2, 9).flatmap(lambda r: st.integers(1, 10).flatmap(
    lambda k: st.lists(st.lists(st.sampled_from([-2, -1, 0, 0, 0, 1, 1, 2]), min_size=k,
                                max_size=k), min_size=r, max_size=r))))
def test_semiflows_equal_the_reference_on_random_matrices(entries):
    # any integer matrix, not only incidence matrices of valid nets: weights above 1, leaks,
    # several semiflows through one node
    _same_semiflows(np.array(entries, dtype=np.int64), caps=(3, 20, 5000))
