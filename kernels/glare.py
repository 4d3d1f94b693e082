"""Daylight glare probability by the simplified method, over the year.

The simplified daylight glare probability (Wienold 2009) predicts the share of
people disturbed by glare from the vertical illuminance at the eye alone:

    DGPs = 6.22 · 10⁻⁵ · E_v + 0.184

with ``E_v`` [lx] the illuminance on a vertical plane at eye height facing the
view direction. It leaves out the contrast term of the full DGP (the luminance
and size of each glare source against the background), so it holds only where
no direct sun and no specular reflection of it reaches the eye: a window seen
through shading or diffusing glazing, not a sunlit patch of sky in the field of
view. It underestimates glare from small bright sources in dim rooms and is
used here as a simplified estimate of glare, not an assessment.

Classes (Wienold 2009, from memory): imperceptible below 0.35, perceptible
0.35–0.40, disturbing 0.40–0.45, intolerable from 0.45. EN 17037:2018
protection from glare (Annex C, from memory): the DGP a space's view position
may exceed for at most 5 % of the occupied time is 0.45 for the minimum level,
0.40 for medium and 0.35 for high.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "CLASS_EDGES",
    "EXCEEDANCE",
    "LEVEL_LIMITS",
    "dgp_simplified",
    "glare_class",
    "glare_class_shares",
    "glare_level",
    "year_map",
]

DGPS_SLOPE = 6.22e-5
"""Slope of the simplified DGP [1/lx] (Wienold 2009)."""
DGPS_OFFSET = 0.184
"""Offset of the simplified DGP [-] (Wienold 2009)."""

CLASS_EDGES = (0.35, 0.40, 0.45)
"""DGP edges of the classes imperceptible | perceptible | disturbing | intolerable (from memory)."""

LEVEL_LIMITS = (0.45, 0.40, 0.35)
"""DGP not to be exceeded for EN 17037 levels 1, 2, 3 (minimum, medium, high; from memory)."""

EXCEEDANCE = 0.05
"""Share of the occupied time for which the limit may be exceeded (EN 17037, from memory)."""


def dgp_simplified(vertical_illuminance: np.ndarray) -> np.ndarray:
    """Simplified daylight glare probability from the vertical illuminance at the eye.

    Parameters
    ----------
    vertical_illuminance : array_like [lx]
        Illuminance at the eye on a plane facing the view direction.

    Returns
    -------
    ndarray [-]
        ``6.22e-5 E_v + 0.184`` (Wienold 2009), capped at 1 (a probability).
    """
    ev = np.asarray(vertical_illuminance, dtype=np.float64)
    return np.minimum(DGPS_SLOPE * ev + DGPS_OFFSET, 1.0)


def glare_class_shares(dgp: np.ndarray, occupied: np.ndarray) -> np.ndarray:
    """Share of the occupied time in each glare class.

    Parameters
    ----------
    dgp : ndarray (..., n_steps) [-]
        DGP per view and time step.
    occupied : ndarray (n_steps,) bool
        Occupied steps (the only ones counted).

    Returns
    -------
    ndarray (..., 4) [-]
        Shares of the occupied steps that are imperceptible, perceptible,
        disturbing and intolerable (:data:`CLASS_EDGES`, each edge belonging to
        the class above it); they sum to 1.
    """
    d = np.asarray(dgp)[..., np.asarray(occupied, dtype=bool)]
    cls = np.searchsorted(np.asarray(CLASS_EDGES), d, side="right")
    counts = np.stack([(cls == k).sum(axis=-1) for k in range(len(CLASS_EDGES) + 1)], axis=-1)
    return counts / max(d.shape[-1], 1)


def glare_level(dgp: np.ndarray, occupied: np.ndarray,
                exceedance: float = EXCEEDANCE) -> np.ndarray:
    """EN 17037 protection-from-glare level of each view.

    Parameters
    ----------
    dgp : ndarray (..., n_steps) [-]
    occupied : ndarray (n_steps,) bool
    exceedance : float [-]
        Share of the occupied time for which a level's limit may be exceeded.

    Returns
    -------
    ndarray (...) int8
        0 none, 1 minimum, 2 medium, 3 high: the highest level whose
        :data:`LEVEL_LIMITS` value is exceeded (DGP strictly above it) in at
        most ``exceedance`` of the occupied steps.
    """
    d = np.asarray(dgp)[..., np.asarray(occupied, dtype=bool)]
    n = max(d.shape[-1], 1)
    level = np.zeros(d.shape[:-1], dtype=np.int8)
    for k, limit in enumerate(LEVEL_LIMITS, start=1):
        ok = (d > limit).sum(axis=-1) <= exceedance * n
        level = np.where(ok & (level == k - 1), k, level).astype(np.int8)
    return level


def glare_class(dgp: np.ndarray) -> np.ndarray:
    """Glare class of each DGP value.

    Parameters
    ----------
    dgp : ndarray [-]

    Returns
    -------
    ndarray int8
        0 imperceptible, 1 perceptible, 2 disturbing, 3 intolerable
        (:data:`CLASS_EDGES`, each edge belonging to the class above it, as in
        :func:`glare_class_shares`).
    """
    return np.searchsorted(np.asarray(CLASS_EDGES), np.asarray(dgp), side="right").astype(np.int8)


def year_map(dgp: np.ndarray, day: np.ndarray, hour: np.ndarray,
             n_days: int = 365) -> np.ndarray:
    """Glare class of the worst step of every hour of the year, for a map.

    Parameters
    ----------
    dgp : ndarray (..., n_steps) [-]
        DGP of the steps to show (e.g. the occupied ones).
    day : ndarray (n_steps,) int
        Day of the year of each step, 0-based (0 … ``n_days`` − 1).
    hour : ndarray (n_steps,) int
        Hour of the day of each step (0 … 23: the hour that holds the step).
    n_days : int

    Returns
    -------
    ndarray (..., n_days, 24) int8
        :func:`glare_class` of the highest DGP among the steps of each hour;
        −1 where no step falls in the hour.
    """
    d = np.asarray(dgp, dtype=np.float64)
    out = np.full((*d.shape[:-1], n_days * 24), -1, dtype=np.int8)
    if d.shape[-1]:
        cell = np.asarray(day, dtype=np.intp) * 24 + np.asarray(hour, dtype=np.intp)
        worst = np.full((*d.shape[:-1], n_days * 24), -np.inf)
        _max_at(worst, cell, d)
        seen = np.zeros(n_days * 24, dtype=bool)
        seen[cell] = True
        out[..., seen] = glare_class(worst[..., seen])
    return out.reshape(*d.shape[:-1], n_days, 24)


def _max_at(worst: np.ndarray, cell: np.ndarray, d: np.ndarray) -> None:
    """``worst[..., cell[k]] = max(worst[..., cell[k]], d[..., k])`` over every k."""
    w = worst.reshape(-1, worst.shape[-1])
    for row, values in zip(w, d.reshape(-1, d.shape[-1]), strict=True):
        np.maximum.at(row, cell, values)
