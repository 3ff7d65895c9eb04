"""Whitt's fluid model of a many-server station with abandonment (Whitt 2006, Operations
Research 54(1):37–54), against its closed forms and hand derivations."""

from __future__ import annotations

import math

import pytest
from scipy import special, stats

from compare.formulas.whitt import WhittFluid, whitt_fluid
from fluid.distributions import Deterministic, Empirical, Exponential, Gamma, Uniform


def test_underloaded_station_has_no_queue():
    # Whitt (2006): λ <= sμ gives no queue, no abandonment, throughput λ
    result = whitt_fluid(8.0, 10, 1.0, Exponential(2.0))
    assert isinstance(result, WhittFluid)
    figures = (result.throughput, result.p_abandon, result.wait_served, result.queue)
    assert figures == (8.0, 0.0, 0.0, 0.0)
    assert result.utilisation == pytest.approx(0.8)
    assert not result.overloaded
    # exactly at capacity still counts as not overloaded (λ <= sμ)
    assert not whitt_fluid(10.0, 5, 0.5, None).overloaded


@pytest.mark.parametrize(
    "arrival_rate, servers, mean_hold, mean_patience",
    [(12.0, 10, 1.0, 2.0), (250.0, 100, 0.5, 0.25), (3.0, 1, 1.0, 10.0), (1000.0, 400, 2.0, 5.0)],
)
def test_exponential_patience_closed_forms(arrival_rate, servers, mean_hold, mean_patience):
    # references.md, Whitt (2006) with exponential patience θ: w = ln(λ/(sμ))/θ, q = (λ − sμ)/θ,
    # throughput sμ and P(Ab) = 1 − sμ/λ
    theta, capacity = 1 / mean_patience, servers / mean_hold
    result = whitt_fluid(arrival_rate, servers, mean_hold, Exponential(mean_patience).cdf)
    assert result.overloaded
    assert result.throughput == pytest.approx(capacity, rel=1e-12)
    assert result.p_abandon == pytest.approx(1 - capacity / arrival_rate, rel=1e-12)
    assert result.wait_served == pytest.approx(math.log(arrival_rate / capacity) / theta, rel=1e-10)
    assert result.queue == pytest.approx((arrival_rate - capacity) / theta, rel=1e-9)
    assert result.utilisation == 1.0


def test_uniform_patience_by_hand():
    # Derived by hand: λ = 12, s = 10, μ = 1, patience U[0, 3] so F(u) = u/3.
    # λ(1 − w/3) = 10  →  w = 3·(1 − 10/12) = 0.5;
    # q = λ∫₀^w (1 − u/3) du = 12·(0.5 − 0.5²/6) = 12·(0.5 − 1/24) = 5.5.
    result = whitt_fluid(12.0, 10, 1.0, Uniform(0.0, 3.0).cdf)
    assert result.wait_served == pytest.approx(0.5, rel=1e-12)
    assert result.queue == pytest.approx(5.5, rel=1e-12)
    assert result.p_abandon == pytest.approx(1 / 6, rel=1e-12)


def test_gamma_patience_against_scipy():
    # SciPy: w = gamma quantile at 1 − sμ/λ; q = λ·(w·(1 − F(w)) + E[X; X <= w]) (integration by
    # parts of ∫₀^w (1 − F)), and for a gamma(k, scale) the partial mean is
    # E[X; X <= w] = k·scale·P(k + 1, w/scale) (regularised incomplete gamma).
    patience = Gamma(2.0, 0.5)  # shape 4, scale 0.5
    shape, scale = 4.0, 0.5
    arrival_rate, servers, mean_hold = 30.0, 20, 1.0
    share = 1 - servers / mean_hold / arrival_rate
    w = stats.gamma.ppf(share, shape, scale=scale)
    partial_mean = shape * scale * special.gammainc(shape + 1, w / scale)
    q = arrival_rate * (w * (1 - share) + partial_mean)
    # the distribution object itself is accepted in place of its .cdf
    result = whitt_fluid(arrival_rate, servers, mean_hold, patience)
    assert result.wait_served == pytest.approx(w, rel=1e-9)
    assert result.queue == pytest.approx(q, rel=1e-9)


def test_step_patience_takes_the_quantile():
    # Derived by hand: deterministic patience 2 and λ = 12 > sμ = 10: the callers whose patience
    # runs out are exactly those still waiting at 2, so w = 2 and q = λ·2 = 24.
    result = whitt_fluid(12.0, 10, 1.0, Deterministic(2.0).cdf)
    assert result.wait_served == pytest.approx(2.0, rel=1e-12)
    assert result.queue == pytest.approx(24.0, rel=1e-9)
    # Empirical patience {0, 0, 1, 3}: F = 0.5 on [0, 1), 0.75 on [1, 3). With λ = 4, sμ = 1 the
    # abandoning share 0.75 is reached at w = 1 (the smallest solution of λ(1 − F(w)) = sμ on the
    # flat stretch); q = 4·∫₀^1 0.5 du = 2.
    result = whitt_fluid(4.0, 1, 1.0, Empirical((0.0, 0.0, 1.0, 3.0)).cdf)
    assert result.wait_served == pytest.approx(1.0, rel=1e-12)
    assert result.queue == pytest.approx(2.0, rel=1e-6)
    # Half the callers have zero patience and the needed share is 1/3 < 1/2: nobody waits.
    result = whitt_fluid(3.0, 2, 1.0, Empirical((0.0, 5.0)).cdf)
    assert (result.wait_served, result.queue) == (0.0, 0.0)
    assert result.p_abandon == pytest.approx(1 / 3)


def test_overloaded_without_patience():
    # no abandonment: the fluid queue grows without bound (Whitt 2006, F ≡ 0)
    result = whitt_fluid(12.0, 10, 1.0, None)
    assert result.overloaded
    assert (result.throughput, result.p_abandon) == (10.0, 0.0)
    assert result.wait_served == math.inf and result.queue == math.inf


def test_plain_callable_and_table():
    result = whitt_fluid(12.0, 10, 1.0, lambda t: min(1.0, max(0.0, t / 3.0)))
    assert result.wait_served == pytest.approx(0.5, rel=1e-12)
    frame = result.to_frame()
    names = ["throughput", "p_abandon", "wait_served", "queue", "utilisation"]
    assert list(frame["metric"]) == names


@pytest.mark.parametrize(
    "args",
    [(-1.0, 10, 1.0, None), (1.0, -1, 1.0, None), (1.0, 1, 0.0, None), (2.0, 1, 1.0, "not a cdf")],
)
def test_bad_input_is_refused(args):
    with pytest.raises(ValueError):
        whitt_fluid(*args)
