"""The sun: directions, frames, solar position, time steps and sun points.

Frames (DEVELOPERS.md, DESIGN §2.1): site frame x east, y north, z up; azimuth
clockwise from north; a direction is ``(sin az cos alt, cos az cos alt, sin alt)``.
The building frame has the front façade's outward normal along -y; with
orientation φ (site azimuth of that normal) a site azimuth A is building azimuth
A - φ + 180.

Solar position comes from pvlib's implementation of the NREL Solar Position
Algorithm (Reda & Andreas 2004). luxsweep uses the **apparent** altitude
(corrected for atmospheric refraction with the site's mean pressure and a fixed
12 °C): that is where the sun is seen, hence the direction its light arrives
from. The correction is below 0.6° and matters only within a few degrees of
the horizon; "the sun is up" means apparent altitude > 0 of the sun's centre.

Time steps follow the weather files' convention: a record's value is the
average over the interval that *ends* at its stamp (local standard time), so
the representative sun is at the middle of the interval — an hourly record
stamped 12:00 uses the sun at 11:30 — except at sunrise and sunset, where it is
at the middle of the sunlit part of the interval (common practice).

Interface notes: ``to_building_azimuth`` (azimuths) and ``to_building_frame``
(vectors) both implement the frame rule; ``step_sun(climate)`` gives the sun of
every record of a (possibly resampled) climate; ``resample`` returns a
:class:`~kernels.climate.Climate` with ``interval = step_minutes``.

Cost: the module keeps no state. :func:`sun_steps` works out the stamps, sun
times and sun positions of a (site, year, step) once; pass its result to
``resample(..., steps=)`` instead of letting ``resample`` work them out again
(``step_times`` and ``step_sun`` are its two halves). A caller that locates the
sun for several climates may own an :class:`Ephemeris` and pass it to
``sun_steps``/``solar_position``: it keeps the site-free part of the SPA per
instant, so a second climate at a whole-hour UTC offset pays about a tenth for
its regular steps (the engine keeps one per worker process, beside its
climate entries). All of it is exact: the numbers are those of the direct
computation, bit for bit.

References
----------
.. [1] Reda, I. and Andreas, A., "Solar Position Algorithm for Solar Radiation
   Applications", NREL/TP-560-34302, 2004 (revised 2008).
   https://doi.org/10.2172/15003974
.. [2] Holmgren, W. F., Hansen, C. W. and Mikofski, M. A., "pvlib python: a
   python package for modeling solar energy systems", Journal of Open Source
   Software 3(29), 884, 2018. https://doi.org/10.21105/joss.00884
"""

from __future__ import annotations

import dataclasses
import functools
import threading
from dataclasses import dataclass
from functools import cached_property

import numpy as np
import pandas as pd
import pvlib
from scipy.spatial import Delaunay, cKDTree

from luxsweep.kernels.climate import ILLUMINANCE, IRRADIANCE, QUANTITIES, Climate, Site

TEMPERATURE = 12.0
"""Air temperature [degC] used for the refraction correction (pvlib's default)."""

# --------------------------------------------------------------------------- directions


def direction(azimuth, altitude) -> np.ndarray:
    """Unit vectors from azimuth and altitude.

    Parameters
    ----------
    azimuth : array_like [deg]
        Clockwise from +y (north in the site frame).
    altitude : array_like [deg]
        Above the horizontal plane.

    Returns
    -------
    ndarray, shape (..., 3)
        ``(sin az cos alt, cos az cos alt, sin alt)``.
    """
    az = np.radians(np.asarray(azimuth, dtype=np.float64))
    alt = np.radians(np.asarray(altitude, dtype=np.float64))
    az, alt = np.broadcast_arrays(az, alt)
    cos_alt = np.cos(alt)
    return np.stack([np.sin(az) * cos_alt, np.cos(az) * cos_alt, np.sin(alt)], axis=-1)


def azimuth_altitude(vectors) -> tuple[np.ndarray, np.ndarray]:
    """Azimuth and altitude of direction vectors (inverse of :func:`direction`).

    Parameters
    ----------
    vectors : array_like, shape (..., 3)
        Need not be unit length.

    Returns
    -------
    azimuth : ndarray [deg]
        In [0, 360), clockwise from +y.
    altitude : ndarray [deg]
        In [-90, 90].
    """
    v = np.asarray(vectors, dtype=np.float64)
    x, y, z = v[..., 0], v[..., 1], v[..., 2]
    azimuth = np.degrees(np.arctan2(x, y)) % 360.0
    altitude = np.degrees(np.arctan2(z, np.hypot(x, y)))
    return azimuth, altitude


def to_building_azimuth(site_azimuth, orientation):
    """Building-frame azimuth of a site azimuth.

    Parameters
    ----------
    site_azimuth : array_like [deg]
        Clockwise from north.
    orientation : float or array_like [deg]
        Site azimuth of the front façade's outward normal (building -y).

    Returns
    -------
    ndarray [deg]
        ``(site_azimuth - orientation + 180) mod 360``; orientation 180 leaves
        azimuths unchanged.
    """
    return (np.asarray(site_azimuth, dtype=np.float64) - orientation + 180.0) % 360.0


def to_building_frame(vectors, orientation: float) -> np.ndarray:
    """Rotate site-frame direction vectors into the building frame.

    Parameters
    ----------
    vectors : array_like, shape (..., 3)
        Site frame (x east, y north, z up).
    orientation : float [deg]
        Site azimuth of the front façade's outward normal.

    Returns
    -------
    ndarray, shape (..., 3)
        The same directions with azimuth shifted as in :func:`to_building_azimuth`
        (a rotation about z by ``180 - orientation`` degrees clockwise).
    """
    v = np.asarray(vectors, dtype=np.float64)
    d = np.radians(180.0 - orientation)
    c, s = np.cos(d), np.sin(d)
    return np.stack([v[..., 0] * c + v[..., 1] * s, v[..., 1] * c - v[..., 0] * s, v[..., 2]], -1)


# --------------------------------------------------------------------------- solar position


def solar_position(
    times,
    site: Site,
    *,
    pressure: float | None = None,
    temperature: float = TEMPERATURE,
    delta_t: float | None = None,
    ephemeris: Ephemeris | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Apparent solar altitude and azimuth by the NREL SPA (through pvlib).

    Parameters
    ----------
    times : pandas.DatetimeIndex
        Instants; naive stamps are taken as the site's local standard time.
    site : Site
    pressure : float [Pa], optional
        Mean station pressure for the refraction correction; default from the
        site elevation (``pvlib.atmosphere.alt2pres``).
    temperature : float [degC]
        Air temperature for the refraction correction.
    delta_t : float [s], optional
        TT - UT1; default computed by pvlib from the year and month.
    ephemeris : Ephemeris, optional
        A caller-owned memo of the site-free part (used with the default ΔT
        only); it never changes a number.

    Returns
    -------
    altitude : ndarray [deg]
        Apparent (refraction-corrected) topocentric altitude of the sun's centre.
    azimuth : ndarray [deg]
        Clockwise from north, [0, 360).

    Notes
    -----
    The same numbers as ``pvlib.solarposition.get_solarposition(method=
    'nrel_numpy')`` (the SPA of Reda & Andreas 2004, stated uncertainty
    ±0.0003°), bit for bit: pvlib's own ``pvlib.spa`` steps are called in
    pvlib's order, in two parts — the sun's geocentric place at an instant
    (sidereal time, right ascension, declination, parallax; nine tenths of the
    work, the same for every site) and its topocentric altitude and azimuth at
    the site. With an ``ephemeris`` the first part is kept per instant, so
    climates whose steps fall on the same instants (sites with whole-hour UTC
    offsets) share it.
    """
    altitude, azimuth, _ = _solar_position(
        _local(times, site), site, pressure=pressure, temperature=temperature, delta_t=delta_t,
        ephemeris=ephemeris,
    )
    return altitude, azimuth


_REFRACTION = 0.5667
"""Apparent solar radius plus refraction at the horizon [deg] (pvlib's ``atmos_refract``)."""


def _local(times, site: Site) -> pd.DatetimeIndex:
    times = pd.DatetimeIndex(times)
    return times.tz_localize(site.tz) if times.tz is None else times


def _unixtime(times: pd.DatetimeIndex) -> np.ndarray:
    """Seconds since 1970-01-01 UTC, computed as pvlib computes them."""
    epoch = pd.Timestamp("1970-01-01", tz="UTC").tz_convert(times.tz)
    return np.asarray((times - epoch) / pd.Timedelta("1s"), dtype=np.float64)


def _delta_t(times: pd.DatetimeIndex) -> np.ndarray:
    """TT - UT1 [s] of pvlib's ``calculate_deltat`` for the UTC year and month of each instant."""
    utc = times.tz_convert("UTC").tz_localize(None).to_numpy()
    months, inverse = np.unique(utc.astype("datetime64[M]").astype(np.int64), return_inverse=True)
    return np.array([_month_delta_t(int(m)) for m in months])[inverse]


@functools.lru_cache(maxsize=256)
def _month_delta_t(month: int) -> float:
    """pvlib's ΔT [s] of the month ``month`` counted from 1970-01 (0)."""
    year, month_of_year = np.array([1970 + month // 12]), np.array([month % 12 + 1])
    return float(pvlib.spa.calculate_deltat(year, month_of_year)[0])


def _solar_position(
    times: pd.DatetimeIndex,
    site: Site,
    *,
    pressure: float | None = None,
    temperature: float = TEMPERATURE,
    delta_t: float | None = None,
    ephemeris: Ephemeris | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Apparent altitude, azimuth and airless altitude [deg] at tz-aware instants.

    ``ephemeris`` (default ΔT only) looks up and keeps the site-free part.
    """
    if pressure is None:
        pressure = float(pvlib.atmosphere.alt2pres(site.elevation))
    unixtime = _unixtime(times)
    if delta_t is None and ephemeris is not None:
        place = ephemeris(unixtime, _delta_t(times))
    elif delta_t is None:
        place = _ephemeris(unixtime, _delta_t(times))
    else:
        place = _ephemeris(unixtime, delta_t)
    return _topocentric(place, site, pressure / 100.0, temperature)


def _ephemeris(unixtime: np.ndarray, delta_t) -> np.ndarray:
    """The sun's geocentric place: SPA steps 3.1-3.8 (Reda & Andreas 2004) by pvlib.

    Returns
    -------
    ndarray, shape (4, n)
        Apparent sidereal time [deg], geocentric right ascension [deg] and
        declination [deg], equatorial horizontal parallax [deg].
    """
    spa = pvlib.spa
    jd = spa.julian_day(unixtime)
    jde = spa.julian_ephemeris_day(jd, delta_t)
    jc = spa.julian_century(jd)
    jce = spa.julian_ephemeris_century(jde)
    jme = spa.julian_ephemeris_millennium(jce)
    radius = spa.heliocentric_radius_vector(jme)
    theta = spa.geocentric_longitude(spa.heliocentric_longitude(jme))
    beta = spa.geocentric_latitude(spa.heliocentric_latitude(jme))
    x0 = spa.mean_elongation(jce)
    x1 = spa.mean_anomaly_sun(jce)
    x2 = spa.mean_anomaly_moon(jce)
    x3 = spa.moon_argument_latitude(jce)
    x4 = spa.moon_ascending_longitude(jce)
    nutation = np.empty((2, len(x0)))
    spa.longitude_obliquity_nutation(jce, x0, x1, x2, x3, x4, nutation)
    delta_psi, delta_epsilon = nutation
    epsilon = spa.true_ecliptic_obliquity(spa.mean_ecliptic_obliquity(jme), delta_epsilon)
    lamd = spa.apparent_sun_longitude(theta, delta_psi, spa.aberration_correction(radius))
    v = spa.apparent_sidereal_time(spa.mean_sidereal_time(jd, jc), delta_psi, epsilon)
    alpha = spa.geocentric_sun_right_ascension(lamd, epsilon, beta)
    delta = spa.geocentric_sun_declination(lamd, epsilon, beta)
    return np.stack([v, alpha, delta, spa.equatorial_horizontal_parallax(radius)])


def _topocentric(
    place: np.ndarray, site: Site, pressure: float, temperature: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """SPA steps 3.9-3.15 at a site: apparent altitude, azimuth, airless altitude [deg].

    ``pressure`` in [hPa] (mbar), as pvlib's SPA takes it.
    """
    spa = pvlib.spa
    v, alpha, delta, xi = place
    lat, elev = site.latitude, site.elevation
    hour_angle = spa.local_hour_angle(v, site.longitude, alpha)
    u = spa.uterm(lat)
    x = spa.xterm(u, lat, elev)
    y = spa.yterm(u, lat, elev)
    delta_alpha = spa.parallax_sun_right_ascension(x, xi, hour_angle, delta)
    delta_prime = spa.topocentric_sun_declination(delta, x, y, xi, delta_alpha, hour_angle)
    h_prime = spa.topocentric_local_hour_angle(hour_angle, delta_alpha)
    e0 = spa.topocentric_elevation_angle_without_atmosphere(lat, delta_prime, h_prime)
    delta_e = spa.atmospheric_refraction_correction(pressure, temperature, e0, _REFRACTION)
    e = spa.topocentric_elevation_angle(e0, delta_e)
    gamma = spa.topocentric_astronomers_azimuth(h_prime, delta_prime, lat)
    return e, spa.topocentric_azimuth_angle(gamma), e0


class Ephemeris:
    """The sun's geocentric place at pvlib's default ΔT, kept per instant (exact, bounded).

    A memo its owner creates and passes to :func:`solar_position` or
    :func:`sun_steps` (the kernels keep none of their own; the engine owns one
    per worker process). Keys are the float unix times (sorted, unique); a
    stored place is used only where both the unix time and the ΔT match
    exactly, so it never changes a number. Every climate is placed on the
    reference year, so sites whose UTC offsets differ by whole steps evaluate
    the sun at the same instants. Thread-safe (the arrays are replaced, never
    changed in place).

    Parameters
    ----------
    max_size : int
        Instants kept; when full, the memo starts afresh.
    """

    def __init__(self, max_size: int = 400_000) -> None:
        self.max_size = max_size
        self._lock = threading.Lock()
        self.clear()

    def clear(self) -> None:
        """Forget every stored place."""
        with self._lock:
            self._time, self._delta_t, self._place = np.empty(0), np.empty(0), np.empty((4, 0))

    def __len__(self) -> int:
        return self._time.size

    def __call__(self, unixtime: np.ndarray, delta_t: np.ndarray) -> np.ndarray:
        """The place (see :func:`_ephemeris`) at each instant; new ones are stored."""
        with self._lock:  # the arrays are replaced, never changed in place
            time, stored_dt, stored = self._time, self._delta_t, self._place
        place = np.empty((4, unixtime.size))
        miss = np.arange(unixtime.size)
        if time.size:
            at = np.minimum(np.searchsorted(time, unixtime), time.size - 1)
            hit = (time[at] == unixtime) & (stored_dt[at] == delta_t)
            place[:, hit] = stored[:, at[hit]]
            miss = np.flatnonzero(~hit)
        if miss.size:
            place[:, miss] = _ephemeris(unixtime[miss], delta_t[miss])
            self._add(unixtime[miss], delta_t[miss], place[:, miss])
        return place

    def _add(self, unixtime: np.ndarray, delta_t: np.ndarray, place: np.ndarray) -> None:
        unixtime, first = np.unique(unixtime, return_index=True)
        with self._lock:
            time = self._time
            if time.size + unixtime.size > self.max_size:  # start afresh
                time, self._delta_t, self._place = np.empty(0), np.empty(0), np.empty((4, 0))
            at = np.searchsorted(time, unixtime)
            if time.size:  # an instant stored already (with another ΔT) keeps its entry
                fresh = time[np.minimum(at, time.size - 1)] != unixtime
                at, unixtime, first = at[fresh], unixtime[fresh], first[fresh]
            self._time = np.insert(time, at, unixtime)
            self._delta_t = np.insert(self._delta_t, at, delta_t[first])
            self._place = np.insert(self._place, at, place[:, first], axis=1)


# --------------------------------------------------------------------------- time steps


def _check_step(interval: int, step_minutes: int) -> None:
    if (
        not isinstance(step_minutes, (int, np.integer))
        or step_minutes <= 0
        or interval % step_minutes
    ):
        raise ValueError(
            f"time step {step_minutes!r} min must be a whole number of minutes that divides "
            f"the weather records' interval of {interval} min (e.g. 60, 30, 20, 15, 10, 5)"
        )


@dataclass(frozen=True, eq=False)
class SunSteps:
    """The time steps of a climate's year and the sun at each (:func:`sun_steps`).

    Attributes
    ----------
    step_minutes : int [min]
    stamps : pandas.DatetimeIndex
        Step-ending stamps, local standard time.
    sun_times : pandas.DatetimeIndex
        Representative sun time of each step (see :func:`step_times`).
    altitude, azimuth : ndarray [deg]
        Apparent solar altitude and azimuth at the sun times.
    """

    step_minutes: int
    stamps: pd.DatetimeIndex
    sun_times: pd.DatetimeIndex
    altitude: np.ndarray
    azimuth: np.ndarray


def sun_steps(climate: Climate, step_minutes: int, *,
              ephemeris: Ephemeris | None = None) -> SunSteps:
    """Stamps, representative sun times and sun positions of every step of the year.

    Parameters
    ----------
    climate : Climate
    step_minutes : int [min]
        Must divide ``climate.interval``.
    ephemeris : Ephemeris, optional
        Caller-owned memo (see :class:`Ephemeris`).

    Returns
    -------
    SunSteps
        The rule of :func:`step_times`; positions equal
        ``solar_position(sun_times, climate.site)`` bit for bit.
    """
    stamps, sun_times, altitude, azimuth = _step_sun(
        *_step_key(climate, step_minutes), ephemeris=ephemeris)
    return SunSteps(step_minutes, stamps, sun_times, altitude, azimuth)


def step_times(climate: Climate, step_minutes: int) -> tuple[pd.DatetimeIndex, pd.DatetimeIndex]:
    """Step-ending stamps of the year and the representative sun time of each step.

    Parameters
    ----------
    climate : Climate
    step_minutes : int [min]
        Must divide ``climate.interval``.

    Returns
    -------
    stamps : pandas.DatetimeIndex
        Step-ending stamps covering the climate's year, local standard time.
    sun_times : pandas.DatetimeIndex
        The middle of each step; in the steps holding sunrise or sunset, the
        middle of the sunlit part (sunlit: apparent altitude > 0), found by
        bisection to ~0.2 s.

    Notes
    -----
    With hourly steps the record stamped 12:00 (average over 11:00-12:00) takes
    the sun at 11:30 local standard time (common practice; DESIGN §2.4).
    Computes the positions too (:func:`sun_steps` returns all of it).
    """
    steps = sun_steps(climate, step_minutes)
    return steps.stamps, steps.sun_times


def step_sun(climate: Climate) -> tuple[np.ndarray, np.ndarray]:
    """Apparent solar altitude and azimuth [deg] at each record's representative sun time.

    Parameters
    ----------
    climate : Climate
        Hourly or resampled (:func:`resample`); its own interval is the step.

    Returns
    -------
    altitude, azimuth : ndarray [deg]
        One per record (see :func:`step_times`); equal to
        ``solar_position(step_times(climate, climate.interval)[1], climate.site)``.
    """
    steps = sun_steps(climate, climate.interval)
    return steps.altitude, steps.azimuth


def daylight_steps(climate: Climate, steps: SunSteps | None = None) -> np.ndarray:
    """The steps that count as EN 17037 daylight hours: sun up at the middle of the step.

    Parameters
    ----------
    climate : Climate
        Hourly or resampled (:func:`resample`); its own interval is the step.
    steps : SunSteps, optional
        ``sun_steps(climate, climate.interval)`` when the caller has it already.

    Returns
    -------
    ndarray of bool (n_steps,)
        True where the apparent altitude of the sun's centre is above 0° at the
        geometric middle of the step (11:30 for the hourly record stamped 12:00).

    Notes
    -----
    EN 17037:2018 sets its illuminance targets "for half of the daylight
    hours" (wording from memory). A step is one whole daylight hour (or step)
    or none, decided by the sun at its middle, so the counts stay whole numbers
    and the 50 % test stays an exact ratio. Rounding each sunrise and sunset to
    the nearest step middle errs by less than half a step either way, and the
    errors cancel over a year as the sunrise time drifts through the hour: 4,445
    hourly steps at pvlib's Greensboro TMY3 site against 4,448.5 sunlit hours
    from pvlib's own sunrise and sunset times (``tests/test_sun.py``).

    This is *not* the test of :func:`step_sun`'s representative time, which at
    sunrise and sunset is the middle of the sunlit part: there every step with
    any sun is above the horizon (it must get its sky and sun), which counted
    4,788 daylight steps at Greensboro and diluted every EN 17037 time share by
    about 8 %.
    """
    if steps is None:
        steps = sun_steps(climate, climate.interval)
    middle = steps.stamps - pd.Timedelta(minutes=climate.interval) / 2
    up = steps.altitude > 0.0
    moved = np.flatnonzero(np.asarray(steps.sun_times != middle))  # sunrise and sunset steps
    if moved.size:
        up[moved] = solar_position(middle[moved], climate.site)[0] > 0.0
    return up


def _step_key(climate: Climate, step_minutes: int) -> tuple[Site, pd.Timestamp, int, int]:
    _check_step(climate.interval, step_minutes)
    start = climate.time[0] - pd.Timedelta(minutes=climate.interval)
    return climate.site, start, len(climate) * climate.interval // step_minutes, step_minutes


_BISECTIONS = 14  # 3600 s / 2**14 ≈ 0.2 s: sunrise/sunset crossing resolution of an hour step
_HOUR_ANGLE_RATE = 7.3e-5
"""Bound [rad/s] on the rate of the sun's hour angle: 2π per solar day, 7.27e-5,
plus the drift of the equation of time (< 1e-3 of it) and margin."""


def _step_sun(
    site: Site, start: pd.Timestamp, n: int, step_minutes: int, *,
    ephemeris: Ephemeris | None = None,
) -> tuple[pd.DatetimeIndex, pd.DatetimeIndex, np.ndarray, np.ndarray]:
    """Stamps, sun times, apparent altitude and azimuth [deg] of ``n`` steps from ``start``.

    The rule of :func:`step_times`, worked out with three savings that leave
    every number as the direct computation (SPA at every step boundary, 14
    bisections per sunrise and sunset step, SPA at every sun time) gives it:

    1. Whether the sun is up at a step boundary is computed only near the
       horizon. With ``z`` the sine of the airless altitude,
       ``z = sin φ sin δ + cos φ cos δ cos H``, so ``|d⁴z/dt⁴| ≤ ω⁴`` and
       ``|d²z/dt²| ≤ ω²`` (ω: rate of the hour angle H; the slow declination δ
       and the parallax add < 1 % to these bounds). Cubic interpolation of
       ``z`` from the four nearest mid-steps is then within ``(9/384)(ωΔ)⁴`` of
       it (Lagrange remainder; Δ: step [s]; linear: ``(ωΔ)²/8``, next to the
       year's ends). A boundary whose estimate lies farther than twice that
       from the band where the apparent altitude can change sign (airless
       altitude -0.83° to 0°: pvlib's refraction switch) takes the sign of the
       estimate; the others, and the year's first and last, are computed.
    2. Within one step (≤ 1 h) the apparent altitude changes sign at most once
       (its daily extremes are 12 h apart and refraction keeps the order of
       altitudes), so the sunlit test is monotonic across a sunrise or sunset
       step and the 14 halvings keep the dyadic cell that holds the crossing
       instant. The instant is estimated (a cubic through four mid-steps, one
       Newton and one secant step on the exact altitude) and the halvings are
       replayed with the estimate. The cell is confirmed by the sunlit test at
       both its ends, known from the step's ends or from the two exact
       evaluations where those lie inside the cell on the right side, else
       computed. Unconfirmed steps (a poor estimate) are bisected as before.
    3. The sun at a mid-step is the same whether or not the step holds sunrise;
       only the sunrise and sunset steps are recomputed.

    Nothing is kept: callers that need the steps again keep the result
    (:func:`sun_steps`, ``resample(..., steps=)``).
    """
    step = pd.Timedelta(minutes=step_minutes)
    width = 60.0 * step_minutes  # [s]
    stamps = pd.date_range(start + step, periods=n, freq=step)
    t0 = np.arange(n) * width  # [s] from start
    t1 = t0 + width
    mid = 0.5 * (t0 + t1)
    altitude, azimuth, airless = _solar_position(_sun_times(start, mid), site,
                                                 ephemeris=ephemeris)
    z = np.sin(np.radians(airless))

    lit = _lit_boundaries(start, site, width, z)
    cross = np.flatnonzero(lit[:-1] != lit[1:])
    if cross.size:
        rising = lit[1:][cross]
        a, b = _crossing_cells(start, site, width, cross, rising, z)
        t_cross = 0.5 * (a + b)
        mid[cross] = np.where(rising, 0.5 * (t_cross + t1[cross]), 0.5 * (t0[cross] + t_cross))
    sun_times = _sun_times(start, mid)
    if cross.size:
        altitude[cross], azimuth[cross], _ = _solar_position(sun_times[cross], site,
                                                             ephemeris=ephemeris)
    return stamps, sun_times, altitude, azimuth


def _sun_times(start: pd.Timestamp, seconds: np.ndarray) -> pd.DatetimeIndex:
    """Instants ``seconds`` after ``start``, rounded to the microsecond."""
    return pd.DatetimeIndex(start + pd.to_timedelta(np.round(seconds * 1e6), unit="us"))


def _apparent(start: pd.Timestamp, site: Site, seconds: np.ndarray) -> np.ndarray:
    """Apparent altitude [deg] at instants ``seconds`` after ``start`` (one-off probes)."""
    times = pd.DatetimeIndex(start + pd.to_timedelta(seconds, unit="s"))
    return _solar_position(times, site)[0]


def _lit_boundaries(start: pd.Timestamp, site: Site, width: float, z: np.ndarray) -> np.ndarray:
    """Sunlit (apparent altitude > 0) at the ``n + 1`` step boundaries.

    ``z`` is the sine of the airless altitude at the ``n`` mid-steps; saving 1
    of :func:`_step_sun`.
    """
    z_edge = np.full(z.size + 1, np.nan)  # boundary k lies between mid-steps k - 1 and k
    error = np.full(z.size + 1, np.inf)
    z_edge[1:-1] = 0.5 * (z[:-1] + z[1:])
    error[1:-1] = (_HOUR_ANGLE_RATE * width) ** 2 / 8.0
    z_edge[2:-2] = (9.0 * (z[1:-2] + z[2:-1]) - z[:-3] - z[3:]) / 16.0
    error[2:-2] = 9.0 / 384.0 * (_HOUR_ANGLE_RATE * width) ** 4
    switch = np.sin(np.radians(-(0.26667 + _REFRACTION)))  # pvlib's refraction switch
    lit = z_edge > 2.0 * error
    near = np.flatnonzero(~(lit | (z_edge < switch - 2.0 * error)))  # NaN ends included
    lit[near] = _apparent(start, site, near * width) > 0
    return lit


def _crossing_cells(
    start: pd.Timestamp,
    site: Site,
    width: float,
    cross: np.ndarray,
    rising: np.ndarray,
    z: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """Final bisection cells [s from start] of the sunrise and sunset steps ``cross``.

    The cells :func:`_bisect` finds, by saving 2 of :func:`_step_sun`.
    """
    t0, t1 = cross * width, (cross + 1) * width
    if z.size < 4:
        return _bisect(start, site, t0, t1, rising)
    guess, rate = _crossing_guess(site, width, cross, z)
    e_guess = _apparent(start, site, guess)
    step = np.divide(e_guess, rate, out=np.zeros_like(rate), where=rate != 0)
    newton = np.clip(guess - step, t0, t1)
    e_newton = _apparent(start, site, newton)
    de = e_newton - e_guess
    step = np.divide(e_newton * (newton - guess), de, out=np.zeros_like(de), where=de != 0)
    estimate = np.clip(newton - step, t0, t1)

    a, b = t0.copy(), t1.copy()
    for _ in range(_BISECTIONS):  # the halvings of _bisect, decided by the estimate
        m = 0.5 * (a + b)
        left = m > estimate  # the crossing lies in [a, m]
        b = np.where(left, m, b)
        a = np.where(left, a, m)

    # a confirmed cell has the sunlit test ≠ rising at a and = rising at b; a probe
    # at p ≥ a with the test ≠ rising shows it at a (monotonic test), likewise at b
    known_a, known_b = a == t0, b == t1
    for p, e in ((guess, e_guess), (newton, e_newton)):
        known_a |= ((e > 0) != rising) & (p >= a)
        known_b |= ((e > 0) == rising) & (p <= b)
    ask_a, ask_b = np.flatnonzero(~known_a), np.flatnonzero(~known_b)
    lit = _apparent(start, site, np.concatenate([a[ask_a], b[ask_b]])) > 0
    confirmed = np.ones(cross.size, dtype=bool)
    confirmed[ask_a] &= lit[: ask_a.size] != rising[ask_a]
    confirmed[ask_b] &= lit[ask_a.size :] == rising[ask_b]
    redo = np.flatnonzero(~confirmed)
    if redo.size:
        a[redo], b[redo] = _bisect(start, site, t0[redo], t1[redo], rising[redo])
    return a, b


# monomial coefficients of the cubic through values at u = -1.5, -0.5, 0.5, 1.5
_CUBIC = np.linalg.inv(np.vander([-1.5, -0.5, 0.5, 1.5], 4, increasing=True))


def _crossing_guess(
    site: Site, width: float, cross: np.ndarray, z: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Estimated instant [s from start] of apparent altitude 0 in the steps ``cross``.

    Also returns the estimated rate [deg/s] of the apparent altitude there.
    From the cubic through ``z`` (sine of the airless altitude) at the four
    mid-steps around each step, solved for the airless altitude at which the
    apparent altitude is 0 (pvlib's refraction at the site's pressure).
    """
    spa = pvlib.spa
    pressure = float(pvlib.atmosphere.alt2pres(site.elevation)) / 100.0  # [hPa]

    def apparent(e0):
        return e0 + spa.atmospheric_refraction_correction(pressure, TEMPERATURE, e0, _REFRACTION)

    lo, hi = -(0.26667 + _REFRACTION), 0.0
    for _ in range(40):  # apparent(e0) is increasing: bisect for its zero
        m = 0.5 * (lo + hi)
        lo, hi = (lo, m) if apparent(m) > 0 else (m, hi)
    e0_c = 0.5 * (lo + hi)
    refraction_rate = (apparent(e0_c + 1e-6) - apparent(e0_c - 1e-6)) / 2e-6
    z_c = np.sin(np.radians(e0_c))

    first = np.clip(cross - 1, 0, z.size - 4)  # mid-steps first .. first + 3
    coef = z[first[:, None] + np.arange(4)] @ _CUBIC.T  # (m, 4), in u = x - first - 2
    lo_u, hi_u = cross - first - 2.0, cross - first - 1.0  # the step, x in steps from start
    u = 0.5 * (lo_u + hi_u)
    for _ in range(8):  # Newton, kept inside the step
        value = coef[:, 0] + u * (coef[:, 1] + u * (coef[:, 2] + u * coef[:, 3])) - z_c
        slope = coef[:, 1] + u * (2.0 * coef[:, 2] + 3.0 * u * coef[:, 3])
        step = np.divide(value, slope, out=np.zeros_like(u), where=slope != 0)
        u = np.clip(u - step, lo_u, hi_u)
    dz_dt = slope / width
    rate = np.degrees(dz_dt / np.cos(np.radians(e0_c))) * refraction_rate
    return (u + first + 2.0) * width, rate


def _bisect(
    start: pd.Timestamp, site: Site, a: np.ndarray, b: np.ndarray, rising: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Bisect [a, b] [s from start] on the sunlit test ``_BISECTIONS`` times.

    Four halvings per evaluation: the sunlit test is computed at all 15
    midpoints of the next four levels (the same floats the one-by-one halving
    forms) and the halving path then follows the tests at its own midpoints,
    so the cells are exactly those of halving one midpoint at a time.
    """
    a, b = a.copy(), b.copy()
    done = 0
    while done < _BISECTIONS:
        depth = min(4, _BISECTIONS - done)
        lo, hi, mids = a[:, None], b[:, None], []
        for _ in range(depth):  # midpoints level by level, children in order
            m = 0.5 * (lo + hi)
            mids.append(m)
            lo = np.stack([lo, m], axis=2).reshape(len(a), -1)
            hi = np.stack([m, hi], axis=2).reshape(len(a), -1)
        points = np.concatenate(mids, axis=1)  # (n, 2**depth - 1), level by level
        lit = (_apparent(start, site, points.ravel()) > 0).reshape(points.shape)
        node = np.zeros(len(a), dtype=np.intp)  # position within the level
        rows = np.arange(len(a))
        for level in range(depth):
            at = 2**level - 1 + node
            m = points[rows, at]
            left = lit[rows, at] == rising  # the crossing lies in [a, m]
            b = np.where(left, m, b)
            a = np.where(left, a, m)
            node = 2 * node + ~left
        done += depth
    return a, b


def resample(climate: Climate, step_minutes: int, *, steps: SunSteps | None = None) -> Climate:
    """Sub-hourly climate records by time interpolation.

    Parameters
    ----------
    climate : Climate
        Records averaged over the interval ending at their stamp.
    step_minutes : int [min]
        Must divide ``climate.interval``; equal to it returns ``climate`` itself.
    steps : SunSteps, optional
        ``sun_steps(climate, step_minutes)`` when the caller has it already
        (otherwise worked out here).

    Returns
    -------
    Climate
        ``interval = step_minutes``, step-ending stamps (:func:`step_times`).

    Notes
    -----
    1. Each record is placed at the middle of its interval; values at the
       middle of every sub-step are interpolated linearly in time (periodic over
       the year, skipping missing records).
    2. Irradiance and illuminance are set to zero in steps where the sun is
       down (apparent altitude ≤ 0 at the step's representative sun time).
    3. They are then scaled per original record so that the mean over its
       sub-steps equals the record's value (energy conserved exactly), unless
       every sub-step is dark, in which case the (twilight) energy is dropped.
    Dew point is interpolated only. A sub-step is valid where its record is.
    """
    _check_step(climate.interval, step_minutes)
    if step_minutes == climate.interval:
        return climate
    k = climate.interval // step_minutes
    n_rec = len(climate)
    if steps is None:
        steps = sun_steps(climate, step_minutes)
    elif steps.step_minutes != step_minutes or len(steps.stamps) != len(climate) * k:
        raise ValueError(f"steps were worked out for {len(steps.stamps)} steps of "
                         f"{steps.step_minutes} min, not this climate at {step_minutes} min")
    stamps, altitude = steps.stamps, steps.altitude
    dark = altitude <= 0
    x_rec = (np.arange(n_rec) + 0.5) * climate.interval  # [min] from the year's start
    x_step = (np.arange(n_rec * k) + 0.5) * step_minutes
    period = n_rec * climate.interval
    out: dict[str, np.ndarray] = {}
    valid: dict[str, np.ndarray] = {}
    for name in QUANTITIES:
        v = getattr(climate, name)
        ok = climate.valid[name]
        valid[name] = np.repeat(ok, k)
        if not ok.any():
            out[name] = np.full(n_rec * k, np.nan)
            continue
        s = np.interp(x_step, x_rec[ok], v[ok], period=period)
        if name in IRRADIANCE or name in ILLUMINANCE:
            s = np.where(dark, 0.0, s).reshape(n_rec, k)
            mean = s.mean(axis=1)
            scale = np.divide(v, mean, out=np.zeros(n_rec), where=ok & (mean > 0))
            s = (s * scale[:, None]).ravel()
        out[name] = np.where(valid[name], s, np.nan)
    return dataclasses.replace(
        climate, time=stamps, interval=step_minutes, valid=valid, **out
    )


# --------------------------------------------------------------------------- sun points

DEFAULT_SPACING = 1.5
"""Default angular spacing [deg] of :class:`SunPoints` (11,055 points).

Measured at 10,000 random suns: interpolating n·s (any normal) is within
1.4e-4 of exact; with the back side clamped, max(0, n·s) for vertical or
tilted normals, the kink along n·s = 0 gives up to 0.68 % (bound h/4 for edge
h; 1.0° spacing, 24,378 points, brings it to 0.50 %), mean error < 0.05 %.
"""


class SunPoints:
    """A dense set of sun directions over the upper hemisphere, with interpolation.

    Parameters
    ----------
    spacing : float [deg]
        Angular distance between neighbouring points (triangle edge length).

    Notes
    -----
    Points lie on rings of constant altitude, ``spacing·√3/2`` apart (adjusted
    to reach the zenith exactly), from the horizon (altitude 0) to a single
    point at the zenith, each ring holding ``round(360 cos(alt)/spacing)``
    points at equal azimuth steps, alternate rings offset by half a step, so
    the triangles are nearly equilateral. One more ring one band *below* the
    horizon closes the triangulation: because a ring lies exactly on the
    horizon and spherical triangle edges are great-circle arcs, every direction
    with altitude ≥ 0 falls in a triangle of points at altitude ≥ 0, and the
    below-horizon ring never receives weight from a sun above the horizon.

    The triangulation is the Delaunay triangulation of the points'
    stereographic projection from the nadir (which equals the spherical
    Delaunay triangulation, as the projection maps circles to circles). A
    direction's weights are its barycentric coordinates in the flat triangle
    through the three points, along the ray from the origin (gnomonic
    barycentric coordinates), normalised to sum to one: non-negative inside the
    spherical triangle, exactly (1, 0, 0) at a point. Triangles are found from
    the ring structure (altitude band, azimuth) and a short walk
    (:class:`_Triangulation`), about 30 ms for 210,000 directions at 1.5°.

    Directions are in the building frame; azimuth from building +y.
    """

    def __init__(self, spacing: float = DEFAULT_SPACING) -> None:
        if not 0.05 <= spacing <= 30.0:
            raise ValueError(f"sun point spacing {spacing!r} deg must lie in 0.05-30")
        self.spacing = float(spacing)
        self.directions = _ring_points(self.spacing)

    @property
    def n(self) -> int:
        """Number of sun points."""
        return len(self.directions)

    def __getstate__(self) -> dict:
        return {"spacing": self.spacing}

    def __setstate__(self, state: dict) -> None:
        self.__init__(state["spacing"])

    def __repr__(self) -> str:
        return f"SunPoints(spacing={self.spacing:g}, n={self.n})"

    @cached_property
    def _triangulation(self) -> _Triangulation:
        return _triangulation(self.spacing)

    def weights(self, directions) -> tuple[np.ndarray, np.ndarray]:
        """Interpolation points and weights for directions.

        Parameters
        ----------
        directions : array_like, shape (m, 3)
            Unit (or any positive length) vectors in the building frame.

        Returns
        -------
        index : ndarray of int32, shape (m, 3)
            The three sun points of the triangle holding each direction.
        weight : ndarray of float64, shape (m, 3)
            Barycentric weights, ≥ 0, summing to 1. Directions below the
            covered cap (altitude below the lowest ring) get index 0 and
            weight 0.
        """
        s = np.asarray(directions, dtype=np.float64).reshape(-1, 3)
        s = s / np.linalg.norm(s, axis=1, keepdims=True)
        t = self._triangulation
        index = np.zeros((len(s), 3), dtype=np.int32)
        weight = np.zeros((len(s), 3))
        for lo in range(0, len(s), _CHUNK):
            part = slice(lo, lo + _CHUNK)
            index[part], weight[part] = t.locate(s[part])
        return index, weight


_CHUNK = 65536  # directions per block in SunPoints.weights (bounds temporary memory)


class _Triangulation:
    """Spherical triangulation of sun points with two exact locators.

    :meth:`find` (used): a direction's altitude band between two rings (the
    triangulation links only neighbouring rings, checked here) and its
    azimuth pick a triangle from a table made at build time; a walk across
    the edge opposite the most negative weight (Lawson's visibility walk on
    the Delaunay triangulation) then ends, usually at once, in the triangle
    whose gnomonic barycentric weights are all ≥ 0. Directions it does not
    settle within a few steps, or that lie on an edge, go to :meth:`find_near`.

    :meth:`find_near` (reference; builds the table): the triangles around the
    nearest sun point (k-d tree) are tested with gnomonic barycentric
    coordinates and the best taken; the rare rest is located by a walk over
    the Delaunay triangulation of the stereographic projection.

    Both return the triangle holding the direction. On an edge or a vertex
    (a weight below 1e-12) any triangle meeting there holds it; :meth:`find`
    then defers to :meth:`find_near`, so the choice is always the same.

    References: Devillers, O., Pion, S. and Teillaud, M., "Walking in a
    triangulation", International Journal of Foundations of Computer Science
    13(2), 181-199, 2002, https://doi.org/10.1142/S0218195902000797 (the
    visibility walk; from memory).
    """

    def __init__(self, points: np.ndarray) -> None:
        self.points = points
        self.delaunay = Delaunay(_stereographic(points))
        self.simplices = self.delaunay.simplices.astype(np.int32)
        corners = points[self.simplices]  # (F, 3 corners, 3 xyz)
        self.inverse = np.linalg.inv(np.swapaxes(corners, 1, 2))  # solves [A B C] w = s
        self.tree = cKDTree(points)
        owner = np.repeat(np.arange(len(self.simplices)), 3)
        vertex = self.simplices.ravel()
        order = np.argsort(vertex, kind="stable")
        vertex, owner = vertex[order], owner[order]
        count = np.bincount(vertex, minlength=len(points))
        first = np.concatenate([[0], np.cumsum(count)[:-1]])
        slot = np.arange(len(vertex)) - first[vertex]
        self.around = np.full((len(points), count.max()), -1, dtype=np.int64)
        self.around[vertex, slot] = owner  # triangles around each point, padded with -1
        self.z_min = points[:, 2].min()
        self._build_table()

    def _build_table(self) -> None:
        """The triangle at the centre of each cell of a grid over every band.

        A band (between two rings) has ``_TABLE_LAYERS`` rows of equal height in
        z, each cut into ``_TABLE_BINS`` bins per triangle of the band along the
        pseudo-azimuth of :func:`_turn`. A lookup of ``_TABLE_Z`` equal slices of
        z gives the row (a guess: a slice across a ring costs a walk step).
        """
        self.ring_z = np.unique(self.points[:, 2])  # one z per ring, ascending; the zenith last
        ring = np.searchsorted(self.ring_z, self.points[:, 2])[self.simplices]
        band = ring.min(axis=1)
        self.banded = bool((ring.max(axis=1) - band == 1).all())  # only neighbouring rings
        bins = np.repeat(np.maximum(_TABLE_BINS * np.bincount(band), 8), _TABLE_LAYERS)
        start = np.concatenate([[0], np.cumsum(bins)[:-1]])
        row = np.repeat(np.arange(bins.size), bins)
        column = np.arange(bins.sum()) - start[row]
        band, layer = np.divmod(row, _TABLE_LAYERS)
        z0, z1 = self.ring_z[band], self.ring_z[band + 1]
        z = z0 + (z1 - z0) * (layer + 0.5) / _TABLE_LAYERS
        x, y = _unturn((column + 0.5) / bins[row])
        horizontal = np.sqrt(1.0 - z * z) / np.hypot(x, y)
        self.table = self.find_near(np.stack([x * horizontal, y * horizontal, z], axis=1))[0]
        # z slice -> row
        self.z_scale = _TABLE_Z / (1.0 - self.z_min)
        z_slice = self.z_min + (np.arange(_TABLE_Z) + 0.5) / self.z_scale
        band = np.searchsorted(self.ring_z, z_slice, side="right") - 1
        band = np.clip(band, 0, self.ring_z.size - 2)
        fraction = (z_slice - self.ring_z[band]) / (self.ring_z[band + 1] - self.ring_z[band])
        layer = np.minimum((fraction * _TABLE_LAYERS).astype(np.intp), _TABLE_LAYERS - 1)
        row = band * _TABLE_LAYERS + layer
        self.slice_start, self.slice_bins = start[row], bins[row]

    def _weights(self, simplex: np.ndarray, s: np.ndarray) -> np.ndarray:
        return np.einsum("...ij,...j->...i", self.inverse[simplex], s)

    def locate(self, s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        simplex, w, inside = self.find(s) if self.banded else self.find_near(s)
        w = np.clip(w, 0.0, None)
        w /= np.where(inside, w.sum(axis=1), 1.0)[:, None]
        w[~inside] = 0.0
        index = np.where(inside[:, None], self.simplices[simplex], 0)
        return index.astype(np.int32), w

    def find(self, s: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Triangle, raw weights and coverage of unit directions: table, then a walk."""
        z = s[:, 2]
        inside = z >= self.z_min - 1e-12
        k = np.clip(((z - self.z_min) * self.z_scale).astype(np.intp), 0, _TABLE_Z - 1)
        bins = self.slice_bins[k]
        column = np.minimum((_turn(s[:, 0], s[:, 1]) * bins).astype(np.intp), bins - 1)
        simplex = self.table[self.slice_start[k] + column]
        w = self._weights(simplex, s)
        todo = np.flatnonzero(inside & (_min3(w) < -1e-12))
        for _ in range(_WALK_STEPS):
            if not todo.size:
                break
            across = self.delaunay.neighbors[simplex[todo], np.argmin(w[todo], axis=1)]
            todo, across = todo[across >= 0], across[across >= 0]
            simplex[todo] = across
            w[todo] = self._weights(across, s[todo])
            todo = todo[_min3(w[todo]) < -1e-12]
        # unsettled, or on an edge (any triangle meeting there holds the direction):
        # the reference locator decides, so ties fall as they always did
        todo = np.union1d(todo, np.flatnonzero(inside & (_min3(w) < 1e-12)))
        if todo.size:
            simplex[todo], w[todo], inside[todo] = self.find_near(s[todo])
        return simplex, w, inside

    def find_near(self, s: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Triangle, raw weights and coverage of unit directions: nearest point's triangles."""
        _, nearest = self.tree.query(s)
        candidates = self.around[nearest]  # (m, D)
        w = self._weights(np.maximum(candidates, 0), s[:, None, :])  # (m, D, 3)
        score = np.where(candidates >= 0, w.min(axis=2), -np.inf)
        best = np.argmax(score, axis=1)
        rows = np.arange(len(s))
        simplex = candidates[rows, best]
        w = w[rows, best]
        inside = s[:, 2] >= self.z_min - 1e-12
        missed = np.flatnonzero(inside & (score[rows, best] < -1e-12))
        if missed.size:
            simplex[missed], w[missed], found = self._walk(s[missed])
            inside[missed] = found
        return simplex, w, inside

    def _walk(self, s: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Locate via the planar Delaunay triangulation, then step across edges."""
        simplex = self.delaunay.find_simplex(_stereographic(s))
        found = simplex >= 0
        simplex = np.where(found, simplex, 0)
        w = self._weights(simplex, s)
        # the planar (projected) triangle and the spherical one differ by a sliver
        # along each edge: step to the neighbour across the edge with a negative weight
        for _ in range(4):
            step = np.flatnonzero(found & (w.min(axis=1) < -1e-12))
            if not step.size:
                break
            across = self.delaunay.neighbors[simplex[step], np.argmin(w[step], axis=1)]
            move = across >= 0
            step, across = step[move], across[move]
            simplex[step] = across
            w[step] = self._weights(across, s[step])
        return simplex, w, found


_TABLE_LAYERS = 2  # rows per band in the locator's table
_TABLE_BINS = 1  # bins per row, per triangle of the band
_TABLE_Z = 8192  # slices of z mapped to table rows


def _min3(w: np.ndarray) -> np.ndarray:
    """Smallest of the three columns of ``w`` (faster than ``w.min(axis=1)``)."""
    return np.minimum(np.minimum(w[:, 0], w[:, 1]), w[:, 2])


def _turn(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """A pseudo-azimuth in [0, 1): increasing with the azimuth from -90° (−x) clockwise.

    ``d = x / (|x| + |y|)`` is -1 … 1 over the half with y ≥ 0 and runs back on
    the other half; no arc tangent. The horizontal direction ``(0, 0)`` gives 0.25.
    """
    d = x / np.maximum(np.abs(x) + np.abs(y), 1e-300)
    return np.where(y >= 0.0, d + 1.0, 3.0 - d) / 4.0


def _unturn(turn: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """A horizontal direction ``(x, y)`` (not unit) of pseudo-azimuth ``turn``."""
    p = 4.0 * turn - 1.0
    d = np.where(p <= 1.0, p, 2.0 - p)
    return d, np.where(p <= 1.0, 1.0, -1.0) * (1.0 - np.abs(d))
_WALK_STEPS = 8  # walk steps before a direction goes to the nearest-point locator


@functools.lru_cache(maxsize=4)
def _triangulation(spacing: float) -> _Triangulation:
    """The triangulation of the sun points of a spacing, built once per process.

    Every series task builds its own :class:`SunPoints`; the triangulation
    (0.2 s at 1.5°) depends on the spacing alone and is only read.
    """
    return _Triangulation(_ring_points(spacing))


def _ring_points(spacing: float) -> np.ndarray:
    """Sun point directions on altitude rings (see :class:`SunPoints`)."""
    n_bands = int(np.ceil(90.0 / (spacing * np.sqrt(3.0) / 2.0)))
    band = 90.0 / n_bands
    rings = []
    for k in range(-1, n_bands):
        alt = k * band
        count = max(3, round(360.0 * np.cos(np.radians(alt)) / spacing))
        az = (np.arange(count) + 0.5 * (k % 2)) * (360.0 / count)
        rings.append(direction(az, np.full(count, alt)))
    rings.append(np.array([[0.0, 0.0, 1.0]]))
    return np.concatenate(rings)


def _stereographic(v: np.ndarray) -> np.ndarray:
    """Stereographic projection from the nadir onto the horizontal plane (no unit)."""
    return v[:, :2] / (1.0 + v[:, 2:3])


__all__ = [
    "DEFAULT_SPACING",
    "TEMPERATURE",
    "Ephemeris",
    "SunPoints",
    "SunSteps",
    "azimuth_altitude",
    "daylight_steps",
    "direction",
    "resample",
    "solar_position",
    "step_sun",
    "step_times",
    "sun_steps",
    "to_building_azimuth",
    "to_building_frame",
]
