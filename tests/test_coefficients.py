"""Coefficient sets (kernels/coefficients.py) against analytic and independent references.

Every physics check names its outside reference beside the assertion.
"""

from __future__ import annotations

import json
import pickle

import numpy as np
import pytest
from scipy import integrate

from luxsweep.kernels.coefficients import (
    CoefficientSet,
    Settings,
    coefficient_key,
    compute_coefficients,
)
from luxsweep.kernels.geometry import parametric_room, sensor_grid
from luxsweep.kernels.glazing import relative_transmittance
from luxsweep.kernels.raytrace import Scene
from luxsweep.kernels.sky import luminance_cie, overcast_sky_vector, patch_scheme, sample_directions
from luxsweep.kernels.sun import SunPoints, direction
from luxsweep.kernels.timeseries import daylight_factor
from luxsweep.kernels.transfer import (
    factor_element_parallel_rectangle,
    factor_element_perpendicular_rectangle,
)

BLACK = {"floor": 0.0, "walls": 0.0, "ceiling": 0.0}
GREY = {"floor": 0.2, "walls": 0.5, "ceiling": 0.7}
# direct-sky accuracy settings for the 1 % checks; sun points coarse (not under test there)
FINE_SKY = Settings(sky_rays_per_patch=256, sun_spacing=6.0, reflected_sun_spacing=6.0)
QUICK = Settings(sun_spacing=6.0, reflected_sun_spacing=6.0)


def _front_window(width=5.0, sill=0.9, head=2.7, panes=0, offset=0.0):
    return [{"wall": "front", "width": width, "sill": sill, "head": head, "offset": offset,
             "glazing": "main"}], {"main": panes}


def _uniform_sky(scheme) -> np.ndarray:
    """L_j Ω_j of a uniform sky of unit luminance (ground dark)."""
    return np.concatenate([scheme.solid_angle, [0.0]])


# ------------------------------------------------------------------ direct sky, analytic


def test_roof_opening_uniform_sky_matches_configuration_factor():
    # Black room, open (panes 0) 1.2 × 1.6 m roof opening, uniform sky L = 1: the
    # illuminance is π L F with F the configuration factor from a horizontal differential
    # element to the parallel rectangle (Howell catalogue, element to parallel rectangle
    # with the normal through a corner; other positions by superposition — F is odd in
    # each side length). Required within 1 %.
    windows = [{"wall": "roof", "width": 1.2, "length": 1.6, "x": 2.0, "y": 2.5,
                "glazing": "main"}]
    geo = parametric_room(4.0, 5.0, 3.0, windows, BLACK, {"main": 0})
    pts = np.array([[2.0, 2.5], [1.0, 1.0], [3.5, 4.5], [2.3, 0.6]])
    sensors = np.column_stack([pts, np.full(4, 0.8), np.zeros((4, 2)), np.ones(4)])
    c = compute_coefficients(geo, sensors, FINE_SKY)
    assert np.all(c.sky_reflected == 0) and np.all(c.sun_reflected == 0)  # black room
    e = c.sky_direct[0].astype(float) @ _uniform_sky(patch_scheme(c.subdivision))
    x0, x1, y0, y1, h = 1.4, 2.6, 1.7, 3.3, 3.0 - 0.8
    for k, (px, py) in enumerate(pts):
        f = sum(sx * sy * factor_element_parallel_rectangle(x - px, y - py, h)
                for x, sx in ((x1, 1), (x0, -1)) for y, sy in ((y1, 1), (y0, -1)))
        assert e[k] == pytest.approx(np.pi * f, rel=0.01), (k, e[k], np.pi * f)


def test_vertical_opening_uniform_sky_matches_configuration_factor():
    # Black room, open 3 × 1.5 m front opening (sill 0.9 m): a horizontal element at
    # 0.8 m sees it as a rectangle in a perpendicular plane (Howell catalogue, element
    # to perpendicular rectangle, superposed: [0.1 m, 1.6 m] above the element's plane,
    # two x-extents). Uniform sky L = 1 gives E = π F. Required within 1 %.
    windows, panes = _front_window(width=3.0, sill=0.9, head=2.4)
    geo = parametric_room(5.0, 6.0, 3.0, windows, BLACK, panes)
    pts = np.array([[2.5, 0.6], [1.0, 1.5], [4.2, 3.0], [2.5, 5.0]])
    sensors = np.column_stack([pts, np.full(4, 0.8), np.zeros((4, 2)), np.ones(4)])
    c = compute_coefficients(geo, sensors, FINE_SKY)
    e = c.sky_direct[0].astype(float) @ _uniform_sky(patch_scheme(c.subdivision))
    x0, x1 = 1.0, 4.0
    for k, (px, py) in enumerate(pts):
        def f(h, px=px, py=py):
            return (factor_element_perpendicular_rectangle(x1 - px, py, h)
                    - factor_element_perpendicular_rectangle(x0 - px, py, h))
        exact = np.pi * (f(2.4 - 0.8) - f(0.9 - 0.8))
        assert e[k] == pytest.approx(exact, rel=0.01), (k, e[k], exact)


def test_overcast_sky_component_matches_scipy_integration():
    # CIE overcast sky component (Moon & Spencer 1942, L = Lz (1 + 2 sin α)/3, E_h = 7πLz/9)
    # of a side window, against scipy.integrate.dblquad of L cos θ_s cos θ_w / r² over the
    # window's area (independent of patches and rays), with double glazing's relative
    # angular transmittance inside the integrand. Required within 1 %.
    windows, panes = _front_window(width=5.0, sill=0.9, head=2.7, panes=2)
    geo = parametric_room(7.2, 8.0, 3.0, windows, BLACK, panes)
    pts = np.array([[0.6, 0.5], [3.6, 1.0], [6.1, 2.0], [5.1, 4.0], [2.0, 7.0]])
    sensors = np.column_stack([pts, np.full(len(pts), 0.8), np.zeros((len(pts), 2)),
                               np.ones(len(pts))])
    c = compute_coefficients(geo, sensors, FINE_SKY)
    v = overcast_sky_vector(patch_scheme(c.subdivision), 0.0)
    e = c.sky_direct[0].astype(float) @ v

    def reference(p):
        def integrand(z, x):
            r = np.array([x - p[0], -p[1], z - 0.8])
            d = np.sqrt(r @ r)
            lum = (1 + 2 * r[2] / d) / 3 / (7 * np.pi / 9)
            cos_w = p[1] / d
            tau = relative_transmittance(np.array([cos_w]), 2)[0]
            return lum * tau * (r[2] / d) * cos_w / d**2
        return integrate.dblquad(integrand, 1.1, 6.1, 0.9, 2.7, epsabs=1e-11)[0]

    for k, p in enumerate(pts):
        assert e[k] == pytest.approx(reference(p), rel=0.01), (k, e[k], reference(p))


def test_exterior_obstruction_hides_low_sky():
    # A 12 m high, 40 m wide box 4 m in front of the window hides, for a sensor 2 m from the
    # window, every patch whose top is below atan((12 - 0.8) / 6) = 61.8° in azimuths
    # within ±70° of the façade normal (geometry, common practice: obstruction angle).
    windows, panes = _front_window(width=5.0, sill=0.9, head=2.7)
    geo = parametric_room(7.2, 8.0, 3.0, windows, GREY, panes,
                          obstructions=[{"x": 3.6, "y": -24.0, "width": 40.0, "depth": 40.0,
                                         "height": 12.0}])
    sensors = np.array([[3.6, 2.0, 0.8, 0, 0, 1.0]])
    c = compute_coefficients(geo, sensors, QUICK)
    sch = patch_scheme(c.subdivision)
    az = (0.5 * (sch.azimuth_low + sch.azimuth_high) - 180.0 + 180.0) % 360.0 - 180.0
    hidden = (sch.altitude_high < 55.0) & (np.abs(np.abs(az) - 180.0) < 50.0)
    assert hidden.sum() > 20
    assert np.all(c.sky_direct[0, 0, :-1][hidden] == 0)
    # ... but the obstruction face, lit by the sky, sends light in (exterior elements)
    assert c.sky_reflected[0, 0, :-1][hidden].sum() > 0


# ------------------------------------------------------------------ handbook formula


@pytest.mark.slow
def test_average_daylight_factor_against_handbook_formula():
    # Average daylight factor DF = T A_w θ / (A (1 − R²)) [%] (Lynes 1979; Crisp & Littlefair
    # 1984, as given in BRE guidance — from memory), T = 1 for an open window, θ = 90° for
    # an unobstructed sky. The formula is an empirical fit that assumes the working plane
    # receives twice the room-mean first-hit flux density; for this room exact geometry
    # (our direct component, itself checked against Howell and scipy above) gives about
    # three times, so the formula sits below a full calculation: we measured ratios of
    # 1.3–1.6 over the reflectance sets below. The test asserts the ratio lies in
    # [1.0, 1.75] and that DF rises with reflectance at least as the formula's
    # 1/(1 − R²) does on the reflected part. Ground ρ = 0.1: the formula's θ/2 = 45 % of
    # E_h entering (vs 39.6 % for the sky alone) corresponds to a dark ground (from memory).
    width, depth, height, ww, sill, head = 6.0, 4.5, 3.0, 4.0, 0.9, 2.4
    windows, panes = _front_window(width=ww, sill=sill, head=head)
    sensors = sensor_grid(width, depth, 0.8, 0.25, 0.125)
    area = 2 * (width * depth + width * height + depth * height)
    a_w = ww * (head - sill)
    settings = Settings(sun_spacing=10.0, reflected_sun_spacing=10.0, sky_rays_per_patch=4,
                        sensor_rays=1024)
    ours, formula = [], []
    for refl in ({"floor": 0.1, "walls": 0.3, "ceiling": 0.5}, GREY,
                 {"floor": 0.4, "walls": 0.8, "ceiling": 0.85}):
        geo = parametric_room(width, depth, height, windows, refl, panes)
        c = compute_coefficients(geo, sensors, settings)
        df = daylight_factor(c, overcast_sky_vector(patch_scheme(c.subdivision), 0.1),
                             np.ones((1, 1)))
        r_mean = (width * depth * (refl["floor"] + refl["ceiling"])
                  + (area - 2 * width * depth - a_w) * refl["walls"]) / area
        ours.append(df.mean())
        formula.append(a_w * 90.0 / (area * (1 - r_mean**2)))
    ratio = np.array(ours) / np.array(formula)
    assert np.all((ratio > 1.0) & (ratio < 1.75)), ratio
    assert ours[0] < ours[1] < ours[2]


# ------------------------------------------------------------------ invariances


@pytest.mark.slow
def test_scaling_the_room_leaves_daylight_factors_unchanged():
    # Daylight factors are ratios of illuminances, invariant under a uniform scaling of the
    # geometry (radiative transfer has no length scale; common practice for scale models).
    # The direct part uses the same ray directions at both scales (equal to float rounding);
    # the reflected part is meshed at the same element size at both scales, so it differs
    # by sampling noise (measured scatter 0.7 % per sensor at the default rays): 4 % of the
    # reflected part per sensor (about 5 σ), 2 % on the mean.
    windows, panes = _front_window(width=2.5, sill=0.9, head=2.1)
    sensors = sensor_grid(4.0, 5.0, 0.8, 1.0, 0.5)
    out = []
    for s in (1.0, 2.0):
        win = [{**windows[0], "width": 2.5 * s, "sill": 0.9 * s, "head": 2.1 * s}]
        geo = parametric_room(4.0 * s, 5.0 * s, 2.7 * s, win, GREY, panes)
        sens = sensors.copy()
        sens[:, :3] *= s
        c = compute_coefficients(geo, sens, QUICK)
        v = overcast_sky_vector(patch_scheme(c.subdivision), 0.2)
        out.append((c.sky_direct[0].astype(float) @ v, c.sky_reflected[0].astype(float) @ v))
    (d1, r1), (d2, r2) = out
    assert np.allclose(d1, d2, rtol=1e-5, atol=1e-7)
    assert np.allclose(r1, r2, rtol=0.04)
    assert r2.mean() == pytest.approx(r1.mean(), rel=0.02)


def test_square_room_rotation_gives_same_centre_illuminance():
    # A square room with identical windows on all four walls is symmetric under 90°
    # rotations: under a CIE clear sky (ISO 15469 type 12) the centre illuminance must not
    # depend on the orientation 0/90/180/270 (symmetry; common practice). The rotated skies
    # sample different patches' coefficients, so they differ by sampling noise: 1 %.
    windows = [{"wall": w, "width": 2.0, "sill": 0.9, "head": 2.1, "offset": 0.0,
                "glazing": "main"} for w in ("front", "back", "left", "right")]
    geo = parametric_room(5.0, 5.0, 2.7, windows, GREY, {"main": 2})
    sensors = np.array([[2.5, 2.5, 0.8, 0, 0, 1.0]])
    c = compute_coefficients(geo, sensors, FINE_SKY)
    sch = patch_scheme(c.subdivision)
    samples = sample_directions(sch, 16, seed=5)  # patch-mean luminance
    sun = direction(150.0, 35.0)  # site frame
    values = []
    for orientation in (0.0, 90.0, 180.0, 270.0):
        # building azimuth A_b = A_site − φ + 180 (DEVELOPERS.md frames) ⇒ rotate back
        turn = np.radians(orientation - 180.0)
        rot = np.array([[np.cos(turn), np.sin(turn), 0], [-np.sin(turn), np.cos(turn), 0],
                        [0, 0, 1]])
        site = samples.reshape(-1, 3) @ rot.T
        lum = luminance_cie(12, site, sun).reshape(sch.n_patches, -1).mean(axis=1)
        vec = np.concatenate([lum * sch.solid_angle, [0.0]])
        values.append(float((c.sky_direct[0, 0] + c.sky_reflected[0, 0]).astype(float) @ vec))
    # the sky itself is not symmetric: the orientations really do move the sun
    assert np.ptp(values) / np.mean(values) < 0.01, values


# ------------------------------------------------------------------ sun points


def test_direct_sun_interpolation_against_exact_ray_tracing():
    # Direct sun from barycentrically interpolated sun-point coefficients (default 1°
    # spacing) against an exact ray per sun position (Embree via Scene, relative
    # transmittance of the glazing module): 2,000 random suns above the horizon, errors
    # as a fraction of E_dn. Shadow edges move by up to one sun-point spacing, so single
    # suns can be far off at an edge; the mean must stay below 1 % of E_dn and the
    # 95th percentile below 2 % (printed for the report).
    windows, panes = _front_window(width=3.0, sill=0.9, head=2.4, panes=2)
    geo = parametric_room(5.0, 6.0, 3.0, windows, BLACK, panes,
                          overhang={"depth": 0.6, "gap": 0.1})
    sensors = sensor_grid(5.0, 6.0, 0.8, 1.0, 0.5)[::3]
    c = compute_coefficients(geo, sensors, Settings())
    rng = np.random.default_rng(11)
    z = rng.uniform(0.02, 1.0, 2000)
    phi = rng.uniform(-np.pi, np.pi, 2000)
    suns = np.column_stack([np.sqrt(1 - z * z) * np.sin(phi),
                            -np.abs(np.sqrt(1 - z * z) * np.cos(phi)), z])  # facing the window
    index, weight = SunPoints(c.settings.sun_spacing).weights(suns)
    interpolated = np.einsum("skm,km->sk", c.sun_direct[0][:, index].astype(float), weight)
    scene = Scene(geo)
    n_s = sensors.shape[0]
    o = np.repeat(sensors[:, :3], len(suns), axis=0)
    d = np.tile(suns, (n_s, 1))
    gset, cos_w, _ = scene.glazing_crossing(o, d)
    visible = (gset == 0) & ~scene.occluded(o, d)
    tau = np.where(visible, relative_transmittance(cos_w, 2), 0.0)
    exact = (tau * np.tile(suns[:, 2], n_s)).reshape(n_s, -1)
    err = np.abs(interpolated - exact)
    lit = (exact > 0) | (interpolated > 0)
    print(f"direct sun interpolation error / E_dn: mean {err.mean():.4f}, "
          f"p95 {np.percentile(err, 95):.4f}, max {err.max():.3f}; over sunlit cases: "
          f"mean {err[lit].mean():.4f}, p95 {np.percentile(err[lit], 95):.4f}; "
          f"sunlit fraction {np.mean(exact > 0):.2f}")
    assert np.mean(exact > 0) > 0.05  # the check does see sun through the window
    assert err.mean() < 0.01
    assert np.percentile(err, 95) < 0.02


# ------------------------------------------------------------------ bookkeeping


TINY = Settings(subdivision=1, sun_spacing=10.0, sky_rays_per_patch=4, ground_rays=16,
                element_size=1.0, element_rays=16, sensor_rays=32, reflected_sun_spacing=10.0)


def _tiny_room(floor=0.2, panes=2):
    windows, p = _front_window(width=1.5, sill=0.9, head=2.1, panes=panes)
    geo = parametric_room(3.0, 3.0, 2.7, windows, {**GREY, "floor": floor}, p)
    return geo, sensor_grid(3.0, 3.0, 0.8, 1.0, 0.5)


def test_deterministic_and_pickles():
    geo, sensors = _tiny_room()
    a = compute_coefficients(geo, sensors, TINY)
    b = compute_coefficients(geo, sensors, TINY)
    for name, arr in a.to_arrays().items():
        assert arr.tobytes() == b.to_arrays()[name].tobytes(), name
    assert a.key == b.key
    c = pickle.loads(pickle.dumps(a))
    assert c.settings == a.settings and c.key == a.key
    assert all(np.array_equal(c.to_arrays()[k], v) for k, v in a.to_arrays().items())
    assert pickle.loads(pickle.dumps(TINY)) == TINY
    # cache round trip: arrays + JSON metadata
    meta = json.loads(json.dumps(a.metadata()))
    d = CoefficientSet.from_parts(a.to_arrays(), meta)
    assert d.settings == a.settings and d.glazing_sets == a.glazing_sets
    assert all(np.array_equal(d.to_arrays()[k], v) for k, v in a.to_arrays().items())
    assert a.nbytes == sum(v.nbytes for v in a.to_arrays().values())
    for arr in (a.sky_direct, a.sky_reflected, a.sun_direct, a.sun_reflected):
        assert arr.dtype == np.float32
    n_basis = patch_scheme(1).n_patches + 1
    assert a.sky_direct.shape == (1, sensors.shape[0], n_basis)
    assert a.sun_direct.shape == (1, sensors.shape[0], SunPoints(10.0).n)
    with pytest.raises(ValueError, match="sky_direct"):
        CoefficientSet.from_parts({**a.to_arrays(), "sky_direct": a.sky_direct[:, :1]}, meta)


def test_key_tracks_what_changes_the_arrays():
    geo, sensors = _tiny_room()
    key = coefficient_key(geo, sensors, TINY)
    assert len(key) == 64
    assert coefficient_key(geo, sensors + 0.0, TINY) == key
    assert coefficient_key(_tiny_room(floor=0.3)[0], sensors, TINY) != key
    assert coefficient_key(_tiny_room(panes=1)[0], sensors, TINY) != key
    assert coefficient_key(geo, sensors[:-1], TINY) != key
    assert coefficient_key(geo, sensors, Settings(**{**TINY.canonical(), "seed": 1})) != key


def test_bad_sensors_and_settings_are_named():
    geo, sensors = _tiny_room()
    bad = sensors.copy()
    bad[2, 3:] = 0.0
    with pytest.raises(ValueError, match="sensor 2 has a zero normal"):
        compute_coefficients(geo, bad, TINY)
    with pytest.raises(ValueError, match="element_rays"):
        Settings(element_rays=0)


# ------------------------------------------------------------------ pre-tests (issue 8)


def _two_windows():
    windows = [{"wall": "front", "width": 2.0, "sill": 0.9, "head": 2.1, "offset": -0.8,
                "glazing": "main"},
               {"wall": "right", "width": 1.2, "sill": 0.5, "head": 2.4, "offset": 0.5,
                "glazing": "main"}]
    return parametric_room(4.0, 5.0, 2.7, windows, GREY, {"main": 2}, thickness=0.25,
                           overhang={"depth": 0.5, "gap": 0.1})


def test_window_pretest_keeps_every_ray_that_crosses_glazing():
    # The edge-plane pre-test must be conservative: every ray Embree finds crossing
    # glazing (Scene.glazing_crossing, the independent reference) is kept; and it should
    # be tight (rays kept ≈ rays crossing), since each kept ray costs Embree queries.
    from luxsweep.kernels.coefficients import _window_mask, _window_wedges

    geo = _two_windows()
    scene = Scene(geo)
    rng = np.random.default_rng(31)
    pts = rng.uniform([0.2, 0.2, 0.2], [3.8, 4.8, 2.5], size=(40, 3))
    d = rng.normal(size=(40, 5000, 3))
    d /= np.linalg.norm(d, axis=2, keepdims=True)
    keep = _window_mask(_window_wedges(scene, pts),
                        lambda a: np.matmul(d, a[:, :, None])[..., 0])
    gset, _, _ = scene.glazing_crossing(np.repeat(pts, 5000, axis=0), d.reshape(-1, 3))
    cross = (gset >= 0).reshape(40, 5000)
    assert cross.sum() > 1000
    assert not np.any(cross & ~keep)
    assert keep.sum() <= cross.sum() * 1.001 + 10


def test_patch_culling_gives_the_brute_force_sky_direct():
    # sky_direct by definition (DEVELOPERS.md): mean over each patch's stratified rays of
    # τ_rel n·d for rays crossing glazing and then no opaque surface — evaluated here for
    # every ray with Embree (Scene.exit_glazing), no pre-test. The culled computation must
    # give the same sums; sensors facing up, sideways, tilted and down.
    from luxsweep.kernels.coefficients import _STREAM_GROUND, _STREAM_SKY, REPLICAS, _seed
    from luxsweep.kernels.sky import sample_ground
    from luxsweep.kernels.transfer import relative_transmit

    geo = _two_windows()
    settings = Settings(subdivision=1, sky_rays_per_patch=16, ground_rays=1024,
                        sun_spacing=10.0, reflected_sun_spacing=10.0, element_rays=16,
                        sensor_rays=16, element_size=1.0)
    n = np.array([[0, 0, 1.0], [0, -1.0, 0], [0.6, -0.3, 0.74], [0, 0, -1.0], [1.0, 0, 0]])
    pts = np.array([[2.0, 1.0, 0.8], [1.0, 0.8, 1.5], [3.0, 2.0, 1.2], [2.0, 2.5, 2.2],
                    [3.2, 3.0, 1.4]])
    sensors = np.column_stack([pts, n / np.linalg.norm(n, axis=1, keepdims=True)])
    c = compute_coefficients(geo, sensors, settings)
    scene = Scene(geo)
    sch = patch_scheme(1)
    ref = np.zeros((sensors.shape[0], sch.n_patches + 1))
    # REPLICAS (4) independent sub-samples per sensor: 4 patch rays and 256 ground rays each
    for s in range(sensors.shape[0]):
        for r in range(REPLICAS):
            sky = sample_directions(sch, 4, _seed(settings, _STREAM_SKY, s, r)).reshape(-1, 3)
            ground = sample_ground(256, _seed(settings, _STREAM_GROUND, s, r))
            dirs = np.concatenate([sky, ground])
            basis = np.append(np.repeat(np.arange(sch.n_patches), 4), np.full(256, sch.n_patches))
            cos = dirs @ sensors[s, 3:]
            gset, cos_w = scene.exit_glazing(np.broadcast_to(pts[s], dirs.shape), dirs)
            w = np.where((gset >= 0) & (cos > 0), relative_transmit(cos_w, gset, (2,)) * cos, 0.0)
            ref[s] += np.bincount(basis, weights=w, minlength=sch.n_patches + 1)
    ref /= np.append(np.full(sch.n_patches, 16.0), 1024.0)
    assert np.all(ref.sum(axis=1) > 0)  # every sensor sees some sky through the windows
    assert ref[3, -1] > 0 and ref[0, -1] == 0  # facing down sees the ground; facing up never
    # float32 storage of the coefficients: 1e-6 relative
    np.testing.assert_allclose(c.sky_direct[0], ref, rtol=1e-6, atol=1e-9)


# ------------------------------------------------------------------ speed-ups that keep the bits


def test_sample_directions_of_some_patches_are_rows_of_the_full_call():
    # patches= turns only the selected patches into directions and skips the draws of the
    # others (PCG64.advance, one 64-bit draw per uniform double): the rows must be those of
    # the full call, bit for bit, in any order, with repeats, for any subdivision.
    for subdivision in (1, 2):
        sch = patch_scheme(subdivision)
        for n in (1, 6, 64):
            full = sample_directions(sch, n, seed=11)
            rng = np.random.default_rng(n)
            for patches in (np.flatnonzero(rng.random(sch.n_patches) < 0.2),
                            rng.integers(0, sch.n_patches, 40), np.arange(sch.n_patches),
                            np.array([], dtype=int), [sch.n_patches - 1], [3, 3, 2]):
                part = sample_directions(sch, n, seed=11, patches=patches)
                assert part.shape == (len(patches), n, 3)
                assert np.array_equal(part, full[np.asarray(patches, dtype=int)])
    with pytest.raises(IndexError):
        sample_directions(patch_scheme(1), 4, 0, patches=[145])


def test_sun_points_are_computed_once_and_kept_read_only():
    # the fine/coarse sun points and their interpolation depend on the spacings only
    from luxsweep.kernels.coefficients import _sun_points

    kept = _sun_points(6.0, 12.0)
    assert _sun_points(6.0, 12.0) is kept
    fine, coarse = SunPoints(6.0), SunPoints(12.0)
    fresh = (fine.directions, coarse.directions, *coarse.weights(fine.directions))
    for got, want in zip(kept, fresh, strict=True):
        assert np.array_equal(got, want) and not got.flags.writeable


def test_direct_sun_in_float32_is_the_float64_result_rounded():
    # sensors' direct sun is written straight into float32: IEEE 754 rounds each value as
    # astype(float32) would; exterior points add one (unglazed) layer
    from luxsweep.kernels.coefficients import _sun_direct

    geo = _two_windows()
    scene = Scene(geo)
    sun = SunPoints(6.0).directions
    pts = np.array([[2.0, 1.0, 0.8], [1.0, 0.8, 1.5], [3.0, 2.0, 1.2], [2.0, -3.0, 0.5]])
    nrm = np.array([[0, 0, 1.0], [0, -1.0, 0], [0.6, -0.36, 0.72], [0, 0, 1.0]])
    inside = np.zeros(4, dtype=bool)
    wide = _sun_direct(scene, pts, nrm, inside, sun, (2,))
    assert wide.shape == (1, 4, sun.shape[0]) and wide.max() > 0
    narrow = _sun_direct(scene, pts, nrm, inside, sun, (2,), np.float32)
    assert narrow.dtype == np.float32 and np.array_equal(narrow, wide.astype(np.float32))
    outside = np.array([False, False, False, True])
    both = _sun_direct(scene, pts, nrm, outside, sun, (2,))
    assert both.shape == (2, 4, sun.shape[0])
    assert np.array_equal(both[0, :3], wide[0, :3]) and both[1, 3].max() > 0
