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
