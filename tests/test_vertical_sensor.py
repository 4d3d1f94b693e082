"""Sensors with any normal: a vertical plane in the open under the CIE overcast sky.

Views (glare at the eye) and façade studies need sensors that face a direction,
not the sky. The reference is analytic: under the CIE standard overcast sky,
L(a) = L_z (1 + 2 sin a) / 3 (Moon & Spencer 1942; CIE S 011), the horizontal
illuminance is E_h = 7 π L_z / 9 and an unobstructed vertical plane receives
from the sky E_v = 2 (L_z / 3) ∫₀^{π/2} (1 + 2 sin a) cos² a da = L_z (π/6 + 4/9),
so E_v / E_h = 39.6 % (the largest vertical sky component, a handbook figure —
from memory — that the integral reproduces). A uniform ground of reflectance ρ
adds ρ E_h / 2 (half the lower hemisphere seen, Lambertian ground).
"""

from __future__ import annotations

import numpy as np
import pytest

from luxsweep.kernels.coefficients import Settings, compute_coefficients
from luxsweep.kernels.geometry import parametric_room
from luxsweep.kernels.sky import overcast_sky_vector, patch_scheme
from luxsweep.kernels.timeseries import daylight_factor

SKY_PART = 100.0 * (np.pi / 6.0 + 4.0 / 9.0) / (7.0 * np.pi / 9.0)  # 39.6 %


def test_the_closed_form_is_the_handbook_figure():
    assert SKY_PART == pytest.approx(39.6, abs=0.05)


@pytest.mark.parametrize("rho", [0.0, 0.2])
def test_vertical_sensor_at_an_open_wall_gets_the_analytic_daylight_factor(rho):
    # a 40 m high, 40 m wide front wall that is one unglazed opening (panes 0:
    # transmittance 1 at every angle); the sensor sits just inside its middle,
    # facing out (-y), so its whole hemisphere is the open sky and ground
    windows = [{"wall": "front", "width": 39.9, "sill": 0.05, "head": 39.95, "offset": 0.0,
                "glazing": "open"}]
    geometry = parametric_room(40.0, 10.0, 40.0, windows,
                               {"floor": 0.2, "walls": 0.5, "ceiling": 0.7}, {"open": 0})
    sensors = np.array([[20.0, 1e-3, 20.0, 0.0, -1.0, 0.0],   # facing out
                        [20.0, 9.999, 20.0, 0.0, -1.0, 0.0]])  # at the back wall, facing out
    settings = Settings(subdivision=2, sky_rays_per_patch=64, ground_rays=4096,
                        max_elements=200, element_rays=64, sensor_rays=256)
    coeffs = compute_coefficients(geometry, sensors, settings)
    df = daylight_factor(coeffs, overcast_sky_vector(patch_scheme(2), rho), [[1.0]])[0]
    # 0.5 % of the value: patch discretisation and stratified sampling (measured
    # +0.13 % at rho 0, +0.02 % at rho 0.2; +0.6 % with the Tregenza sky); a
    # sensor that ignored its normal (treated as facing up) would read ~100 %, one
    # facing the wrong way ~14 % (what this tall room reflects)
    assert df[0] == pytest.approx(SKY_PART + 50.0 * rho, rel=5e-3)
    # 10 m back inside the room the opening subtends less: the sky part falls
    assert df[1] < df[0]
