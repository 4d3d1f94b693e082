"""A coefficient set computed in parts (sensor ranges and the element stage) equals the whole.

The parts are what the run spreads over the cluster (``sweep.run``); the
reference is :func:`kernels.coefficients.compute_coefficients` in one process —
the same arithmetic, so the arrays must be equal bit for bit (determinism of
the seeded Monte Carlo estimates, module notes of kernels.coefficients).
"""

from __future__ import annotations

import pickle
from dataclasses import replace

import numpy as np
import pytest

from luxsweep.kernels.coefficients import (
    SENSOR_PART,
    Settings,
    assemble,
    compute_coefficients,
    direct_part,
    reflected_part,
    solve_elements,
)
from luxsweep.kernels.geometry import parametric_room, sensor_grid

COARSE = Settings(sky_rays_per_patch=4, ground_rays=16, sensor_rays=16, element_rays=16,
                  subdivision=1, element_size=1.0, sun_spacing=6.0)


def _room():
    windows = [{"wall": "front", "width": 5.0, "sill": 0.9, "head": 2.7, "offset": 0.0,
                "glazing": "main"},
               {"wall": "left", "width": 2.0, "sill": 1.0, "head": 2.2, "offset": 0.0,
                "glazing": "side"}]
    return parametric_room(7.2, 8.0, 3.0, windows, {"floor": 0.2, "walls": 0.5, "ceiling": 0.7},
                           {"main": 2, "side": 1}, thickness=0.25,
                           obstructions=[{"x": 3.6, "y": -10.0, "width": 20.0, "depth": 3.0,
                                          "height": 8.0}])


def _parts(geometry, sensors, settings, size):
    n = sensors.shape[0]
    ranges = [(a, min(a + size, n)) for a in range(0, n, size)]
    solution = pickle.loads(pickle.dumps(solve_elements(geometry, n, settings)))  # as sent
    direct = [direct_part(geometry, sensors, a, b, settings) for a, b in ranges]
    reflected = [reflected_part(geometry, sensors, solution, a, b, settings) for a, b in ranges]
    return assemble(geometry, sensors, direct, reflected, settings,
                    element_crossed_twice=0 if solution is None else solution.crossed_twice)


@pytest.mark.parametrize(("spacing", "sun", "size", "adjoint"), [
    (0.5, 3.0, SENSOR_PART, True),  # 195 sensors, fewer than the sources: one part
    (0.25, 3.0, SENSOR_PART, True),  # 725 sensors in three parts, the last one short
    (0.25, 8.0, 2 * SENSOR_PART, False),  # fewer sources (coarse suns 8°): forward form
])
def test_parts_equal_the_whole(spacing, sun, size, adjoint):
    geometry, sensors = _room(), sensor_grid(7.2, 8.0, 0.8, spacing, 0.5)
    settings = replace(COARSE, reflected_sun_spacing=sun)
    assert solve_elements(geometry, sensors.shape[0], settings).adjoint is adjoint
    whole = compute_coefficients(geometry, sensors, settings)
    split = _parts(geometry, sensors, settings, size)
    assert split.key == whole.key
    for name, value in whole.to_arrays().items():
        np.testing.assert_array_equal(getattr(split, name), value, err_msg=name)


def test_part_ranges_are_checked():
    geometry, sensors = _room(), sensor_grid(7.2, 8.0, 0.8, 0.5, 0.5)
    with pytest.raises(ValueError, match="multiple"):
        direct_part(geometry, sensors, 1, 10, COARSE)
    with pytest.raises(ValueError, match="must lie"):
        direct_part(geometry, sensors, 0, sensors.shape[0] + 1, COARSE)
    parts = [direct_part(geometry, sensors, 0, 100, COARSE)]
    refl = [reflected_part(geometry, sensors, solve_elements(geometry, 195, COARSE), 0, 100,
                           COARSE)]
    with pytest.raises(ValueError, match="hold 100 sensors"):
        assemble(geometry, sensors, parts, refl, COARSE)
