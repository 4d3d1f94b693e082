"""Sampling error of the coefficients (kernels/coefficients.py ``overcast_error``) and the
element budget of the reflected part, against independent seeds and analytic references.

Small rooms and few rays only: the big rooms are in ``benchmarks/bench_scaling.py``.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate

from luxsweep.kernels.coefficients import (
    Settings,
    _element_sizes,
    compute_coefficients,
    daylight_factor_error,
)
from luxsweep.kernels.errors import InputError
from luxsweep.kernels.geometry import parametric_room, sensor_grid
from luxsweep.kernels.sky import overcast_sky_vector, patch_scheme
from luxsweep.kernels.transfer import mesh_elements

BLACK = {"floor": 0.0, "walls": 0.0, "ceiling": 0.0}
GREY = {"floor": 0.2, "walls": 0.5, "ceiling": 0.7}
# few rays, so that the sampling error is large enough to be measured against seeds
NOISY = dict(subdivision=1, sun_spacing=10.0, reflected_sun_spacing=10.0, sky_rays_per_patch=4,
             ground_rays=64, element_size=1.0, element_rays=64, sensor_rays=64)
SEEDS = range(16)


def _daylight_factors(geo, sensors, ground=0.2, **settings):
    """DF [%] and its estimated standard error [%] per seed, (n_seeds, n_sensors) each."""
    df, se = [], []
    for seed in SEEDS:
        c = compute_coefficients(geo, sensors, Settings(**{**NOISY, **settings, "seed": seed}))
        v = overcast_sky_vector(patch_scheme(c.subdivision), ground)
        df.append(100.0 * (c.sky_direct[0].astype(float) + c.sky_reflected[0]) @ v)
        se.append(daylight_factor_error(c, ground, np.ones((1, 1)))[0])
    return np.array(df), np.array(se)


def _roof_room():
    windows = [{"wall": "roof", "width": 1.2, "length": 1.6, "x": 2.0, "y": 2.5,
                "glazing": "main"}]
    geo = parametric_room(4.0, 5.0, 3.0, windows, BLACK, {"main": 0})
    return geo, sensor_grid(4.0, 5.0, 0.8, 0.5, 0.5)


def test_estimated_error_matches_the_scatter_over_seeds_direct_part():
    # Black room with an open roof opening (direct part only): the batch-means estimate of
    # each sensor's standard error (4 independent sub-samples; Law & Kelton 2000, §9.5.3)
    # against the standard deviation of the daylight factor over 16 independent seeds.
    # Both are noisy per sensor (3 and 15 degrees of freedom), so they are compared as root
    # mean squares over the 63 sensors; the ratio must lie in [0.7, 1.4] (the bound;
    # the expected spread of the ratio at these degrees of freedom is a few per cent).
    geo, sensors = _roof_room()
    df, se = _daylight_factors(geo, sensors)
    assert np.all(df.mean(axis=0) > 0)
    ratio = np.sqrt(np.mean(se**2)) / np.sqrt(np.mean(df.std(axis=0, ddof=1) ** 2))
    assert 0.7 <= ratio <= 1.4, ratio


def test_estimated_error_covers_the_gather_of_the_reflected_part():
    # Grey room lit through a front window: the daylight factor includes the reflected part,
    # whose sensor gather is sub-sampled like the direct rays; the element transfer's own
    # noise (shared by neighbouring sensors) is not in the estimate, so with the same rays
    # per element as per sensor the estimate may fall somewhat below the total scatter.
    # Root-mean-square ratio over the sensors within [0.7, 1.4] (issue bound).
    windows = [{"wall": "front", "width": 2.0, "sill": 0.9, "head": 2.1, "offset": 0.0,
                "glazing": "main"}]
    geo = parametric_room(4.0, 4.0, 2.7, windows, GREY, {"main": 2})
    sensors = sensor_grid(4.0, 4.0, 0.8, 1.0, 0.5)
    df, se = _daylight_factors(geo, sensors, element_rays=256)
    ratio = np.sqrt(np.mean(se**2)) / np.sqrt(np.mean(df.std(axis=0, ddof=1) ** 2))
    assert 0.7 <= ratio <= 1.4, ratio


def test_errors_against_an_analytic_daylight_factor():
    # The roof opening's daylight factor under the CIE overcast sky (Moon & Spencer 1942,
    # L = Lz (1 + 2 sin α)/3, E_h = 7π Lz/9), black room and black ground, by
    # scipy.integrate.dblquad of L cos θ_s cos θ_o / r² over the opening (independent of
    # patches and rays). The discrete patch sky differs from the continuous one by 0.1 %
    # at MF1 (kernels.sky.overcast_sky_vector notes), far below the noise here.
    # The root mean square of the actual errors (estimate − exact, over sensors and seeds)
    # against that of the estimated standard errors: ratio in [0.7, 1.4] (issue bound).
    # And no bias: the mean over the 16 seeds is within 4 estimated standard errors of
    # the mean (sqrt(Σ se²) / 16) of the exact value at 95 % of the sensors.
    geo, sensors = _roof_room()
    df, se = _daylight_factors(geo, sensors, ground=0.0, sky_rays_per_patch=16)
    h, (x0, x1, y0, y1) = 3.0 - 0.8, (1.4, 2.6, 1.7, 3.3)

    def exact(px, py):
        def integrand(y, x):
            r = np.array([x - px, y - py, h])
            d = np.sqrt(r @ r)
            lum = (1 + 2 * h / d) / 3 / (7 * np.pi / 9)
            return lum * (h / d) ** 2 / d**2
        return 100.0 * integrate.dblquad(integrand, x0, x1, y0, y1, epsabs=1e-12)[0]

    ref = np.array([exact(px, py) for px, py in sensors[:, :2]])
    ratio = np.sqrt(np.mean(se**2)) / np.sqrt(np.mean((df - ref) ** 2))
    assert 0.7 <= ratio <= 1.4, ratio
    bias = np.abs(df.mean(axis=0) - ref) / (np.sqrt((se**2).sum(axis=0)) / len(SEEDS))
    assert np.mean(bias < 4.0) >= 0.95, np.sort(bias)[-5:]


def test_target_error_chooses_more_rays():
    # A target relative error below the one the given rays reach: the ray counts grow by
    # (error / target)², and the 95th percentile of the new estimate is near the target
    # (an estimate itself: within 1.5× of it).
    geo, sensors = _roof_room()
    base = compute_coefficients(geo, sensors, Settings(**NOISY))
    v = overcast_sky_vector(patch_scheme(1), 0.2)
    df = 100.0 * base.sky_direct[0].astype(float) @ v
    rel = daylight_factor_error(base, 0.2, np.ones((1, 1)))[0] / df
    target = float(np.percentile(rel, 95)) / 3.0
    c = compute_coefficients(geo, sensors, Settings(**NOISY, target_error=target))
    assert c.settings.target_error == target and c.key != base.key
    rel = daylight_factor_error(c, 0.2, np.ones((1, 1)))[0] / (
        100.0 * c.sky_direct[0].astype(float) @ v)
    assert np.percentile(rel, 95) < 1.5 * target


def test_error_is_not_estimated_without_sub_samples():
    # An odd ray count cannot be split into sub-samples: the error is NaN (not estimated),
    # never a made-up zero.
    geo, sensors = _roof_room()
    c = compute_coefficients(geo, sensors[:3], Settings(**{**NOISY, "sky_rays_per_patch": 3}))
    assert np.all(np.isnan(c.overcast_error[..., 0]))


# ------------------------------------------------------------------ element budget


def _open_plan(width, depth):
    windows = [{"wall": wall, "width": width - 1.0, "sill": 0.9, "head": 2.7, "offset": 0.0,
                "glazing": "main"} for wall in ("front", "back")]
    return parametric_room(width, depth, 3.0, windows, GREY, {"main": 2})


@pytest.mark.parametrize("budget", [200, 800, 3000])
def test_element_budget_bounds_the_mesh(budget):
    # The interior element size grows until the mesh fits the budget, and stays at
    # element_size when the room fits already.
    geo = _open_plan(12.0, 8.0)
    active = ~geo.is_glazing & (geo.reflectance > 0)
    sizes = _element_sizes(geo, active, 0.5, budget)
    el = mesh_elements(geo.triangles, geo.reflectance, geo.exterior, sizes, mask=active)
    free = mesh_elements(geo.triangles, geo.reflectance, geo.exterior,
                         _element_sizes(geo, active, 0.5), mask=active)
    assert el.n <= budget
    if free.n <= budget:
        assert el.n == free.n
    else:
        assert el.n > 0.5 * budget  # not needlessly coarse
    assert el.area.sum() == pytest.approx(free.area.sum())


def test_coarser_budget_keeps_the_daylight_factor():
    # Reflected light is smooth: a budget of 250 elements (≈ 1.3 m) instead of the ~1,200 at
    # 0.5 m changes the mean daylight factor of a 10 × 6 m open plan by less than 2 % (the
    # issue's bound for the large rooms; measured −0.13 % and +0.01 % with seeds 0 and 1).
    geo = _open_plan(10.0, 6.0)
    sensors = sensor_grid(10.0, 6.0, 0.8, 1.0, 0.5)
    kw = dict(subdivision=1, sun_spacing=10.0, reflected_sun_spacing=10.0,
              sky_rays_per_patch=8, element_rays=256, sensor_rays=1024)
    v = overcast_sky_vector(patch_scheme(1), 0.2)
    out = []
    for budget in (250, 3000):
        c = compute_coefficients(geo, sensors, Settings(**kw, max_elements=budget))
        out.append((c.sky_direct[0].astype(float) + c.sky_reflected[0]) @ v)
    assert out[0].mean() == pytest.approx(out[1].mean(), rel=0.02)


def test_memory_limit_refuses_a_grid_whose_results_do_not_fit():
    # 2 GiB cannot hold the coefficient arrays of 60,000 sensors at the default 1.5° sun
    # points (~93 kB each): refused with the setting named, not silently exceeded.
    geo = _open_plan(6.0, 4.0)
    sensors = np.tile([3.0, 2.0, 0.8, 0.0, 0.0, 1.0], (60_000, 1))
    sensors[:, 0] += np.linspace(-2.0, 2.0, 60_000)
    with pytest.raises(InputError, match="memory_limit"):
        compute_coefficients(geo, sensors, Settings(memory_limit=2.0, sky_rays_per_patch=1,
                                                    ground_rays=4, sensor_rays=4))
