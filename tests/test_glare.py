"""Simplified daylight glare probability (kernels.glare) on hand-computable series."""

from __future__ import annotations

import numpy as np
import pytest

from luxsweep.kernels.glare import (
    CLASS_EDGES,
    dgp_simplified,
    glare_class_shares,
    glare_level,
)


def test_dgps_is_wienolds_linear_formula():
    # Wienold (2009): DGPs = 6.22e-5 Ev + 0.184; at Ev = 0 the offset, and the
    # vertical illuminances of the class edges follow by inverting the line
    ev = np.array([0.0, 1000.0, (0.35 - 0.184) / 6.22e-5, (0.45 - 0.184) / 6.22e-5])
    np.testing.assert_allclose(dgp_simplified(ev), [0.184, 0.2462, 0.35, 0.45], rtol=1e-12)
    # about 2,670 lx at the eye is the edge of perceptible glare (derived from the formula)
    assert 2668 < (0.35 - 0.184) / 6.22e-5 < 2670
    assert dgp_simplified(1e6) == 1.0  # a probability


def test_class_shares_of_a_ramp_count_each_class_and_skip_unoccupied_steps():
    # 100 occupied steps with DGP 0.30, 0.31, ... 1.29 (hand count per class: edges
    # belong to the class above: [0.30, 0.35) 5, [0.35, 0.40) 5, [0.40, 0.45) 5, rest 85)
    dgp = 0.30 + 0.01 * np.arange(100)
    dgp = np.round(dgp, 10)
    occupied = np.ones(100, bool)
    shares = glare_class_shares(dgp, occupied)
    np.testing.assert_allclose(shares, [0.05, 0.05, 0.05, 0.85])
    # unoccupied steps do not count, whatever their DGP
    both = np.concatenate([dgp, np.full(50, 0.9)])
    mask = np.concatenate([occupied, np.zeros(50, bool)])
    np.testing.assert_allclose(glare_class_shares(both, mask), shares)
    assert len(CLASS_EDGES) + 1 == shares.shape[-1]


@pytest.mark.parametrize(("above", "level"), [
    (0, 3),   # never above 0.35: high
    (5, 3),   # 5 % of the time above every limit: still allowed (EN 17037 5 % rule)
    (6, 0),   # 6 % above 0.45: none
])
def test_glare_level_allows_five_percent_of_occupied_time(above, level):
    dgp = np.full(100, 0.30)
    dgp[:above] = 0.5
    assert glare_level(dgp, np.ones(100, bool)) == level


def test_glare_level_steps_through_the_limits():
    # 10 % of the time at 0.42: above the high (0.35) and medium (0.40) limits,
    # not above the minimum's (0.45) -> level 1; at 0.38 -> level 2
    occupied = np.ones(200, bool)
    for value, level in ((0.42, 1), (0.38, 2), (0.34, 3), (0.46, 0)):
        dgp = np.full(200, 0.25)
        dgp[:20] = value
        assert glare_level(dgp, occupied) == level, value
    # several views at once
    views = np.stack([np.full(200, 0.25), np.full(200, 0.5)])
    assert glare_level(views, occupied).tolist() == [3, 0]
