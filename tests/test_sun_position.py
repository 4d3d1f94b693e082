"""Solar position through split SPA steps and the per-instant ephemeris store (kernels.sun).

Reference: pvlib's ``get_solarposition(method='nrel_numpy')`` (NREL SPA, Reda &
Andreas 2004), called directly. ``kernels.sun.solar_position`` runs pvlib's
own SPA steps in two parts and keeps the site-free part per instant; the
claim checked here is that this changes no bit of the result.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pvlib
import pytest

from luxsweep.kernels import sun
from luxsweep.kernels.climate import Site
from luxsweep.kernels.sun import TEMPERATURE, solar_position

SITES = [
    Site("mid-latitude, west", 55.317, -160.517, 7.0, -9.0),
    Site("mid-latitude, east", 36.1, -79.9, 270.0, -5.0),
    Site("far south", -77.8, 166.7, 10.0, 12.0),
    Site("high, odd offset", 27.7, 85.3, 1300.0, 5.75),
]


def _pvlib(times, site, pressure=None, temperature=TEMPERATURE, delta_t=None):
    """Apparent elevation and azimuth [deg] straight from pvlib (the reference)."""
    times = pd.DatetimeIndex(times)
    if times.tz is None:
        times = times.tz_localize(site.tz)
    if pressure is None:
        pressure = float(pvlib.atmosphere.alt2pres(site.elevation))
    spa = pvlib.solarposition.get_solarposition(
        times, site.latitude, site.longitude, altitude=site.elevation, pressure=pressure,
        method="nrel_numpy", temperature=temperature, delta_t=delta_t,
    )  # fmt: skip
    return spa["apparent_elevation"].to_numpy(), spa["azimuth"].to_numpy()


@pytest.fixture
def fresh_store():
    """An ephemeris memo of the test's own (the kernels keep none)."""
    return sun.Ephemeris()


UNITS = ["s", "us", "ns"]


@pytest.mark.parametrize("site", SITES, ids=lambda s: s.name)
@pytest.mark.parametrize("unit", UNITS)
def test_bit_identical_to_pvlib_fresh_and_stored(site, unit, fresh_store):
    # random instants over 1985-2060 (ΔT from several polynomial pieces of pvlib's
    # calculate_deltat), in each pandas time unit: exact equality, no tolerance
    rng = np.random.default_rng([SITES.index(site), UNITS.index(unit)])
    seconds = rng.uniform(-38 * 365 * 86400, 37 * 365 * 86400, 1500)
    times = pd.DatetimeIndex(
        pd.Timestamp("2023-01-01", tz=site.tz) + pd.to_timedelta(np.round(seconds * 1e6), unit="us")
    ).as_unit(unit)
    ref_alt, ref_az = _pvlib(times, site)
    for _ in range(2):  # fresh, then every instant from the store
        altitude, azimuth = solar_position(times, site, ephemeris=fresh_store)
        np.testing.assert_array_equal(altitude, ref_alt)
        np.testing.assert_array_equal(azimuth, ref_az)
    assert len(fresh_store) == len(np.unique(times))


def test_options_and_naive_times_match_pvlib(fresh_store):
    # naive stamps are local standard time; explicit ΔT, pressure and temperature go
    # straight to the SPA (the SPA report's example values: 820 mbar, 11 degC, 67 s)
    site = SITES[0]
    times = pd.date_range("2023-06-01 00:30", periods=500, freq="37min")
    for kwargs in ({}, {"delta_t": 67.0}, {"pressure": 82000.0, "temperature": 11.0},
                   {"ephemeris": fresh_store}):
        altitude, azimuth = solar_position(times, site, **kwargs)
        kwargs.pop("ephemeris", None)
        ref_alt, ref_az = _pvlib(times, site, **kwargs)
        np.testing.assert_array_equal(altitude, ref_alt)
        np.testing.assert_array_equal(azimuth, ref_az)


def test_store_is_shared_by_sites_and_bounded(fresh_store):
    # two sites at whole-hour UTC offsets evaluate the sun at the same instants of the
    # year: the second finds the site-free part stored and still matches pvlib exactly
    a, b = SITES[0], SITES[1]
    hours = np.arange(2000) * 3600.0 + 1800.0
    times_a = pd.Timestamp("2023-01-01", tz=a.tz) + pd.to_timedelta(hours, unit="s")
    times_b = pd.Timestamp("2023-01-01 04:00", tz=b.tz) + pd.to_timedelta(hours, unit="s")
    solar_position(times_a, a, ephemeris=fresh_store)
    stored = len(fresh_store)
    assert stored == 2000
    altitude, azimuth = solar_position(times_b, b, ephemeris=fresh_store)
    assert len(fresh_store) == stored  # same UTC instants: nothing new
    ref_alt, ref_az = _pvlib(times_b, b)
    np.testing.assert_array_equal(altitude, ref_alt)
    np.testing.assert_array_equal(azimuth, ref_az)
    # bounded: a small store starts afresh instead of growing, and stays exact
    small = sun.Ephemeris(max_size=1000)
    unixtime = sun._unixtime(times_a)
    delta_t = sun._delta_t(times_a)
    for lo in range(0, 2000, 700):
        part = slice(lo, lo + 700)
        place = small(unixtime[part], delta_t[part])
        np.testing.assert_array_equal(place, sun._ephemeris(unixtime[part], delta_t[part]))
        assert len(small) <= 1000
