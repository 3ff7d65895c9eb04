"""The set-covering program of shift scheduling (Dantzig 1954) against a textbook instance and
instances solved by hand or by brute force."""

import itertools

import numpy as np
import pytest
from scipy.optimize import linprog

from compare.formulas.shift_cover import CoverError, cheapest_cover


def _days_off_matrix():
    """Column j: an employee who starts on day j and works five consecutive days (cyclic week)."""
    a = np.zeros((7, 7))
    for j in range(7):
        for k in range(5):
            a[(j + k) % 7, j] = 1
    return a


def test_post_office_days_off_problem():
    # Winston, "Operations Research: Applications and Algorithms", the post-office example
    # (from memory; the values recomputed in /work/shared/references.md): daily requirements
    # Mon-Sun 17, 13, 15, 19, 14, 16, 11, five consecutive days on and two off; integer optimum
    # 23 employees, LP optimum 67/3.
    a, need = _days_off_matrix(), [17, 13, 15, 19, 14, 16, 11]
    sol = cheapest_cover(a, need, np.ones(7))
    assert sol.cost == 23 and sum(sol.counts) == 23
    assert (a @ np.array(sol.counts) >= need).all()          # a cover, checked by hand's rule
    assert sol.lp_bound == pytest.approx(67 / 3, abs=1e-9)
    # independent certificate of optimality: the dual of the LP (linprog, a separate solve)
    # gives y >= 0 with every column's y-sum <= 1 and sum(need * y) = 67/3, so every cover
    # costs at least 67/3, hence (whole counts, unit costs) at least ceil(67/3) = 23
    dual = linprog(-np.array(need, float), A_ub=a.T, b_ub=np.ones(7), bounds=(0, None))
    y = dual.x
    assert (y >= -1e-12).all() and (a.T @ y <= 1 + 1e-9).all()
    assert float(np.dot(need, y)) == pytest.approx(67 / 3, abs=1e-9)


def test_hand_instance_two_short_shifts_beat_a_long_one():
    # intervals need 2, 3, 1; A covers {0, 1} and B {1, 2} at cost 1, C covers all at 1.5.
    # By hand: interval 0 needs x_A + x_C >= 2 and interval 2 x_B + x_C >= 1; with
    # x_C = 0 the cheapest is A = 2, B = 1 (cost 3, interval 1 gets 3); every plan with C
    # costs at least 1.5 + (rest): C = 1, A = 1, B = 1 costs 3.5, C = 2, B = 1 costs 4.
    a = [[1, 0, 1], [1, 1, 1], [0, 1, 1]]
    sol = cheapest_cover(a, [2, 3, 1], [1, 1, 1.5])
    assert sol.counts == (2, 1, 0) and sol.cost == 3 and sol.staff == (2, 3, 1)


def test_hand_instance_a_long_shift_when_cheaper():
    # four intervals each needing 1; two-interval shifts at 0, 1, 2 cost 1; a four-interval
    # shift costs 1.8: by hand the long one (1.8) beats the two short ones at 0 and 2 (2.0)
    a = [[1, 0, 0, 1], [1, 1, 0, 1], [0, 1, 1, 1], [0, 0, 1, 1]]
    assert cheapest_cover(a, [1, 1, 1, 1], [1, 1, 1, 1.8]).counts == (0, 0, 0, 1)
    assert cheapest_cover(a, [1, 1, 1, 1], [1, 1, 1, 2.2]).counts == (1, 0, 1, 0)


def test_against_brute_force_on_small_random_instances():
    # every whole count up to the largest requirement enumerated (an optimal cover never needs
    # more agents on one column than the largest requirement)
    rng = np.random.default_rng(3)
    for _ in range(25):
        a = (rng.random((5, 4)) < 0.5).astype(float)
        a[:, 0] = 1  # something covers every interval
        need = rng.integers(0, 4, size=5)
        cost = rng.integers(1, 6, size=4).astype(float)
        best = min(float(cost @ x) for x in itertools.product(range(need.max() + 1), repeat=4)
                   if (a @ np.array(x) >= need).all())
        assert cheapest_cover(a, need, cost).cost == pytest.approx(best)


def test_an_uncovered_interval_is_refused():
    with pytest.raises(CoverError, match="interval 1"):
        cheapest_cover([[1], [0]], [1, 2], [1.0])
    # a zero requirement needs no column
    assert cheapest_cover([[1], [0]], [1, 0], [1.0]).counts == (1,)


def test_shapes_are_checked():
    with pytest.raises(ValueError, match="one requirement per interval"):
        cheapest_cover([[1, 0]], [1, 1], [1, 1])
