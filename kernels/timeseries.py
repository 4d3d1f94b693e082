"""Annual illuminance series from daylight coefficients and sky vectors.

For glazing set ``g`` with coefficient set ``C`` and sky vectors of one
climate (DEVELOPERS.md "Sky vectors", "Coefficient sets"):

    E_g[o, s, t] = sum_j (C_sky_direct + C_sky_reflected)[g, s, j] sky[o, j, t]
                 + sum_{k=1..3} (C_sun_direct + C_sun_reflected)[g, s, idx[o, t, k]] w[o, t, k]

and a glazing variant with normal transmittances ``tau[v, g]`` sees
``E[o, v] = sum_g tau[v, g] E_g[o]`` (DESIGN §2.6: light reaching the room
crosses exactly one window once, so illuminance is linear in each set's
transmittance).  The sky part is one matrix product per glazing set over all
orientations and steps at once; the sun part gathers the three sun points of
each step (never a dense sun-point × step matrix).  Callers pass sky vectors
for a slice of steps to bound memory.

References
----------
Tregenza, P. R. & Waters, I. M. (1983). Daylight coefficients. Lighting
Research & Technology 15(2), 65–71. doi:10.1177/096032718301500201
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:
    from kernels.coefficients import CoefficientSet

__all__ = ["daylight_factor", "illuminance"]


def _transmittances(coeffs: CoefficientSet, transmittances: np.ndarray,
                    dtype: type = np.float32) -> np.ndarray:
    """(n_variants, n_sets) transmittance table, shape-checked."""
    tau = np.asarray(transmittances, dtype=dtype)
    n_sets = len(coeffs.glazing_sets)
    if tau.ndim == 1:
        tau = tau[None, :]
    if tau.ndim != 2 or tau.shape[1] != n_sets:
        raise ValueError(
            f"transmittances must have shape (n_glazing_variants, {n_sets}) for glazing sets "
            f"{list(coeffs.glazing_sets)}, got {np.shape(transmittances)}"
        )
    return tau


def _sun_gather(
    coefficients: np.ndarray, index: np.ndarray, weight: np.ndarray, columns: np.ndarray
) -> np.ndarray:
    """Sun illuminance from three interpolated sun points per step.

    Parameters
    ----------
    coefficients : ndarray (n_sensors, n_sun) float32
    index : ndarray (n_cols, 3) int
        Sun points of each (orientation, step) column.
    weight : ndarray (n_cols, 3) float32
        Barycentric weight × direct normal illuminance [lx].
    columns : ndarray (k,) int
        Columns with the sun up (others stay zero).

    Returns
    -------
    ndarray (n_sensors, n_cols) float32 [lx]
    """
    out = np.zeros((coefficients.shape[0], index.shape[0]), dtype=np.float32)
    if columns.size:
        idx, w = index[columns], weight[columns]
        acc = coefficients[:, idx[:, 0]] * w[:, 0]
        acc += coefficients[:, idx[:, 1]] * w[:, 1]
        acc += coefficients[:, idx[:, 2]] * w[:, 2]
        out[:, columns] = acc
    return out


def illuminance(
    coeffs: CoefficientSet, sky: Any, transmittances: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Illuminance series at every sensor for every orientation and glazing variant.

    Parameters
    ----------
    coeffs : CoefficientSet
        Daylight coefficients (unit normal transmittance) of one geometry.
    sky : SkyVectors
        ``sky`` (n_orient, n_basis, n_steps) [lx], ``sun_index`` (n_orient,
        n_steps, 3) and ``sun_weight`` (n_orient, n_steps, 3) [lx], in the
        same patch scheme and sun points as ``coeffs``.
    transmittances : ndarray (n_glazing_variants, n_sets)
        Normal transmittance of each glazing set (order of
        ``coeffs.glazing_sets``) for each glazing variant.

    Returns
    -------
    total : ndarray (n_orient, n_glazing_variants, n_sensors, n_steps) float32 [lx]
        Sky + sun, direct + reflected.
    direct_sun : ndarray (n_orient, n_glazing_variants, n_sensors, n_steps) float32 [lx]
        Direct sun only (the ``sun_direct`` family): for annual sunlight
        exposure and the IES LM-83-12 shading rule.
    """
    tau = _transmittances(coeffs, transmittances)
    sky_lum = np.asarray(sky.sky, dtype=np.float32)
    n_orient, n_basis, n_steps = sky_lum.shape
    if n_basis != coeffs.sky_direct.shape[2]:
        raise ValueError(
            f"sky vectors have {n_basis} basis entries but the coefficients have "
            f"{coeffs.sky_direct.shape[2]}: build both with the same sky subdivision"
        )
    n_sensors = coeffs.sky_direct.shape[1]
    sky_cols = sky_lum.transpose(1, 0, 2).reshape(n_basis, n_orient * n_steps)
    index = np.asarray(sky.sun_index).reshape(n_orient * n_steps, 3)
    weight = np.asarray(sky.sun_weight, dtype=np.float32).reshape(n_orient * n_steps, 3)
    up = np.flatnonzero(np.any(weight != 0.0, axis=1))

    shape = (n_orient, tau.shape[0], n_sensors, n_steps)
    total = np.zeros(shape, dtype=np.float32)
    direct_sun = np.zeros(shape, dtype=np.float32)
    for g in range(tau.shape[1]):
        c_sky = coeffs.sky_direct[g] + coeffs.sky_reflected[g]
        sun_direct = _sun_gather(coeffs.sun_direct[g], index, weight, up)
        e_g = c_sky @ sky_cols
        e_g += sun_direct
        e_g += _sun_gather(coeffs.sun_reflected[g], index, weight, up)
        e_g = e_g.reshape(n_sensors, n_orient, n_steps).transpose(1, 0, 2)
        d_g = sun_direct.reshape(n_sensors, n_orient, n_steps).transpose(1, 0, 2)
        t = tau[:, g][None, :, None, None]
        total += t * e_g[:, None]
        direct_sun += t * d_g[:, None]
    return total, direct_sun


def daylight_factor(
    coeffs: CoefficientSet, overcast_vector: np.ndarray, transmittances: np.ndarray
) -> np.ndarray:
    """Daylight factor at every sensor for every glazing variant.

    Parameters
    ----------
    coeffs : CoefficientSet
    overcast_vector : ndarray (n_basis,)
        CIE overcast sky ``L_j Ω_j`` normalised to 1 lx of unobstructed
        horizontal sky illuminance, ground last
        (:func:`kernels.sky.overcast_sky_vector`).
    transmittances : ndarray (n_glazing_variants, n_sets)

    Returns
    -------
    ndarray (n_glazing_variants, n_sensors) [%]
        ``100 E_inside / E_outside`` under the CIE overcast sky (CIE S 011 /
        ISO 15469 sky type 1 in its traditional form, Moon & Spencer 1942).
    """
    tau = _transmittances(coeffs, transmittances, np.float64)
    v = np.asarray(overcast_vector, dtype=np.float64)
    c = coeffs.sky_direct.astype(np.float64) + coeffs.sky_reflected.astype(np.float64)
    per_set = np.einsum("gsj,j->gs", c, v)
    return 100.0 * tau @ per_set
