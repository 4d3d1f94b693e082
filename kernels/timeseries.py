"""Annual illuminance series from daylight coefficients and sky vectors.

For glazing set ``g`` with coefficient set ``C`` and sky vectors of one
climate (DEVELOPERS.md "Sky vectors", "Coefficient sets"):

    E_g[o, s, t] = sum_j (C_sky_direct + C_sky_reflected)[g, s, j] sky[o, j, t]
                 + sum_{k=1..3} (C_sun_direct + C_sun_reflected)[g, s, idx[o, t, k]] w[o, t, k]

and a glazing variant with normal transmittances ``tau[v, g]`` sees
``E[o, v] = sum_g tau[v, g] E_g[o]`` (DESIGN §2.6: light reaching the room
crosses exactly one window once, so illuminance is linear in each set's
transmittance). :func:`unit_illuminance` computes ``E_g`` (τ = 1) per
orientation and set: the sky part is one matrix product over the sky-basis
entries some sensor sees, the sun part a sparse product over the steps whose
sun reaches the room (never a dense sun-point × step matrix). Variants are
formed by :func:`combine`, or not at all: the engine counts metrics of a single
set's variants from ``E_g`` (:func:`kernels.metrics.accumulate` with
``transmittance``). Callers pass sky vectors for a slice of steps to bound
memory.

References
----------
Tregenza, P. R. & Waters, I. M. (1983). Daylight coefficients. Lighting
Research & Technology 15(2), 65–71. doi:10.1177/096032718301500201
"""

from __future__ import annotations

import weakref
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
from scipy import sparse

if TYPE_CHECKING:
    from luxsweep.kernels.coefficients import CoefficientSet

__all__ = ["combine", "daylight_factor", "illuminance", "unit_illuminance"]


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


@dataclass(frozen=True, eq=False)
class _Summed:
    """The coefficient families of one set, arranged for :func:`unit_illuminance`.

    Attributes
    ----------
    columns : ndarray (n_live,) int
        Sky-basis entries with a non-zero coefficient for some sensor and glazing
        set (the others — patches no window can see — add nothing).
    sky : ndarray float32 (n_sets, n_sensors, n_live)
        C_sky_direct + C_sky_reflected on those entries.
    sun_t, direct_t : ndarray float32 (n_sets, n_sun, n_sensors)
        C_sun_direct + C_sun_reflected, and C_sun_direct, transposed so that the
        three sun points of a step are three contiguous rows.
    sun_live : ndarray bool (n_sun,)
        Sun points with a non-zero row in ``sun_t`` (a superset of those of
        ``direct_t``: both families are ≥ 0).
    """

    columns: np.ndarray
    sky: np.ndarray
    sun_t: np.ndarray
    direct_t: np.ndarray
    sun_live: np.ndarray


_SUMMED: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()
"""Per coefficient set (weakly held): its :class:`_Summed` arrangement."""


def _summed(coeffs: CoefficientSet) -> _Summed:
    """The summed, trimmed and transposed families of a coefficient set (kept while it lives)."""
    found = _SUMMED.get(coeffs)
    if found is None:
        sky = np.add(coeffs.sky_direct, coeffs.sky_reflected, dtype=np.float32)
        columns = np.flatnonzero(np.any(sky != 0.0, axis=(0, 1)))
        sun = np.add(coeffs.sun_direct, coeffs.sun_reflected, dtype=np.float32)
        sun_t = np.ascontiguousarray(sun.transpose(0, 2, 1))
        direct_t = np.ascontiguousarray(
            np.asarray(coeffs.sun_direct, np.float32).transpose(0, 2, 1))
        found = _Summed(
            columns=columns,
            sky=np.ascontiguousarray(sky[:, :, columns]),
            sun_t=sun_t,
            direct_t=direct_t,
            sun_live=np.any(sun_t != 0.0, axis=(0, 2)) | np.any(direct_t != 0.0, axis=(0, 2)),
        )
        _SUMMED[coeffs] = found
    return found


def _sun_part(index: np.ndarray, weight: np.ndarray, live: np.ndarray, n_sun: int
              ) -> tuple[np.ndarray, sparse.csr_array | None]:
    """Steps whose sun reaches some sensor, and their (n_live_steps, n_sun) weight matrix.

    The matrix holds the three barycentric weights × E_dn of each such step [lx];
    a step counts when one of its weighted sun points has a non-zero coefficient row.
    """
    steps = np.flatnonzero(np.any((weight > 0.0) & live[index], axis=1))
    if not steps.size:
        return steps, None
    matrix = sparse.csr_array(
        (weight[steps].reshape(-1), index[steps].reshape(-1), np.arange(0, 3 * steps.size + 1, 3)),
        shape=(steps.size, n_sun),
    )
    return steps, matrix


def unit_illuminance(coeffs: CoefficientSet, sky: Any, *,
                     out: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Illuminance of every glazing set at unit normal transmittance, time-major.

    Parameters
    ----------
    coeffs : CoefficientSet
        Daylight coefficients (unit normal transmittance) of one geometry.
    sky : kernels.sky.SkyVectors
        Sky vectors of the same patch scheme and sun points as ``coeffs``.
    out : ndarray float32 (n_orient, n_sets, n_steps, n_sensors), optional
        Array to write ``total`` into (every element is written); a fresh one
        when omitted. Callers that run many blocks pass memory of their own to
        skip mapping fresh pages each time.

    Returns
    -------
    total : ndarray float32 (n_orient, n_sets, n_steps, n_sensors) [lx]
        Sky + sun, direct + reflected, of each glazing set alone at τ = 1.
    direct_sun : ndarray float32 (n_orient, n_sets, n_steps, n_sensors) [lx]
        The ``sun_direct`` family alone.

    Notes
    -----
    Per orientation and set, one float32 product (n_steps × n_live) @ (n_live ×
    n_sensors) over the sky-basis entries some sensor sees (a side window sees
    about half the sky: 304 of 578 entries for the reference classroom), with
    the orientation's rows gathered from its class's sky
    (:class:`kernels.sky.SkyVectors`); the sun is one sparse product over the
    steps whose sun points reach the room (three weights per step). Time-major
    output keeps both products free of transposes; ``direct_sun`` is freshly
    zeroed (untouched zero pages are free, and most steps light no sensor
    directly).
    """
    n_sets, n_sensors, n_basis = coeffs.sky_direct.shape
    basis_index = np.asarray(sky.basis_index)
    if basis_index.shape[1] != n_basis:
        raise ValueError(
            f"sky vectors have {basis_index.shape[1]} basis entries but the coefficients have "
            f"{n_basis}: build both with the same sky subdivision"
        )
    arranged = _summed(coeffs)
    basis_sky = sky.basis_sky
    n_orient, n_steps = basis_index.shape[0], basis_sky.shape[2]
    n_sun = arranged.sun_t.shape[1]
    total = _out(out, (n_orient, n_sets, n_steps, n_sensors))
    # zero pages cost nothing until written: most steps have no direct sun in the room
    direct = np.zeros((n_orient, n_sets, n_steps, n_sensors), np.float32)
    rows = np.empty((arranged.columns.size, n_steps), dtype=np.float32)
    index = np.asarray(sky.sun_index, dtype=np.int32)
    weight = np.asarray(sky.sun_weight, dtype=np.float32)
    for o in range(n_orient):
        np.take(basis_sky[sky.orientation_class[o]], basis_index[o, arranged.columns], axis=0,
                out=rows)
        # the direct family is non-zero only where the sum is (reflected light is ≥ 0)
        steps, matrix = _sun_part(index[o], weight[o], arranged.sun_live, n_sun)
        for g in range(n_sets):
            np.matmul(rows.T, arranged.sky[g].T, out=total[o, g])
            if matrix is not None:
                total[o, g, steps] += matrix @ arranged.sun_t[g]
                direct[o, g, steps] = matrix @ arranged.direct_t[g]
    return total, direct


def _out(out: np.ndarray | None, shape: tuple[int, ...]) -> np.ndarray:
    """A fresh float32 array of ``shape``, or ``out`` checked to be one (C order)."""
    if out is None:
        return np.empty(shape, np.float32)
    if out.shape != shape or out.dtype != np.float32 or not out.flags.c_contiguous:
        raise ValueError(f"out must be a C-contiguous float32 array of shape {shape}, "
                         f"got {out.dtype} {out.shape}")
    return out


def combine(unit: np.ndarray, transmittances: np.ndarray) -> np.ndarray:
    """Illuminance of glazing variants from the unit-transmittance sets.

    Parameters
    ----------
    unit : ndarray (..., n_sets, n_steps, n_sensors) [lx]
        :func:`unit_illuminance` output.
    transmittances : ndarray (n_glazing_variants, n_sets)
        Normal transmittance of each set for each variant.

    Returns
    -------
    ndarray float32 (..., n_glazing_variants, n_steps, n_sensors) [lx]
        ``sum_g tau[v, g] unit[..., g]`` (DESIGN §2.6: light crosses one window once).
    """
    tau = np.asarray(transmittances, dtype=np.float32)
    n_sets = unit.shape[-3]
    out = np.empty((*unit.shape[:-3], tau.shape[0], *unit.shape[-2:]), dtype=np.float32)
    for v in range(tau.shape[0]):
        np.multiply(unit[..., 0, :, :], tau[v, 0], out=out[..., v, :, :])
        for g in range(1, n_sets):
            out[..., v, :, :] += unit[..., g, :, :] * tau[v, g]
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
        Sky vectors (:class:`kernels.sky.SkyVectors`) in the same patch scheme
        and sun points as ``coeffs``.
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
    :func:`unit_illuminance` then :func:`combine`; the arrays are time-major in
    memory (these are transposed views). The engine folds metrics from the
    unit-transmittance arrays directly when a geometry has one glazing set
    (:func:`kernels.metrics.accumulate` with ``transmittance``).
    """
    tau = _transmittances(coeffs, transmittances)
    total, direct = unit_illuminance(coeffs, sky)
    return (combine(total, tau).swapaxes(-1, -2), combine(direct, tau).swapaxes(-1, -2))


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
