"""Annual illuminance series (kernels/timeseries.py) on real coefficients and a real climate."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pvlib
import pytest

from luxsweep.kernels.climate import read_climate
from luxsweep.kernels.coefficients import Settings, compute_coefficients
from luxsweep.kernels.geometry import parametric_room, sensor_grid
from luxsweep.kernels.sky import overcast_sky_vector, patch_scheme, sky_vectors
from luxsweep.kernels.sun import SunPoints
from luxsweep.kernels.timeseries import daylight_factor, illuminance

TMY3 = Path(pvlib.__file__).parent / "data" / "723170TYA.CSV"  # Greensboro NC, bundled with pvlib
SETTINGS = Settings(subdivision=1, sun_spacing=5.0, reflected_sun_spacing=10.0,
                    sky_rays_per_patch=8, element_size=1.0, element_rays=64, sensor_rays=256)


@pytest.fixture(scope="module")
def case():
    """Two glazing sets (front, back), real TMY3 sky vectors for three orientations."""
    windows = [
        {"wall": "front", "width": 2.0, "sill": 0.9, "head": 2.1, "offset": 0.0,
         "glazing": "south"},
        {"wall": "back", "width": 1.5, "sill": 0.9, "head": 2.1, "offset": 0.0,
         "glazing": "north"},
    ]
    geo = parametric_room(4.0, 5.0, 2.7, windows, {"floor": 0.2, "walls": 0.5, "ceiling": 0.7},
                          {"south": 2, "north": 1})
    coeffs = compute_coefficients(geo, sensor_grid(4.0, 5.0, 0.8, 1.0, 0.5), SETTINGS)
    climate = read_climate(TMY3)
    sky = sky_vectors(climate, [90.0, 180.0, 270.0], patch_scheme(1),
                      SunPoints(SETTINGS.sun_spacing), steps=slice(4000, 4100))
    return coeffs, sky


def _reference(coeffs, sky, tau):
    """Plain per-orientation, per-step, per-set loop (DEVELOPERS.md coefficient definition)."""
    n_o, _, n_t = sky.sky.shape
    out = np.zeros((n_o, tau.shape[0], coeffs.n_sensors, n_t))
    direct = np.zeros_like(out)
    for o in range(n_o):
        for t in range(n_t):
            for g in range(tau.shape[1]):
                c_sky = coeffs.sky_direct[g].astype(float) + coeffs.sky_reflected[g]
                e = c_sky @ sky.sky[o, :, t].astype(float)
                d = np.zeros(coeffs.n_sensors)
                for k in range(3):
                    j, w = sky.sun_index[o, t, k], float(sky.sun_weight[o, t, k])
                    d += coeffs.sun_direct[g][:, j] * w
                    e += (coeffs.sun_direct[g][:, j] + coeffs.sun_reflected[g][:, j]) * w
                out[o, :, :, t] += tau[:, g, None] * e
                direct[o, :, :, t] += tau[:, g, None] * d
    return out, direct


def test_illuminance_matches_plain_loop(case):
    coeffs, sky = case
    tau = np.array([[0.7, 0.6], [0.35, 0.6], [0.7, 0.0]])
    total, direct = illuminance(coeffs, sky, tau)
    ref_total, ref_direct = _reference(coeffs, sky, tau)
    assert total.shape == (3, 3, coeffs.n_sensors, sky.n_steps) and total.dtype == np.float32
    assert np.any(direct > 100.0)  # the sun does reach some sensors in these hours
    # float32 products against float64 loops: 1e-4 relative plus 1e-3 lx
    assert np.allclose(total, ref_total, rtol=1e-4, atol=1e-3)
    assert np.allclose(direct, ref_direct, rtol=1e-4, atol=1e-3)
    assert np.all(direct <= total + 1e-3)


def test_linear_in_each_glazing_set(case):
    # DESIGN §2.6: light crosses exactly one window once, E = Σ_g τ_g E_g. Halving a set's
    # transmittance halves its contribution bit for bit (scaling by 2⁻¹ is exact in binary
    # floating point); superposition of sets holds to float32 rounding.
    coeffs, sky = case
    full, full_direct = illuminance(coeffs, sky, np.array([[0.62, 0.0]]))
    half, half_direct = illuminance(coeffs, sky, np.array([[0.31, 0.0]]))
    assert np.array_equal(half * 2, full)
    assert np.array_equal(half_direct * 2, full_direct)
    north, _ = illuminance(coeffs, sky, np.array([[0.0, 0.5]]))
    both, _ = illuminance(coeffs, sky, np.array([[0.62, 0.5]]))
    assert np.allclose(both, full + north, rtol=1e-6, atol=1e-4)


def test_daylight_factor(case):
    # Daylight factor = 100 E_in / E_h under the CIE overcast sky (CIE S 011, sky type 1
    # traditional form): against the plain coefficient · vector product; sets add linearly.
    coeffs, _ = case
    v = overcast_sky_vector(patch_scheme(1), 0.2)
    tau = np.array([[0.7, 0.6], [0.7, 0.0], [0.0, 0.6]])
    df = daylight_factor(coeffs, v, tau)
    c = coeffs.sky_direct.astype(float) + coeffs.sky_reflected
    expected = 100 * (0.7 * c[0] @ v + 0.6 * c[1] @ v)
    assert df.shape == (3, coeffs.n_sensors)
    assert np.allclose(df[0], expected, rtol=1e-9)
    assert np.allclose(df[0], df[1] + df[2], rtol=1e-12)
    assert 0.2 < df[0].mean() < 20  # a plausible side-lit room (common practice: 2–5 %)


def test_wrong_shapes_are_named(case):
    coeffs, sky = case
    with pytest.raises(ValueError, match="north"):
        illuminance(coeffs, sky, np.ones((2, 3)))
