"""Electric lighting with daylight-linked control (kernels/lighting.py) on
hand-computable series: all bright, all dark, a ramp.

The control models are the usual ones (common practice; linear dimming between
a minimum power at a minimum light output and full power, IES Lighting Handbook,
from memory); the ramp's expected energies are integrals done by hand.
"""

import numpy as np
import pytest
from scipy import integrate

from luxsweep.kernels.lighting import (
    CONTROLS,
    annual_energy,
    control_illuminance,
    light_output_fraction,
    power_fraction,
)

TARGET = 500.0


@pytest.mark.parametrize(("control", "bright", "dark"), [
    ("none", 1.0, 1.0), ("on_off", 0.0, 1.0), ("dimming", 0.1, 1.0), ("dimming_off", 0.0, 1.0),
])
def test_all_bright_and_all_dark(control, bright, dark):
    # daylight above the target all year: only the uncontrolled and the never-off
    # dimmer (at its minimum power 0.1) use power; no daylight: full power for all
    hours = np.ones(2600)  # 10 occupied hours × 260 weekdays, 1 h steps
    e_bright = np.full(2600, 800.0)
    e_dark = np.zeros(2600)
    for e, share in ((e_bright, bright), (e_dark, dark)):
        f = power_fraction(e, TARGET, control, min_power=0.1, min_light=0.1)
        # 10 W/m² for 2,600 h is 26 kWh/m² at full power
        assert annual_energy((f * hours).sum(), 10.0) == pytest.approx(26.0 * share)


def test_ramp_matches_hand_integrals():
    # E rises linearly 0 … 2·target over the year (uniform in E). By hand:
    # on/off: lights on for E < target, half the time -> 0.5;
    # dimming with P_min = L_min = 0: mean of max(0, 1 − E/T) for E ~ U(0, 2T) = 1/4;
    # dimming with P_min = 0.2, L_min = 0 (never off): 0.2 + 0.8 × 1/4 on the lit half
    # plus 0.2 on the bright half -> 0.5 × (0.2 + 0.8 × 0.5) + 0.5 × 0.2 = 0.4.
    e = (np.arange(200_000) + 0.5) / 200_000 * 2 * TARGET
    assert power_fraction(e, TARGET, "on_off").mean() == pytest.approx(0.5, abs=1e-5)
    assert power_fraction(e, TARGET, "dimming", 0.0, 0.0).mean() == pytest.approx(0.25, 1e-6)
    assert power_fraction(e, TARGET, "dimming", 0.2, 0.0).mean() == pytest.approx(0.4, 1e-6)
    assert power_fraction(e, TARGET, "dimming_off", 0.2, 0.0).mean() == pytest.approx(0.3, 1e-5)
    # a dimmer that bottoms out at 20 % output (P_min = 0.1): an independent scipy
    # quadrature of the same piecewise-linear law over E in [0, 2T]
    def law(x):
        f = max(0.0, 1.0 - x / TARGET)
        return 0.1 if f <= 0.2 else 0.1 + 0.9 * (f - 0.2) / 0.8
    expected = integrate.quad(law, 0.0, 2 * TARGET, points=[0.8 * TARGET, TARGET])[0] / (
        2 * TARGET)
    assert power_fraction(e, TARGET, "dimming", 0.1, 0.2).mean() == pytest.approx(expected,
                                                                                  rel=1e-5)


def test_fractions_are_bounded_and_monotone_in_daylight():
    e = np.linspace(0, 3000, 301)
    for control in CONTROLS:
        f = power_fraction(e, TARGET, control, 0.15, 0.05)
        assert ((f >= 0) & (f <= 1)).all()
        assert (np.diff(f) <= 1e-12).all(), control  # more daylight never costs power
    assert light_output_fraction([0.0, 250.0, 500.0, 900.0], TARGET).tolist() == [
        1.0, 0.5, 0.0, 0.0]
    with pytest.raises(ValueError, match="on_off"):
        power_fraction(e, TARGET, "sometimes")


def test_control_point_is_the_grid_median_or_a_sensor():
    e = np.array([[[100.0, 900.0], [300.0, 100.0], [200.0, 500.0]]])  # (1, 3 sensors, 2 steps)
    np.testing.assert_array_equal(control_illuminance(e), [[200.0, 500.0]])
    np.testing.assert_array_equal(control_illuminance(e, sensor=1), [[300.0, 100.0]])


# --------------------------------------------------------------------------- a building


def test_median_sensor_is_fixed_per_space():
    # lower median of each space's values (rank ⌊(n−1)/2⌋), as a grid index
    from luxsweep.kernels.lighting import median_sensor

    values = np.array([[5.0, 1.0, 3.0, 9.0, 2.0, 4.0, 8.0],
                       [1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0]])
    space = np.array([0, 0, 0, 1, 1, 1, 1])
    # space 0: 1, 3, 5 -> 3 at sensor 2 (row 0); 1, 2, 3 -> 2 at sensor 1 (row 1)
    # space 1: 2, 4, 8, 9 -> lower median 4 at sensor 5; 4, 5, 6, 7 -> 5 at sensor 4
    np.testing.assert_array_equal(median_sensor(values, space), [[2, 5], [1, 4]])


def test_shading_rule_matches_the_sda_counts():
    # The lighting control reads the same shading state as the sDA counts (IES LM-83-12:
    # closed where more than 2 % of a space's sensors get more than 1000 lx direct sun):
    # the closed analysis steps per space equal kernels.metrics' `ana_shaded`.
    from luxsweep.kernels.metrics import MetricParams, StepMasks, accumulate, shading_closed

    rng = np.random.default_rng(4)
    n_s, n_t = 120, 300
    total = np.floor(rng.lognormal(6.0, 1.2, (2, n_s, n_t))).astype(np.float32)
    direct = np.where(rng.random(total.shape) < 0.03, total, 0).astype(np.float32)
    space = np.repeat([0, 1, 2], [50, 40, 30])
    masks = StepMasks(np.ones(n_t, bool), rng.random(n_t) < 0.6, np.ones(n_t, bool))
    counts = accumulate(None, total, direct, masks, MetricParams(), 0.3 * total, space=space)
    closed = shading_closed(direct, space)  # (2, 3, n_t)
    np.testing.assert_array_equal((closed & masks.analysis).sum(-1), counts.ana_shaded)
    assert 0 < closed.mean() < 1  # the rule both closes and opens here
    # 2 % of 50 sensors is 1: one sunlit sensor keeps it open, two close it (strictly more)
    d = np.zeros((50, 2), np.float32)
    d[:1, 0] = d[:2, 1] = 1500.0
    np.testing.assert_array_equal(shading_closed(d, np.zeros(50, int)), [[False, True]])


def test_control_daylight_takes_the_shaded_value_where_closed():
    from luxsweep.kernels.lighting import control_daylight

    total = np.arange(12.0).reshape(1, 3, 4)  # (batch, sensors, steps)
    shaded = -total
    closed = np.array([[[False, True, False, True], [True, False, False, False]]])
    got = control_daylight(total, np.array([2, 0]), closed, shaded)
    np.testing.assert_array_equal(got, [[[8.0, -9.0, 10.0, -11.0], [-0.0, 1.0, 2.0, 3.0]]])


def test_lighting_hours_add_over_chunks_and_dark_steps_are_full_power():
    # Σ F_P Δt is additive (the engine folds the year in blocks); a skipped night step is
    # E = 0, i.e. full power for every control (the lights top up from nothing)
    from luxsweep.kernels.lighting import lighting_hours

    rng = np.random.default_rng(7)
    e = rng.uniform(0, 900, (2, 2, 50))
    occ = rng.random(50) < 0.7
    args = (np.array([300.0, 500.0]), ["dimming", "on_off"], np.array([0.2, 0.1]),
            np.array([0.1, 0.1]))
    whole = lighting_hours(e, occ, 0.5, *args)
    parts = lighting_hours(e[..., :20], occ[:20], 0.5, *args) + lighting_hours(
        e[..., 20:], occ[20:], 0.5, *args)
    np.testing.assert_allclose(whole, parts, rtol=1e-12)
    dark = lighting_hours(np.zeros((1, 2, 6)), np.ones(6, bool), 0.5, *args)
    np.testing.assert_array_equal(dark, [[3.0, 3.0]])  # 6 steps of 0.5 h at full power
    # unoccupied steps cost nothing
    np.testing.assert_array_equal(lighting_hours(e, np.zeros(50, bool), 0.5, *args), 0.0)


def test_saving_against_no_control():
    from luxsweep.kernels.lighting import saving_percent

    # 26 kWh/m² without control, 6.5 with: 75 % saved; nothing occupied: no saving defined
    np.testing.assert_allclose(saving_percent([6.5, 26.0], [26.0, 26.0]), [75.0, 0.0])
    assert np.isnan(saving_percent(0.0, 0.0))


def test_study_file_controls_are_the_kernels():
    from luxsweep.sweep.config import LIGHTING_CONTROLS

    assert LIGHTING_CONTROLS == CONTROLS


def test_scaled_shading_rule_equals_the_rule_on_formed_series():
    # variants that scale one unit series (DESIGN §2.6): the order-statistic shortcut gives
    # exactly the LM-83 rule on each variant's formed float32 series, thresholds included
    from luxsweep.kernels.lighting import shading_closed_scaled
    from luxsweep.kernels.metrics import shading_closed

    rng = np.random.default_rng(11)
    unit = np.where(rng.random((2, 80, 70)) < 0.06,
                    rng.uniform(0, 4000, (2, 80, 70)), 0).astype(np.float32)  # (o, steps, S)
    unit[0, :5, :3] = np.float32(1000.0) / np.float32(0.5)  # fl(0.5 · x) = 1000: not above
    space = np.repeat([0, 1, 2], [50, 11, 9])
    tau = np.array([0.5, 0.37, 0.81], np.float32)
    got = shading_closed_scaled(unit, space, tau)
    formed = unit[:, None] * tau[:, None, None]  # (o, v, steps, S), float32 products
    want = shading_closed(formed.swapaxes(-1, -2), space)
    np.testing.assert_array_equal(got, want)
    assert 0 < got.mean() < 1
