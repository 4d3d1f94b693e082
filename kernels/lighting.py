"""Electric lighting with daylight-linked control: power fractions and annual energy.

A space's electric lighting tops the daylight up to a target illuminance at its
control point. Per time step the control sets the lighting power as a fraction
of the installed power; over the occupied steps the fractions add up to the
annual energy:

    W = p · Σ_t F_P(E_t) · Δt / 1000            [kWh/m² per year]

with p the lighting power density [W/m²], E_t the daylight illuminance at the
control point [lx] and Δt the step length [h] (the lighting energy indicator of
EN 15193-1:2017 is built the same way: installed power × operating hours ×
dependency factors; from memory).

Controls (:data:`CONTROLS`):

``none``
    Lights at full power whenever the space is occupied: F_P = 1.
``on_off``
    Off when daylight alone meets the target (E ≥ target), else full power.
``dimming``
    Continuous dimming: the light output needed is f_L = max(0, 1 − E/target);
    power follows it linearly from ``min_power`` at ``min_light`` (and below) to
    1 at full output, F_P = P_min + (1 − P_min)(f_L − L_min)/(1 − L_min), never
    off (the ballast keeps its minimum) — the usual linear dimming model
    (common practice; IES Lighting Handbook, from memory).
``dimming_off``
    As ``dimming``, but off when no electric light is needed (f_L = 0).

All functions are elementwise over any array shape, so the sum over time of
:func:`power_fraction` is additive over time chunks like the daylight metrics.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "CONTROLS",
    "annual_energy",
    "control_daylight",
    "control_illuminance",
    "light_output_fraction",
    "lighting_hours",
    "median_sensor",
    "nearest_sensor",
    "power_fraction",
    "saving_percent",
    "shading_closed_scaled",
]

CONTROLS = ("none", "on_off", "dimming", "dimming_off")
"""The daylight-linked lighting controls :func:`power_fraction` knows."""


def light_output_fraction(daylight: np.ndarray, target: float) -> np.ndarray:
    """Share of the electric light output needed to top daylight up to the target.

    Parameters
    ----------
    daylight : ndarray [lx]
        Daylight illuminance at the control point.
    target : float [lx]
        Target (maintained) illuminance, > 0.

    Returns
    -------
    ndarray [-]
        max(0, 1 − E / target), in [0, 1].
    """
    return np.clip(1.0 - np.asarray(daylight, dtype=np.float64) / target, 0.0, 1.0)


def power_fraction(daylight: np.ndarray, target: float, control: str = "dimming",
                   min_power: float = 0.1, min_light: float = 0.1) -> np.ndarray:
    """Lighting power as a fraction of the installed power, per step.

    Parameters
    ----------
    daylight : ndarray [lx]
        Daylight illuminance at the control point.
    target : float [lx]
        Target illuminance, > 0.
    control : {"none", "on_off", "dimming", "dimming_off"}
        See the module docstring.
    min_power : float [-]
        Power fraction of dimmed lights at (and below) ``min_light`` output.
    min_light : float [-]
        Lowest light output fraction the dimmer reaches, in [0, 1).

    Returns
    -------
    ndarray [-]
        F_P in [0, 1], the shape of ``daylight``.
    """
    e = np.asarray(daylight, dtype=np.float64)
    if control == "none":
        return np.ones_like(e)
    if control == "on_off":
        return np.where(e >= target, 0.0, 1.0)
    if control not in ("dimming", "dimming_off"):
        raise ValueError(f"unknown lighting control {control!r}; choose one of "
                         + ", ".join(CONTROLS))
    needed = light_output_fraction(e, target)
    ramp = min_power + (1.0 - min_power) * (needed - min_light) / (1.0 - min_light)
    fraction = np.where(needed <= min_light, min_power, ramp)
    if control == "dimming_off":
        fraction = np.where(needed <= 0.0, 0.0, fraction)
    return fraction


def control_illuminance(illuminance: np.ndarray, sensor: int | None = None) -> np.ndarray:
    """Daylight at the control point: the grid median per step, or one sensor.

    Parameters
    ----------
    illuminance : ndarray (..., n_sensors, n_steps) [lx]
    sensor : int, optional
        Index of the control sensor; None takes the median over the sensors at
        every step (a control point that sees the grid's typical daylight).

    Returns
    -------
    ndarray (..., n_steps) [lx]
    """
    e = np.asarray(illuminance)
    if sensor is None:
        return np.median(e, axis=-2)
    return e[..., sensor, :]


def annual_energy(fraction_hours: np.ndarray, power_density: float | np.ndarray) -> np.ndarray:
    """Annual lighting energy per floor area from the summed power fractions.

    Parameters
    ----------
    fraction_hours : ndarray [h]
        Σ_t F_P,t Δt over the occupied steps of the year (full-power-equivalent
        hours).
    power_density : float or ndarray [W/m²]
        Installed lighting power density.

    Returns
    -------
    ndarray [kWh/m²]
    """
    return power_density * np.asarray(fraction_hours, dtype=np.float64) / 1000.0


# ---------------------------------------------------------------------------
# a building's spaces over a year, block by block


def median_sensor(values: np.ndarray, space: np.ndarray) -> np.ndarray:
    """The sensor of each space whose value is the space's (lower) median.

    A photosensor sits at one point and reads it all year: with the control
    point "median" the engine takes the sensor whose daylight factor is the
    median of its space's, so the control point is typical of the space and
    fixed (it does not move with the weather, as a per-step median would).

    Parameters
    ----------
    values : ndarray (..., n_sensors)
        Per-sensor values (e.g. daylight factor [%]).
    space : ndarray (n_sensors,) of int
        Index of each sensor's space (0 … n_spaces − 1, every index present).

    Returns
    -------
    ndarray (..., n_spaces) of intp
        Sensor index (into the whole grid) of the value of rank ⌊(n − 1)/2⌋
        among the space's n sensors (the lower median for even n), ties in
        sensor order (stable sort).
    """
    v = np.asarray(values)
    own = np.asarray(space)
    n_spaces = int(own.max()) + 1
    out = np.empty((*v.shape[:-1], n_spaces), dtype=np.intp)
    for k in range(n_spaces):
        members = np.flatnonzero(own == k)
        order = np.argsort(v[..., members], axis=-1, kind="stable")
        out[..., k] = members[order[..., (members.size - 1) // 2]]
    return out


def nearest_sensor(point: np.ndarray, sensors: np.ndarray) -> int:
    """Index of the sensor nearest to a plan point (ties: the lowest index).

    Parameters
    ----------
    point : ndarray (2,) [m]
        x, y of the point.
    sensors : ndarray (n_sensors, >= 2) [m]
        Sensor positions; only x and y are used.

    Returns
    -------
    int
    """
    xy = np.asarray(sensors, dtype=np.float64)[:, :2]
    return int(np.argmin(np.sum((xy - np.asarray(point, dtype=np.float64)) ** 2, axis=1)))


def shading_closed_scaled(direct_sun: np.ndarray, space: np.ndarray,
                          transmittance: np.ndarray, sun_threshold: float = 1000.0,
                          sensor_fraction: float = 0.02) -> np.ndarray:
    """:func:`kernels.metrics.shading_closed` for variants that scale one unit-transmittance series.

    The variants' direct sun is ``transmittance[v] × direct_sun`` (formed in the
    series' precision, as :func:`kernels.timeseries.combine` forms it). A space's
    shading closes when at least m = ⌊f·n⌋ + 1 of its n sensors exceed the
    threshold (more than the share f, exactly); since fl(τ·x) never decreases as
    x grows, that holds exactly when fl(τ·x_(m)) exceeds it, x_(m) being the
    m-th largest unit value of the space in the step. So one partial sort per
    space and step serves every variant, instead of one comparison per sensor
    and variant.

    Parameters
    ----------
    direct_sun : ndarray (..., n_steps, n_sensors) [lx]
        Unit-transmittance direct sun, sensors last (the engine's layout).
    space : ndarray (n_sensors,) of int
    transmittance : ndarray (n_variants,)
    sun_threshold, sensor_fraction : float
        As in :func:`kernels.metrics.shading_closed`.

    Returns
    -------
    ndarray of bool (..., n_variants, n_spaces, n_steps)
        Identical to :func:`kernels.metrics.shading_closed` of the formed series (tested).
    """
    from luxsweep.kernels.metrics import _ratio

    d = np.asarray(direct_sun)
    own = np.asarray(space)
    n_spaces = int(own.max()) + 1
    num, den = _ratio(sensor_fraction)
    tau = np.asarray(transmittance, dtype=d.dtype).reshape(-1, 1)
    out = np.empty((*d.shape[:-2], tau.shape[0], n_spaces, d.shape[-2]), dtype=bool)
    for k in range(n_spaces):
        members = np.flatnonzero(own == k)
        n = members.size
        m = n * num // den + 1  # sensors above the threshold that close the shading
        mth = np.partition(d[..., members], n - m, axis=-1)[..., n - m]  # (..., n_steps)
        out[..., k, :] = mth[..., None, :] * tau > sun_threshold  # (..., n_variants, n_steps)
    return out


def control_daylight(total: np.ndarray, control_sensor: np.ndarray,
                     closed: np.ndarray | None = None,
                     total_shaded: np.ndarray | None = None) -> np.ndarray:
    """Daylight at each space's control sensor, the operable shading state applied.

    Parameters
    ----------
    total : ndarray (..., n_sensors, n_steps) [lx]
        Illuminance with the shading open.
    control_sensor : ndarray (..., n_spaces) of int
        Control sensor of each space (broadcast against the batch shape ``...``).
    closed : ndarray of bool (..., n_spaces, n_steps), optional
        Steps with the space's shading closed (:func:`kernels.metrics.shading_closed`).
    total_shaded : ndarray (..., n_sensors, n_steps) [lx], optional
        Illuminance with the shading closed; needed with ``closed``.

    Returns
    -------
    ndarray (..., n_spaces, n_steps) [lx]
        ``total`` at the control sensor, or ``total_shaded`` there where the
        space's shading is closed.
    """
    e = np.asarray(total)
    batch = e.shape[:-2]
    idx = np.asarray(control_sensor, dtype=np.intp)
    idx = np.broadcast_to(idx, (*batch, idx.shape[-1]))[..., None]
    out = np.take_along_axis(e, idx, axis=-2)
    if closed is None:
        return out
    if total_shaded is None:
        raise ValueError("closed shading steps need total_shaded")
    shut = np.take_along_axis(np.asarray(total_shaded), idx, axis=-2)
    return np.where(closed, shut, out)


def lighting_hours(daylight: np.ndarray, occupied: np.ndarray, step_hours: float,
                   target: np.ndarray, control: list[str], min_power: np.ndarray,
                   min_light: np.ndarray) -> np.ndarray:
    """Full-power-equivalent hours of one stretch of the year, per space (additive).

    Σ over the occupied steps of F_P(E_t) · Δt (:func:`power_fraction`), so
    stretches of the year add up and :func:`annual_energy` of the sum is the
    annual energy. Steps the engine skips (night: no daylight) count as
    E = 0, i.e. full power for every control: add Δt per occupied skipped step.

    Parameters
    ----------
    daylight : ndarray (..., n_spaces, n_steps) [lx]
        Daylight at each space's control point (:func:`control_daylight`).
    occupied : ndarray of bool (n_steps,)
        Occupied steps.
    step_hours : float [h]
        Length of every step.
    target : ndarray (n_spaces,) [lx]
    control : list of str (n_spaces)
        One of :data:`CONTROLS` per space.
    min_power, min_light : ndarray (n_spaces,) [-]
        Dimming limits per space (ignored by ``none`` and ``on_off``).

    Returns
    -------
    ndarray (..., n_spaces) float64 [h]
    """
    e = np.asarray(daylight)
    occ = np.asarray(occupied, dtype=bool)
    out = np.empty(e.shape[:-1], dtype=np.float64)
    for k, kind in enumerate(control):
        f = power_fraction(e[..., k, :][..., occ], float(target[k]), kind,
                           float(min_power[k]), float(min_light[k]))
        out[..., k] = f.sum(axis=-1) * step_hours
    return out


def saving_percent(energy: np.ndarray, uncontrolled: np.ndarray) -> np.ndarray:
    """Saving of a controlled installation against the same lights without control.

    Parameters
    ----------
    energy, uncontrolled : ndarray [kWh/m²]
        Annual energy with the control, and with lights at full power whenever
        the space is occupied (control ``none``). For a building pass the
        area-weighted means of both (:func:`kernels.metrics.area_weighted`),
        so the saving is that of the building's total energy.

    Returns
    -------
    ndarray [%]
        100 (1 − energy / uncontrolled); NaN where ``uncontrolled`` is 0 (no
        occupied time: nothing to save).
    """
    e = np.asarray(energy, dtype=np.float64)
    ref = np.asarray(uncontrolled, dtype=np.float64)
    shape = np.broadcast_shapes(e.shape, ref.shape)
    ratio = np.divide(e, ref, out=np.full(shape, np.nan), where=ref > 0)
    return 100.0 * (1.0 - ratio)
