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
    "control_illuminance",
    "light_output_fraction",
    "power_fraction",
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


def annual_energy(fraction_hours: np.ndarray, power_density: float) -> np.ndarray:
    """Annual lighting energy per floor area from the summed power fractions.

    Parameters
    ----------
    fraction_hours : ndarray [h]
        Σ_t F_P,t Δt over the occupied steps of the year (full-power-equivalent
        hours).
    power_density : float [W/m²]
        Installed lighting power density.

    Returns
    -------
    ndarray [kWh/m²]
    """
    return power_density * np.asarray(fraction_hours, dtype=np.float64) / 1000.0
