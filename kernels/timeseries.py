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

import weakref
from typing import TYPE_CHECKING, Any

import numpy as np
from scipy import sparse

from kernels import buffers

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


_SUMMED: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()
"""Per coefficient set (weakly held): summed families in the layouts of :func:`illuminance`."""


def _summed(coeffs: CoefficientSet) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Sky (direct + reflected), sun (direct + reflected) and direct-sun coefficients.

    Returns
    -------
    sky : ndarray (n_sets, n_sensors, n_basis) float32
    sun_t, direct_t : ndarray (n_sets, n_sun, n_sensors) float32
        Transposed, so that the three sun points of a step are three contiguous rows.
    """
    found = _SUMMED.get(coeffs)
    if found is None:
        sky = np.add(coeffs.sky_direct, coeffs.sky_reflected, dtype=np.float32)
        sun = np.add(coeffs.sun_direct, coeffs.sun_reflected, dtype=np.float32)
        found = (
            sky,
            np.ascontiguousarray(sun.transpose(0, 2, 1)),
            np.ascontiguousarray(np.asarray(coeffs.sun_direct, np.float32).transpose(0, 2, 1)),
        )
        _SUMMED[coeffs] = found
    return found


def _sun_matrix(index: np.ndarray, weight: np.ndarray, n_sun: int) -> sparse.csr_array:
    """(n_steps, n_sun) sparse matrix of three barycentric weights × E_dn per step [lx]."""
    n_steps = index.shape[0]
    return sparse.csr_array(
        (weight.reshape(-1), index.reshape(-1), np.arange(0, 3 * n_steps + 1, 3)),
        shape=(n_steps, n_sun),
    )


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

    Notes
    -----
    Per orientation and glazing set, one float32 matrix product
    (n_sensors × n_basis) @ (n_basis × n_steps) gives the sky part in the
    output's own layout; the sun is one sparse product (three weights per
    step) with the transposed sun coefficients, whose three rows per step are
    contiguous. The direct and reflected families are summed (and transposed)
    once per coefficient set and kept while the set lives. The (n_sensors,
    n_steps) buffers are reused across orientations, and the outputs come
    from :func:`kernels.buffers.empty` (no fresh pages to map per call).
    """
    tau = _transmittances(coeffs, transmittances)
    sky_lum = np.asarray(sky.sky, dtype=np.float32)
    n_orient, n_basis, n_steps = sky_lum.shape
    if n_basis != coeffs.sky_direct.shape[2]:
        raise ValueError(
            f"sky vectors have {n_basis} basis entries but the coefficients have "
            f"{coeffs.sky_direct.shape[2]}: build both with the same sky subdivision"
        )
    n_sets, n_sensors = coeffs.sky_direct.shape[:2]
    index = np.asarray(sky.sun_index, dtype=np.int32)
    weight = np.asarray(sky.sun_weight, dtype=np.float32)
    c_sky, c_sun_t, c_direct_t = _summed(coeffs)
    n_sun = c_sun_t.shape[1]

    shape = (n_orient, tau.shape[0], n_sensors, n_steps)
    total = buffers.empty(shape, np.float32)
    direct_sun = buffers.empty(shape, np.float32)
    e = np.empty((n_sensors, n_steps), dtype=np.float32)
    d = np.empty_like(e)
    work = np.empty_like(e)
    for o in range(n_orient):
        sun = _sun_matrix(index[o], weight[o], n_sun)
        for g in range(n_sets):
            np.matmul(c_sky[g], sky_lum[o], out=e)
            e += (sun @ c_sun_t[g]).T
            np.copyto(d, (sun @ c_direct_t[g]).T)
            for v in range(tau.shape[0]):
                for src, dst in ((e, total[o, v]), (d, direct_sun[o, v])):
                    if g == 0:
                        np.multiply(src, tau[v, g], out=dst)
                    else:
                        np.multiply(src, tau[v, g], out=work)
                        dst += work
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
