"""Against brute force: per-hour ray tracing versus the coefficient route (item 4).

Reference classroom, front façade facing south (orientation 180°, building
frame = site frame), Greensboro TMY3, hourly steps, unit normal transmittance
with the double-glazing angular profile.

Brute force (written here, with the project's ray kernels but none of its
coefficient machinery): for each sampled daylight hour and each sensor,

* sky: ``N_SKY`` cosine-weighted, jittered-stratified directions over the
  sensor's upper hemisphere (fresh draws every hour); a ray counts when it
  crosses a window and meets no opaque surface (:class:`kernels.raytrace.Scene`:
  ``glazing_crossing`` then ``occluded``); the Perez, Seals & Michalsky (1993)
  luminance of that hour is evaluated *at the ray's own direction*
  (:func:`kernels.sky.luminance_perez1993`, normalised to the hour's diffuse
  horizontal illuminance) and ``E_sky = (π / N) Σ L τ_rel`` (cosine-weighted
  estimator of ∫ L τ cos θ dω);
* sun: one ray towards the hour's sun; ``E_sun = E_dn τ_rel cos θ`` when it
  reaches the sky through a window.

This is the *direct* component only (no inter-reflection), so it is compared
with the coefficient route's direct families (``sky_direct``, ``sun_direct``)
— same sky luminance model, same sun positions and illuminance inputs
(:attr:`kernels.sky.SkyVectors.diffuse_horizontal_illuminance`,
``direct_normal_illuminance``), different discretisation (patches with
stratified rays and interpolated sun points versus exact directions).

Time: the brute force traces ``N_HOURS`` daylight hours spread over the year;
its time per hour × the year's daylight hours is the extrapolated year. The
coefficient route's time is everything for a year of hourly illuminance:
``compute_coefficients`` (all four families — the brute force computes only
the direct part, so the ratio understates the route's advantage), sky vectors
and ``kernels.timeseries.illuminance``. Figure: brute-force year ÷ route.

Difference: relative error |E_route − E_brute| / E_brute over sensor-hours with
E_brute ≥ 100 lx (below that relative errors of a few lux dominate), mean and
95th percentile, for the total direct illuminance and for sky and sun apart.
The brute force traces every sampled hour twice with independent rays and
uses the mean of both passes as the reference; half their difference is the
reference's own Monte Carlo noise (standard error of that mean), reported
beside the errors. The time per hour is that of one pass.
"""

from __future__ import annotations

import argparse
import dataclasses
import warnings
from typing import Any

import bench_common as bc
import numpy as np

ORIENTATION = 180.0
N_SKY = 4096  # sky rays per sensor and hour (a 64 × 64 jittered grid)
N_HOURS = 24  # sampled daylight hours
MIN_LUX = 100.0


def cosine_hemisphere(n_sensors: int, n: int, rng: np.random.Generator) -> np.ndarray:
    """Jittered-stratified cosine-weighted directions about +z, (n_sensors, n, 3).

    Malley's method: uniform points on the unit disc (area-preserving polar
    map of a jittered √n × √n grid) lifted to the hemisphere, so the density is
    cos θ / π.
    """
    m = round(np.sqrt(n))
    i, j = np.meshgrid(np.arange(m), np.arange(m), indexing="ij")
    u1 = (i.ravel() + rng.random((n_sensors, m * m))) / m
    u2 = (j.ravel() + rng.random((n_sensors, m * m))) / m
    r, phi = np.sqrt(u1), 2.0 * np.pi * u2
    return np.stack([r * np.cos(phi), r * np.sin(phi), np.sqrt(1.0 - u1)], axis=-1)


def brute_force_hour(scene: Any, sensors: np.ndarray, sun_dir: np.ndarray, eps: float,
                     delta: float, zenith: float, e_dh: float, e_dn: float, panes: int,
                     rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Direct sky and sun illuminance [lx] of one hour at every upward sensor.

    Returns ``(e_sky, e_sun)``.
    """
    from luxsweep.kernels.glazing import relative_transmittance
    from luxsweep.kernels.sky import luminance_perez1993

    n_s = sensors.shape[0]
    dirs = cosine_hemisphere(n_s, N_SKY, rng)
    n = dirs.shape[1]
    origins = np.repeat(sensors[:, :3], n, axis=0)
    d = dirs.reshape(-1, 3)
    gset, cos_g, _ = scene.glazing_crossing(origins, d)
    ok = np.flatnonzero(gset >= 0)
    ok = ok[~scene.occluded(origins[ok], d[ok])]
    sample = np.zeros(n_s * n)
    if ok.size and e_dh > 0:
        lum = luminance_perez1993(d[ok], sun_dir, eps, delta, zenith, diffuse_illuminance=e_dh)
        sample[ok] = np.ravel(lum) * relative_transmittance(cos_g[ok], panes)
    e_sky = np.pi * sample.reshape(n_s, n).mean(axis=1)
    # sun: one ray per sensor
    e_sun = np.zeros(n_s)
    if e_dn > 0 and sun_dir[2] > 0:
        s = np.broadcast_to(sun_dir, (n_s, 3))
        g, c, _ = scene.glazing_crossing(sensors[:, :3], s)
        lit = np.flatnonzero(g >= 0)
        lit = lit[~scene.occluded(sensors[lit, :3], s[lit])]
        e_sun[lit] = e_dn * relative_transmittance(c[lit], panes) * sun_dir[2]
    return e_sky, e_sun


def _relative(route: np.ndarray, brute: np.ndarray) -> dict[str, float]:
    keep = brute >= MIN_LUX
    rel = np.abs(route[keep] - brute[keep]) / brute[keep]
    if not rel.size:
        return {"n": 0}
    return {"mean": float(rel.mean()), "p95": float(np.percentile(rel, 95)),
            "bias": float((route[keep] - brute[keep]).sum() / brute[keep].sum()),
            "n": int(rel.size)}


def main() -> dict[str, Any]:
    import pvlib

    from luxsweep.kernels import sky as ksky
    from luxsweep.kernels import sun as ksun
    from luxsweep.kernels.climate import read_climate
    from luxsweep.kernels.coefficients import Settings, compute_coefficients
    from luxsweep.kernels.raytrace import Scene
    from luxsweep.kernels.timeseries import illuminance

    geometry, sensors = bc.reference_geometry()
    settings = Settings()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        climate = read_climate(bc.TMY3_GREENSBORO)
    # warm-up (imports, first calls; not timed)
    compute_coefficients(geometry, sensors[:2], Settings(sky_rays_per_patch=1, ground_rays=16,
                                                           element_rays=16, sensor_rays=16))
    load0 = bc.load_average()

    # --- the coefficient route: a year of hourly illuminance -----------------------
    t_coeff, coeffs = bc.timed(lambda: compute_coefficients(geometry, sensors, settings))
    scheme = ksky.patch_scheme(settings.subdivision)
    points = ksun.SunPoints(settings.sun_spacing)
    t_sky, sv = bc.timed(lambda: ksky.sky_vectors(climate, [ORIENTATION], scheme, points, 60))
    t_ill, _ = bc.timed(lambda: illuminance(coeffs, sv, np.ones((1, 1))))
    t_route = t_coeff + t_sky + t_ill

    # direct families only, for the comparison
    zero_sky = np.zeros_like(coeffs.sky_reflected)
    zero_sun = np.zeros_like(coeffs.sun_reflected)
    sky_only = dataclasses.replace(coeffs, sky_reflected=zero_sky, sun_reflected=zero_sun,
                                   sun_direct=np.zeros_like(coeffs.sun_direct))
    sun_only = dataclasses.replace(coeffs, sky_reflected=zero_sky, sun_reflected=zero_sun,
                                   sky_direct=np.zeros_like(coeffs.sky_direct))

    # --- inputs of every hour (shared with the route) ------------------------------
    stamps, sun_times = ksun.step_times(climate, 60)
    altitude, azimuth = ksun.solar_position(sun_times, climate.site)
    zenith = 90.0 - altitude
    extra = np.asarray(pvlib.irradiance.get_extra_radiation(stamps), dtype=float)
    dhi = np.nan_to_num(np.asarray(climate.dhi, dtype=float))
    dni = np.nan_to_num(np.asarray(climate.dni, dtype=float))
    eps = ksky.sky_clearness(dhi, dni, zenith)
    delta = ksky.sky_brightness(dhi, zenith, extra)
    missing = ~np.isfinite(eps) | ~np.isfinite(delta)  # as kernels.sky.sky_vectors does
    eps, delta = np.where(missing, 1.0, eps), np.where(missing, 0.2, delta)
    e_dh, e_dn = sv.diffuse_horizontal_illuminance, sv.direct_normal_illuminance
    day = np.flatnonzero(sv.daylight & (e_dh > 0))
    hours = day[np.linspace(0, day.size - 1, N_HOURS).round().astype(int)]
    sun_b = ksun.to_building_frame(ksun.direction(azimuth, altitude), ORIENTATION)

    # --- brute force on the sampled hours -------------------------------------------
    scene = Scene(geometry)
    passes: list[tuple[np.ndarray, np.ndarray]] = []
    seconds = []
    for seed in (2024, 2025):
        rng = np.random.default_rng(seed)
        t, hourly = bc.timed(lambda rng=rng: [
            brute_force_hour(scene, sensors, sun_b[h], eps[h], delta[h], zenith[h], e_dh[h],
                             e_dn[h], 2, rng) for h in hours])
        seconds.append(t)
        passes.append((np.array([x[0] for x in hourly]).T, np.array([x[1] for x in hourly]).T))
    t_brute = min(seconds)
    per_hour = t_brute / hours.size
    t_year = per_hour * day.size
    brute_sky_a = 0.5 * (passes[0][0] + passes[1][0])  # (sensor, hour)
    brute_sun_a = passes[0][1]  # one ray to the sun: both passes agree
    noise_a = 0.5 * np.abs(passes[0][0] - passes[1][0])

    sub = dataclasses.replace(sv, basis_sky=sv.basis_sky[:, :, hours],
                              sun_index=sv.sun_index[:, hours],
                              sun_weight=sv.sun_weight[:, hours])
    route_sky = illuminance(sky_only, sub, np.ones((1, 1)))[0][0, 0]
    route_sun = illuminance(sun_only, sub, np.ones((1, 1)))[0][0, 0]
    brute_tot = brute_sky_a + brute_sun_a
    route_tot = route_sky + route_sun
    keep = brute_sky_a >= MIN_LUX
    return {
        "figure": "against brute force",
        "ratio": t_year / t_route,
        "goal": "(none stated) > 1 means the coefficient route is faster",
        "brute_force": {"component": "direct only (sky + sun, no inter-reflection)",
                        "sky_rays_per_sensor_hour": N_SKY, "passes": 2,
                        "hours_traced": int(hours.size),
                        "daylight_hours_in_year": int(day.size), "seconds_traced_one_pass": t_brute,
                        "seconds_per_hour": per_hour, "seconds_year_extrapolated": t_year},
        "route_seconds": {"coefficients": t_coeff, "sky_vectors": t_sky,
                          "illuminance": t_ill, "total": t_route},
        "relative_error": {"total": _relative(route_tot, brute_tot),
                           "sky": _relative(route_sky, brute_sky_a),
                           "sun": _relative(route_sun, brute_sun_a)},
        "brute_force_noise_relative": {
            "mean": float(np.mean(noise_a[keep] / brute_sky_a[keep])) if keep.any() else None,
            "p95": float(np.percentile(noise_a[keep] / brute_sky_a[keep], 95))
            if keep.any() else None},
        "min_lux": MIN_LUX,
        "load_average": [load0, bc.load_average()],
    }


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", help="write the figures to this file")
    args = parser.parse_args()
    result = main()
    bc.report(result, args.json)
