"""Sky patches, sky luminance models, luminous efficacy and sky vectors.

Frames and the sky basis follow DEVELOPERS.md: patches are listed in the
*building* frame (x, y, z with z up; azimuth clockwise from +y), band by band
from the horizon up, the zenith cap last; the basis used by coefficients and
sky vectors has ``n_patches + 1`` entries, the last being the *ground* (uniform
luminance over the lower hemisphere, solid angle 2π sr).

Azimuth convention of the patches (decided here, used everywhere): in every
band the first patch is **centred on +y** (azimuth 0), so it straddles +y; its
``azimuth_low`` is negative (−half width) and ``azimuth_high`` positive.
Patches then follow clockwise (increasing azimuth).

Contents
--------
* patches: :class:`PatchScheme`, :func:`patch_scheme`, :func:`patch_index`,
  :func:`sample_directions`, :func:`sample_ground`, :func:`ground_index`,
  :func:`patch_mean_sin_altitude`;
* luminous efficacy: :func:`sky_clearness`, :func:`sky_brightness`,
  :func:`clearness_bin`, :func:`precipitable_water`, :func:`efficacy_perez1990`;
* sky luminance: :func:`luminance_perez1993`, :func:`perez1993_coefficients`,
  :func:`luminance_cie`, :func:`luminance_cie_overcast` (sky vectors use
  Perez 1993; the CIE models are called directly — the sweep offers no choice);
* sky vectors: :class:`SkyVectors`, :func:`sky_vectors`,
  :func:`overcast_sky_vector`.
"""

from __future__ import annotations

import functools
import itertools
import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
import pvlib

from luxsweep.kernels.climate import EFFICACY_MIN_IRRADIANCE, PLAUSIBLE_EFFICACY
from luxsweep.kernels.errors import InputError

# --------------------------------------------------------------------------------------
# Sky patches
# --------------------------------------------------------------------------------------

TREGENZA_BAND_COUNTS = (30, 30, 24, 24, 18, 12, 6)
"""Patches per 12° band of the Tregenza (1987) subdivision, horizon first."""

TREGENZA_BAND_WIDTH = 12.0
"""Altitude width of a Tregenza band [deg]; the polar cap has a 6° radius."""

@dataclass(frozen=True, eq=False)
class PatchScheme:
    """Subdivision of the upper hemisphere into sky patches (building frame).

    Attributes
    ----------
    subdivision : int
        1 for the Tregenza 145 patches, n for the Reinhart MF:n subdivision
        (144 n² + 1 patches).
    altitude_low, altitude_high : ndarray (n_patches,) [deg]
        Altitude limits of each patch (the cap: 90 − 6/n to 90).
    azimuth_low, azimuth_high : ndarray (n_patches,) [deg]
        Azimuth limits, clockwise from building +y. The first patch of each band
        is centred on +y, so its ``azimuth_low`` is negative. The cap spans
        0 to 360.
    solid_angle : ndarray (n_patches,) [sr]
        2π (sin a2 − sin a1) of the band shared equally by its patches.
    centres : ndarray (n_patches, 3)
        Unit vectors at the middle altitude and azimuth of each patch (the cap:
        the zenith).
    band_edges : ndarray (n_bands + 1,) [deg]
        Altitude edges of the bands, 0 to 90 (the cap is the last band).
    band_counts : ndarray (n_bands,) int
        Patches per band (the cap: 1).
    """

    subdivision: int
    altitude_low: np.ndarray
    altitude_high: np.ndarray
    azimuth_low: np.ndarray
    azimuth_high: np.ndarray
    solid_angle: np.ndarray
    centres: np.ndarray
    band_edges: np.ndarray
    band_counts: np.ndarray

    @property
    def n_patches(self) -> int:
        """Number of sky patches (the ground is not counted)."""
        return int(self.solid_angle.size)

    @property
    def n_basis(self) -> int:
        """Number of sky-basis entries: the patches plus the ground."""
        return self.n_patches + 1

    @property
    def band_start(self) -> np.ndarray:
        """Index of the first patch of each band, (n_bands,) int."""
        return np.concatenate([[0], np.cumsum(self.band_counts)[:-1]])


def patch_scheme(subdivision: int = 1) -> PatchScheme:
    """Build the Tregenza (n = 1) or Reinhart MF:n (n ≥ 2) sky subdivision.

    Parameters
    ----------
    subdivision : int
        1 = Tregenza 145 patches; n = each 12° band split into n sub-bands and
        each patch into n in azimuth, with one polar cap of radius 6°/n.

    Returns
    -------
    PatchScheme
        With 144 n² + 1 patches (145, 577, 2305 for n = 1, 2, 4).

    Notes
    -----
    The solid angle of a band between altitudes a1 and a2 is
    2π (sin a2 − sin a1), shared equally by its patches, so all patches sum to
    2π sr exactly.

    References
    ----------
    Tregenza, P. R. (1987). Subdivision of the sky hemisphere for luminance
    measurements. Lighting Research & Technology 19(1), 13–14.
    doi:10.1177/096032718701900103
    Reinhart, C. F. & Walkenhorst, O. (2001). Validation of dynamic
    RADIANCE-based daylight simulations for a test office with external
    blinds. Energy and Buildings 33(7), 683–697 (the MF:n subdivision).
    """
    n = int(subdivision)
    if n < 1 or n != subdivision:
        raise InputError(
            f"sky subdivision must be a positive integer (1 = 145 patches, 2 = 577, "
            f"4 = 2305), got {subdivision!r}",
            field="subdivision",
        )
    width = TREGENZA_BAND_WIDTH / n
    counts = np.array([c * n for c in TREGENZA_BAND_COUNTS for _ in range(n)] + [1])
    n_bands = counts.size
    edges = np.concatenate([np.arange(n_bands) * width, [90.0]])
    band = np.repeat(np.arange(n_bands), counts)
    start = np.concatenate([[0], np.cumsum(counts)[:-1]])
    k = np.arange(band.size) - start[band]
    m = counts[band]
    dphi = 360.0 / m
    az_lo = (k - 0.5) * dphi
    az_hi = (k + 0.5) * dphi
    cap = band == n_bands - 1
    az_lo[cap], az_hi[cap] = 0.0, 360.0
    alt_lo, alt_hi = edges[band], edges[band + 1]
    s_lo, s_hi = np.sin(np.radians(alt_lo)), np.sin(np.radians(alt_hi))
    omega = 2.0 * np.pi * (s_hi - s_lo) / m
    alt_c = np.where(cap, 90.0, 0.5 * (alt_lo + alt_hi))
    az_c = np.where(cap, 0.0, 0.5 * (az_lo + az_hi))
    return PatchScheme(
        subdivision=n,
        altitude_low=alt_lo,
        altitude_high=alt_hi,
        azimuth_low=az_lo,
        azimuth_high=az_hi,
        solid_angle=omega,
        centres=_direction(az_c, alt_c),
        band_edges=edges,
        band_counts=counts,
    )


def _direction(azimuth: np.ndarray, altitude: np.ndarray) -> np.ndarray:
    """Unit vectors (sin az cos alt, cos az cos alt, sin alt) from degrees."""
    az, alt = np.radians(azimuth), np.radians(altitude)
    return np.stack([np.sin(az) * np.cos(alt), np.cos(az) * np.cos(alt), np.sin(alt)], -1)


def ground_index(scheme: PatchScheme) -> int:
    """Index of the ground entry in the sky basis: ``scheme.n_patches``."""
    return scheme.n_patches


def patch_index(scheme: PatchScheme, directions: np.ndarray) -> np.ndarray:
    """Sky-basis index of each direction (building frame).

    Parameters
    ----------
    scheme : PatchScheme
    directions : ndarray (..., 3)
        Directions (need not be unit length).

    Returns
    -------
    ndarray (...,) int
        Patch index, or the ground index ``scheme.n_patches`` for directions
        strictly below the horizon (z < 0). A direction exactly on the horizon
        belongs to the lowest band; one exactly on a band edge to the band above.
    """
    d = np.asarray(directions, dtype=float)
    r = np.linalg.norm(d, axis=-1)
    alt = np.degrees(np.arcsin(np.clip(d[..., 2] / r, -1.0, 1.0)))
    az = np.degrees(np.arctan2(d[..., 0], d[..., 1])) % 360.0
    n_bands = scheme.band_counts.size
    width = scheme.band_edges[1]
    band = np.minimum(np.floor(np.maximum(alt, 0.0) / width).astype(np.int64), n_bands - 1)
    m = scheme.band_counts[band]
    k = np.floor(az * m / 360.0 + 0.5).astype(np.int64) % m
    index = scheme.band_start[band] + k
    return np.where(d[..., 2] < 0.0, scheme.n_patches, index)


def _grid_shape(n: int) -> tuple[int, int]:
    """Rows × columns of a jittered grid of n samples (rows ≤ columns)."""
    rows = max(r for r in range(1, math.isqrt(n) + 1) if n % r == 0)
    return rows, n // rows


def _jittered_unit_square(n: int, count: int, rng: np.random.Generator) -> np.ndarray:
    """Stratified points in [0, 1)², (count, n, 2): one per cell of a rows×cols grid."""
    return _stratify(rng.random((count, n, 2)))


def _stratify(jitter: np.ndarray) -> np.ndarray:
    """Place uniform draws (..., n, 2) in the n cells of a rows×cols grid of [0, 1)²."""
    n = jitter.shape[-2]
    rows, cols = _grid_shape(n)
    i, j = np.divmod(np.arange(n), cols)
    return np.stack([(i + jitter[..., 0]) / rows, (j + jitter[..., 1]) / cols], -1)


def sample_directions(scheme: PatchScheme, n_per_patch: int, seed: int,
                      patches: np.ndarray | None = None) -> np.ndarray:
    """Stratified directions uniform in solid angle inside every patch.

    Parameters
    ----------
    scheme : PatchScheme
    n_per_patch : int
        Samples per patch, laid on a rows × columns jittered grid in
        (sin altitude, azimuth) — uniform in (sin alt, az) is uniform in solid
        angle (Archimedes' hat-box theorem).
    seed : int
        Seed of ``numpy.random.default_rng``.
    patches : array_like of int, optional
        Patches to return (indices into the scheme, any order, repeats
        allowed). The result is exactly
        ``sample_directions(scheme, n_per_patch, seed)[patches]``, bit for
        bit, at the cost of the selected patches only: the generator skips
        the draws of the other patches (``PCG64.advance``; one 64-bit draw
        per uniform double) instead of making them.

    Returns
    -------
    ndarray (n_patches, n_per_patch, 3), or (len(patches), n_per_patch, 3)
        Unit vectors, building frame.
    """
    n = int(n_per_patch)
    rng = np.random.default_rng(seed)
    # the draws of _jittered_unit_square: 2 n uniform draws per patch, in order
    if patches is None:
        sel = slice(None)
        jitter = rng.random((scheme.n_patches, n, 2))
    else:
        sel = np.asarray(patches, dtype=np.int64).reshape(-1)
        step = np.diff(sel)
        ordered = bool(np.all(step > 0))  # increasing, no repeats: no sorting needed
        wanted, back = (sel, None) if ordered else np.unique(sel, return_inverse=True)
        if wanted.size and not 0 <= wanted[0] <= wanted[-1] < scheme.n_patches:
            raise IndexError(f"patches must lie in 0 … {scheme.n_patches - 1}")
        # runs of consecutive patches: skip to each run, then draw it
        cut = np.flatnonzero((step if ordered else np.diff(wanted)) != 1) + 1
        parts, last = [], 0
        for run in np.split(wanted, cut) if wanted.size else ():
            rng.bit_generator.advance(2 * n * (int(run[0]) - last))
            parts.append(rng.random((run.size, n, 2)))
            last = int(run[-1]) + 1
        jitter = np.concatenate(parts) if parts else np.zeros((0, n, 2))
        if back is not None:
            jitter = jitter[back]
    uv = _stratify(jitter)
    u, v = uv[..., 0], uv[..., 1]
    s_lo = np.sin(np.radians(scheme.altitude_low[sel]))[:, None]
    s_hi = np.sin(np.radians(scheme.altitude_high[sel]))[:, None]
    sin_alt = s_lo + u * (s_hi - s_lo)
    az_lo, az_hi = scheme.azimuth_low[sel], scheme.azimuth_high[sel]
    az = az_lo[:, None] + v * (az_hi - az_lo)[:, None]
    return _direction_sin(az, sin_alt)


def _direction_sin(azimuth: np.ndarray, sin_alt: np.ndarray) -> np.ndarray:
    """Unit vectors from azimuth [deg] and sin(altitude)."""
    az = np.radians(azimuth)
    c = np.sqrt(np.clip(1.0 - sin_alt * sin_alt, 0.0, None))
    return np.stack([np.sin(az) * c, np.cos(az) * c, sin_alt], -1)


def sample_ground(n: int, seed: int) -> np.ndarray:
    """Stratified directions uniform in solid angle over the lower hemisphere.

    Parameters
    ----------
    n : int
        Number of directions (rows × columns jittered grid in (sin alt, az)).
    seed : int
        Seed of ``numpy.random.default_rng``.

    Returns
    -------
    ndarray (n, 3)
        Unit vectors with z < 0.
    """
    rng = np.random.default_rng(seed)
    uv = _jittered_unit_square(int(n), 1, rng)[0]
    # sin(alt) = -u with u in (0, 1): strictly below the horizon
    sin_alt = -np.maximum(uv[:, 0], 1e-12)
    return _direction_sin(360.0 * uv[:, 1], sin_alt)


def patch_mean_sin_altitude(scheme: PatchScheme) -> np.ndarray:
    """Mean of sin(altitude) over each patch's solid angle, (n_patches,).

    Because solid angle is uniform in sin(alt), the mean is exactly
    (sin a1 + sin a2)/2. It is the daylight coefficient of an unobstructed
    upward-facing sensor (DEVELOPERS.md, coefficient definition).
    """
    return 0.5 * (
        np.sin(np.radians(scheme.altitude_low)) + np.sin(np.radians(scheme.altitude_high))
    )


# --------------------------------------------------------------------------------------
# Sky clearness, brightness and luminous efficacy (Perez et al. 1990)
# --------------------------------------------------------------------------------------

CLEARNESS_BIN_EDGES = np.array([1.065, 1.230, 1.500, 1.950, 2.800, 4.500, 6.200])
"""Upper edges of the first seven sky-clearness bins ε (Perez et al. 1990, Table 1;
the same bins are used by Perez et al. 1993). Bin 8 is ε ≥ 6.2."""

_KAPPA = 1.041
"""Constant of the sky clearness definition, for the solar zenith in radians
(Perez et al. 1990, eq. 1; it is 5.535e-6 for the zenith in degrees)."""

# Perez et al. (1990), Table 4: luminous efficacy coefficients a_i, b_i, c_i, d_i
# per clearness bin (rows = bins 1..8). Typed from memory (not read from the paper);
# the test against the NSRDB/TMY3 illuminance columns (made with this model) checks
# them. Units: a [lm/W], b [lm/W per cm of water], c, d [lm/W].
_EFFICACY_GLOBAL = np.array([
    [96.63, -0.47, 11.50, -9.16],
    [107.54, 0.79, 1.79, -1.19],
    [98.73, 0.70, 4.40, -6.95],
    [92.72, 0.56, 8.36, -8.31],
    [86.73, 0.98, 7.10, -10.94],
    [88.34, 1.39, 6.06, -7.60],
    [78.63, 1.47, 4.93, -11.37],
    [99.65, 1.86, -4.46, -3.15],
])
_EFFICACY_DIRECT = np.array([
    [57.20, -4.55, -2.98, 117.12],
    [98.99, -3.46, -1.21, 12.38],
    [109.83, -4.90, -1.71, -8.81],
    [110.34, -5.84, -1.99, -4.56],
    [106.36, -3.97, -1.75, -6.16],
    [107.19, -1.25, -1.51, -26.73],
    [105.75, 0.77, -1.26, -34.44],
    [101.18, 1.58, -1.10, -8.29],
])
_EFFICACY_DIFFUSE = np.array([
    [97.24, -0.46, 12.00, -8.91],
    [107.22, 1.15, 0.59, -3.95],
    [104.97, 2.96, -5.53, -8.77],
    [102.39, 5.59, -13.95, -13.90],
    [100.71, 5.94, -22.75, -23.74],
    [106.42, 3.83, -36.15, -28.83],
    [141.88, 1.90, -53.24, -14.03],
    [152.23, 0.35, -45.27, -7.98],
])


def clearness_bin(epsilon: np.ndarray) -> np.ndarray:
    """Sky-clearness bin index 0..7 (bins 1..8 of Perez et al. 1990) of ε.

    Bin 1 is ε < 1.065 (overcast), bin 8 is ε ≥ 6.2 (clear). Values on an edge go
    to the upper bin. NaN goes to bin 8 and must be masked by the caller.
    """
    return np.searchsorted(CLEARNESS_BIN_EDGES, np.asarray(epsilon), side="right")


def sky_clearness(dhi: np.ndarray, dni: np.ndarray, zenith: np.ndarray) -> np.ndarray:
    """Perez sky clearness ε (dimensionless).

    Parameters
    ----------
    dhi : ndarray [W/m²]
        Diffuse horizontal irradiance.
    dni : ndarray [W/m²]
        Direct normal irradiance.
    zenith : ndarray [deg]
        Solar zenith angle.

    Returns
    -------
    ndarray
        ε = ((D + I)/D + κ Z³) / (1 + κ Z³), κ = 1.041, Z in **radians**;
        NaN where D ≤ 0.

    References
    ----------
    Perez, R., Ineichen, P., Seals, R., Michalsky, J. & Stewart, R. (1990).
    Modeling daylight availability and irradiance components from direct and
    global irradiance. Solar Energy 44(5), 271–289, eq. 1.
    doi:10.1016/0038-092X(90)90055-H
    """
    dhi = np.asarray(dhi, dtype=float)
    z3 = _KAPPA * np.radians(np.asarray(zenith, dtype=float)) ** 3
    with np.errstate(divide="ignore", invalid="ignore"):
        eps = ((dhi + np.asarray(dni, dtype=float)) / dhi + z3) / (1.0 + z3)
    return np.where(dhi > 0.0, eps, np.nan)


def sky_brightness(
    dhi: np.ndarray, zenith: np.ndarray, extra_radiation: np.ndarray
) -> np.ndarray:
    """Perez sky brightness Δ = D m / I0 (dimensionless).

    Parameters
    ----------
    dhi : ndarray [W/m²]
        Diffuse horizontal irradiance.
    zenith : ndarray [deg]
        Solar zenith angle; clipped to 90° (a step whose representative sun sits
        on the horizon keeps a finite air mass).
    extra_radiation : ndarray [W/m²]
        Extraterrestrial normal irradiance I0 (``pvlib.irradiance.get_extra_radiation``).

    Returns
    -------
    ndarray
        Δ, with the relative optical air mass m of Kasten & Young (1989) from
        ``pvlib.atmosphere.get_relative_airmass``.

    References
    ----------
    Perez et al. (1990), eq. 2 (see :func:`sky_clearness`).
    Kasten, F. & Young, A. T. (1989). Revised optical air mass tables and
    approximation formula. Applied Optics 28(22), 4735–4738. doi:10.1364/AO.28.004735
    """
    z = np.minimum(np.asarray(zenith, dtype=float), 90.0)
    m = np.asarray(pvlib.atmosphere.get_relative_airmass(z, model="kastenyoung1989"))
    return np.asarray(dhi, dtype=float) * m / np.asarray(extra_radiation, dtype=float)


def precipitable_water(dew_point: np.ndarray) -> np.ndarray:
    """Atmospheric precipitable water W [cm] from the surface dew point [°C].

    W = exp(0.07 T_d − 0.075) (Perez et al. 1990, eq. 3, after Wright, Perez &
    Michalsky 1989).
    """
    return np.exp(0.07 * np.asarray(dew_point, dtype=float) - 0.075)


def efficacy_perez1990(
    ghi: np.ndarray,
    dni: np.ndarray,
    dhi: np.ndarray,
    zenith: np.ndarray,
    dew_point: np.ndarray,
    extra_radiation: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Global, direct normal and diffuse illuminance from irradiance (Perez 1990).

    Parameters
    ----------
    ghi, dni, dhi : ndarray [W/m²]
        Global horizontal, direct normal and diffuse horizontal irradiance.
    zenith : ndarray [deg]
        Solar zenith angle (clipped to 90° for the air mass and the angle terms).
    dew_point : ndarray [°C]
        Surface dew point, for the precipitable water W.
    extra_radiation : ndarray [W/m²]
        Extraterrestrial normal irradiance.

    Returns
    -------
    global_illuminance, direct_illuminance, diffuse_illuminance : ndarray [lx]
        Global horizontal, direct normal and diffuse horizontal illuminance;
        0 where the corresponding irradiance is 0 (and all three 0 where
        D ≤ 0, where ε is undefined).

    Notes
    -----
    With the clearness bin i (ε), W, Z the solar zenith **in radians** and Δ:

    * global:  E_g / G = a_i + b_i W + c_i cos Z + d_i ln Δ
    * direct:  E_b / I = max(0, a_i + b_i W + c_i exp(5.73 Z − 5) + d_i Δ)
    * diffuse: E_d / D = a_i + b_i W + c_i cos Z + d_i ln Δ

    Traps: the direct formula uses Δ itself, not ln Δ, and exp(5.73 Z − 5)
    with Z in radians; the bin edges are 1.065, 1.23, 1.5, 1.95, 2.8, 4.5, 6.2
    (upper edges of bins 1–7); ln Δ needs Δ > 0, so Δ is floored at 1e-3
    (below any value the model was fitted on). Coefficients: Table 4 of the
    paper, typed from memory (see the module constants).

    Checked against the illuminance columns of pvlib's two bundled TMY3 files
    (which NSRDB derived with this model from its own inputs): annual global
    +2.0 % / +0.7 %, direct normal −4.4 % / −1.3 %, diffuse +8.3 % / +2.2 %
    (Greensboro / Sand Point); in overcast-bin hours the medians agree to 1 %.

    References
    ----------
    Perez, R., Ineichen, P., Seals, R., Michalsky, J. & Stewart, R. (1990).
    Modeling daylight availability and irradiance components from direct and
    global irradiance. Solar Energy 44(5), 271–289.
    doi:10.1016/0038-092X(90)90055-H
    """
    ghi, dni, dhi = (np.asarray(v, dtype=float) for v in (ghi, dni, dhi))
    z_deg = np.minimum(np.asarray(zenith, dtype=float), 90.0)
    eps = sky_clearness(dhi, dni, z_deg)
    delta = np.maximum(sky_brightness(dhi, z_deg, extra_radiation), 1e-3)
    w = precipitable_water(dew_point)
    ok = np.isfinite(eps) & np.isfinite(delta)
    i = np.where(ok, clearness_bin(eps), 0)
    z = np.radians(z_deg)
    cos_z, ln_delta = np.cos(z), np.log(np.where(ok, delta, 1.0))
    a, b, c, d = _EFFICACY_GLOBAL[i].T
    k_g = a + b * w + c * cos_z + d * ln_delta
    a, b, c, d = _EFFICACY_DIRECT[i].T
    k_b = np.maximum(0.0, a + b * w + c * np.exp(5.73 * z - 5.0) + d * delta)
    a, b, c, d = _EFFICACY_DIFFUSE[i].T
    k_d = a + b * w + c * cos_z + d * ln_delta
    e_g = np.where(ok, k_g * ghi, 0.0)
    e_b = np.where(ok, k_b * dni, 0.0)
    e_d = np.where(ok, k_d * dhi, 0.0)
    return e_g, e_b, e_d


# --------------------------------------------------------------------------------------
# Sky luminance: Perez et al. (1993) all-weather model
# --------------------------------------------------------------------------------------

# Perez, Seals & Michalsky (1993), Table 1: for each clearness bin (rows 1..8) and each
# parameter a, b, c, d, e the four coefficients (x1, x2, x3, x4) of
#     x = x1 + x2 Z + Δ (x3 + x4 Z)            (Z: solar zenith [rad])
# except in bin 1 for c and d (see perez1993_coefficients). Typed from memory (not
# read from the paper); checked against pvlib's Perez (1990) transposition in tests.
_PEREZ1993 = np.array([
    # bin 1: 1.000 <= eps < 1.065
    [[1.3525, -0.2576, -0.2690, -1.4366],
     [-0.7670, 0.0007, 1.2734, -0.1233],
     [2.8000, 0.6004, 1.2375, 1.0000],
     [1.8734, 0.6297, 0.9738, 0.2809],
     [0.0356, -0.1246, -0.5718, 0.9938]],
    # bin 2: 1.065 <= eps < 1.230
    [[-1.2219, -0.7730, 1.4148, 1.1016],
     [-0.2054, 0.0367, -3.9128, 0.9156],
     [6.9750, 0.1774, 6.4477, -0.1239],
     [-1.5798, -0.5081, -1.7812, 0.1080],
     [0.2624, 0.0672, -0.2190, -0.4285]],
    # bin 3: 1.230 <= eps < 1.500
    [[-1.1000, -0.2515, 0.8952, 0.0156],
     [0.2782, -0.1812, -4.5000, 1.1766],
     [24.7219, -13.0812, -37.7000, 34.8438],
     [-5.0000, 1.5218, 3.9229, -2.6204],
     [-0.0156, 0.1597, 0.4199, -0.5562]],
    # bin 4: 1.500 <= eps < 1.950
    [[-0.5484, -0.6654, -0.2672, 0.7117],
     [0.7234, -0.6219, -5.6812, 2.6297],
     [33.3389, -18.3000, -62.2500, 52.0781],
     [-3.5000, 0.0016, 1.1477, 0.1062],
     [0.4659, -0.3296, -0.0876, -0.0329]],
    # bin 5: 1.950 <= eps < 2.800
    [[-0.6000, -0.3566, -2.5000, 2.3250],
     [0.2937, 0.0496, -5.6812, 1.8415],
     [21.0000, -4.7656, -21.5906, 7.2492],
     [-3.5000, -0.1554, 1.4062, 0.3988],
     [0.0032, 0.0766, -0.0656, -0.1294]],
    # bin 6: 2.800 <= eps < 4.500
    [[-1.0156, -0.3670, 1.0078, 1.4051],
     [0.2875, -0.5328, -3.8500, 3.3750],
     [14.0000, -0.9999, -7.1406, 7.5469],
     [-3.4000, -0.1078, -1.0750, 1.5702],
     [-0.0672, 0.4016, 0.3017, -0.4844]],
    # bin 7: 4.500 <= eps < 6.200
    [[-1.0000, 0.0211, 0.5025, -0.5119],
     [-0.3000, 0.1922, 0.7023, -1.6317],
     [19.0000, -5.0000, 1.2438, -1.9094],
     [-4.0000, 0.0250, 0.3844, 0.2656],
     [1.0468, -0.3788, -2.4517, 1.4656]],
    # bin 8: eps >= 6.200
    [[-1.0500, 0.0289, 0.4260, 0.3590],
     [-0.3250, 0.1156, 0.7781, 0.0025],
     [31.0625, -14.5000, -46.1148, 55.3750],
     [-7.2312, 0.4050, 13.3500, 0.6234],
     [1.5000, -0.6426, 1.8564, 0.5636]],
])

_MIN_COS_ZENITH = 0.01
"""Floor of cos θ of a sky element in the gradation term exp(b / cos θ) [-]:
the term diverges at the horizon when b > 0 (it happens in bins 2–4 at low Δ);
elements lower than 0.57° altitude take the value at 0.57° (common practice)."""


def perez1993_coefficients(
    epsilon: np.ndarray, delta: np.ndarray, zenith: np.ndarray
) -> np.ndarray:
    """Coefficients a, b, c, d, e of the Perez (1993) all-weather sky.

    Parameters
    ----------
    epsilon : ndarray (n,)
        Sky clearness ε (see :func:`sky_clearness`).
    delta : ndarray (n,)
        Sky brightness Δ (see :func:`sky_brightness`).
    zenith : ndarray (n,) [deg]
        Solar zenith angle (clipped to 90°).

    Returns
    -------
    ndarray (5, n)
        Rows a, b, c, d, e.

    Notes
    -----
    x = x1 + x2 Z + Δ (x3 + x4 Z), Z in **radians**, except in bin 1
    (ε < 1.065): c = exp[(Δ (c1 + c2 Z))^c3] − c4 and
    d = −exp[Δ (d1 + d2 Z)] + d3 + Δ d4 (Perez et al. 1993, notes to Table 1).

    References
    ----------
    Perez, R., Seals, R. & Michalsky, J. (1993). All-weather model for sky
    luminance distribution — preliminary configuration and validation. Solar
    Energy 50(3), 235–245. doi:10.1016/0038-092X(93)90017-I
    """
    eps = np.atleast_1d(np.asarray(epsilon, dtype=float))
    dlt = np.atleast_1d(np.asarray(delta, dtype=float))
    z = np.radians(np.minimum(np.atleast_1d(np.asarray(zenith, dtype=float)), 90.0))
    eps, dlt, z = np.broadcast_arrays(eps, dlt, z)
    x = _PEREZ1993[clearness_bin(np.nan_to_num(eps, nan=1.0))]  # (n, 5, 4)
    x1, x2, x3, x4 = np.moveaxis(x, -1, 0)  # each (n, 5)
    coef = (x1 + x2 * z[:, None] + dlt[:, None] * (x3 + x4 * z[:, None])).T  # (5, n)
    first = eps < CLEARNESS_BIN_EDGES[0]
    c1, c2, c3, c4 = _PEREZ1993[0, 2]
    d1, d2, d3, d4 = _PEREZ1993[0, 3]
    c_first = np.exp((dlt * (c1 + c2 * z)) ** c3) - c4
    d_first = -np.exp(dlt * (d1 + d2 * z)) + d3 + dlt * d4
    coef[2] = np.where(first, c_first, coef[2])
    coef[3] = np.where(first, d_first, coef[3])
    return coef


_MIN_GRADATION = 0.01
"""Floor of the gradation term 1 + a exp(b / cos θ) [-]. For a few low-Δ steps
outside the data the model was fitted on (e.g. bin 5, Δ = 0.08, a = −1.05,
b = +0.13) the fitted term is negative over the whole sky; the floor keeps such
a sky defined (it then follows the indicatrix alone) and dark zones of other
skies near zero. Our choice, documented here."""


def _perez_gradation(cos_theta: np.ndarray, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """max(1 + a exp(b / cos θ), 0.01), cos θ floored at :data:`_MIN_COS_ZENITH`."""
    g = 1.0 + a * np.exp(b / np.maximum(cos_theta, _MIN_COS_ZENITH))
    return np.maximum(g, _MIN_GRADATION)


def _perez_indicatrix(
    cos_gamma: np.ndarray, c: np.ndarray, d: np.ndarray, e: np.ndarray
) -> np.ndarray:
    """1 + c exp(d γ) + e cos² γ with γ the angle to the sun [rad].

    ``cos_gamma`` must already have the full broadcast shape (c, d, e broadcast
    against it); computed with in-place steps (this is the hot loop of
    :func:`sky_vectors`).
    """
    cg = np.clip(cos_gamma, -1.0, 1.0)
    out = np.arccos(cg)
    out *= d
    np.exp(out, out=out)
    out *= c
    out += 1.0
    cg *= cg
    cg *= e
    out += cg
    return out


def luminance_perez1993(
    directions: np.ndarray,
    sun_direction: np.ndarray,
    epsilon: np.ndarray,
    delta: np.ndarray,
    zenith: np.ndarray,
    diffuse_illuminance: np.ndarray | None = None,
) -> np.ndarray:
    """Sky luminance of the Perez, Seals & Michalsky (1993) all-weather model.

    Parameters
    ----------
    directions : ndarray (n, 3)
        Unit vectors of the sky elements (upper hemisphere), same frame as the sun.
    sun_direction : ndarray (3,) or (t, 3)
        Unit vector(s) towards the sun.
    epsilon, delta : float or ndarray (t,)
        Sky clearness ε and brightness Δ.
    zenith : float or ndarray (t,) [deg]
        Solar zenith angle used in the coefficients (normally that of ``sun_direction``).
    diffuse_illuminance : float or ndarray (t,), optional [lx]
        If given, the luminance is scaled so that the sky gives exactly this
        diffuse horizontal illuminance, integrated with a 48 × 192 product
        quadrature (Gauss–Legendre in sin altitude, midpoint in azimuth).

    Returns
    -------
    ndarray (t, n) (or (n,) for a single sun)
        Relative luminance l_v (dimensionless) or, with ``diffuse_illuminance``,
        luminance [cd/m²]. The fitted formula goes negative for a few ε, Δ
        combinations: the gradation term is floored at 0.01 and the product at 0.

    Notes
    -----
    l_v = [1 + a exp(b / cos θ)] [1 + c exp(d γ) + e cos² γ], θ the element's
    zenith angle, γ its angle to the sun [rad]; a..e from
    :func:`perez1993_coefficients`. cos θ is floored at 0.01 in the gradation term.

    References
    ----------
    Perez, R., Seals, R. & Michalsky, J. (1993). All-weather model for sky
    luminance distribution — preliminary configuration and validation. Solar
    Energy 50(3), 235–245. doi:10.1016/0038-092X(93)90017-I
    """
    dirs = np.asarray(directions, dtype=float)
    sun = np.asarray(sun_direction, dtype=float)
    single = sun.ndim == 1
    sun = np.atleast_2d(sun)
    a, b, c, d, e = perez1993_coefficients(epsilon, delta, zenith)[:, :, None]
    cos_gamma = np.broadcast_to(sun @ dirs.T, (max(sun.shape[0], a.shape[0]), dirs.shape[0]))
    lum = np.maximum(
        _perez_gradation(dirs[:, 2][None, :], a, b) * _perez_indicatrix(cos_gamma, c, d, e),
        0.0,
    )
    if diffuse_illuminance is not None:
        qd, qw = _hemisphere_quadrature()
        cos_q = np.broadcast_to(sun @ qd.T, (cos_gamma.shape[0], qd.shape[0]))
        lq = np.maximum(
            _perez_gradation(qd[:, 2][None, :], a, b) * _perez_indicatrix(cos_q, c, d, e),
            0.0,
        )
        horizontal = lq @ (qw * qd[:, 2])
        lum = lum * (np.atleast_1d(diffuse_illuminance) / horizontal)[:, None]
    return lum[0] if single else lum


def _hemisphere_quadrature(n_alt: int = 48, n_az: int = 192) -> tuple[np.ndarray, np.ndarray]:
    """Directions and solid-angle weights [sr] of a product rule over the upper hemisphere.

    Gauss–Legendre in sin(altitude) on (0, 1) and the midpoint rule in azimuth
    (exact for trigonometric polynomials of degree < n_az).
    """
    x, w = np.polynomial.legendre.leggauss(n_alt)
    s = 0.5 * (x + 1.0)
    az = (np.arange(n_az) + 0.5) * 360.0 / n_az
    s_grid, az_grid = np.meshgrid(s, az, indexing="ij")
    weights = np.repeat(0.5 * w * 2.0 * np.pi / n_az, n_az)
    return _direction_sin(az_grid.ravel(), s_grid.ravel()), weights


# --------------------------------------------------------------------------------------
# Sky luminance: CIE standard general skies (ISO 15469:2004 / CIE S 011/E:2003)
# --------------------------------------------------------------------------------------

CIE_GRADATION = {
    1: (4.0, -0.70), 2: (1.1, -0.8), 3: (0.0, -1.0),
    4: (-1.0, -0.55), 5: (-1.0, -0.32), 6: (-1.0, -0.15),
}
"""Gradation groups I–VI: parameters (a, b) (ISO 15469:2004, Table 1; from memory)."""

CIE_INDICATRIX = {
    1: (0.0, -1.0, 0.0), 2: (2.0, -1.5, 0.15), 3: (5.0, -2.5, 0.30),
    4: (10.0, -3.0, 0.45), 5: (16.0, -3.0, 0.30), 6: (24.0, -2.8, 0.15),
}
"""Indicatrix groups 1–6: parameters (c, d, e) (ISO 15469:2004, Table 2; from memory)."""

CIE_SKY_TYPES = {
    1: (1, 1), 2: (1, 2), 3: (2, 1), 4: (2, 2), 5: (3, 1), 6: (3, 2), 7: (3, 3),
    8: (3, 4), 9: (4, 2), 10: (4, 3), 11: (4, 4), 12: (5, 4), 13: (5, 5),
    14: (6, 5), 15: (6, 6),
}
"""The 15 standard general skies as (gradation group, indicatrix group)
(ISO 15469:2004, Table 3; from memory). 1 = overcast, steep gradation, azimuthal
uniformity; 12 = CIE standard clear sky, low turbidity; 13 = clear, polluted."""


def luminance_cie(
    sky_type: int, directions: np.ndarray, sun_direction: np.ndarray
) -> np.ndarray:
    """Luminance of a CIE standard general sky relative to the zenith luminance.

    Parameters
    ----------
    sky_type : int
        1..15 (ISO 15469:2004 / CIE S 011/E:2003, Table 3).
    directions : ndarray (n, 3)
        Unit vectors of the sky elements (upper hemisphere).
    sun_direction : ndarray (3,) or (t, 3)
        Unit vector(s) towards the sun (above the horizon).

    Returns
    -------
    ndarray (n,) or (t, n)
        L / L_z (dimensionless).

    Notes
    -----
    L / L_z = f(χ) φ(Z) / (f(Z_s) φ(0)) with the gradation
    φ(Z) = 1 + a exp(b / cos Z) (φ = 1 at the horizon, Z = 90°) and the
    indicatrix f(χ) = 1 + c [exp(d χ) − exp(d π/2)] + e cos² χ; Z the element's
    zenith angle, χ its angle to the sun, Z_s the solar zenith angle (radians).

    References
    ----------
    ISO 15469:2004 / CIE S 011/E:2003, Spatial distribution of daylight — CIE
    standard general sky. Kittler, R., Darula, S. & Perez, R. (1998). A set of
    standard skies characterizing daylight conditions for computer and
    energy conscious design. Final report, American–Slovak grant US-SK 92 052.
    """
    if sky_type not in CIE_SKY_TYPES:
        raise InputError(
            f"CIE standard sky type must be an integer 1..15, got {sky_type!r}",
            field="sky_type",
        )
    a, b = CIE_GRADATION[CIE_SKY_TYPES[sky_type][0]]
    c, d, e = CIE_INDICATRIX[CIE_SKY_TYPES[sky_type][1]]
    dirs = np.asarray(directions, dtype=float)
    sun = np.asarray(sun_direction, dtype=float)

    def phi(cos_z: np.ndarray) -> np.ndarray:
        with np.errstate(divide="ignore"):
            return 1.0 + a * np.exp(b / np.maximum(cos_z, 0.0))

    def f(cos_chi: np.ndarray) -> np.ndarray:
        cc = np.clip(cos_chi, -1.0, 1.0)
        return 1.0 + c * (np.exp(d * np.arccos(cc)) - np.exp(d * np.pi / 2)) + e * cc * cc

    return f(sun @ dirs.T) * phi(dirs[:, 2]) / (f(sun[..., 2])[..., None] * phi(np.array(1.0)))


def luminance_cie_overcast(directions: np.ndarray) -> np.ndarray:
    """Traditional CIE overcast sky (Moon & Spencer 1942), relative to the zenith.

    Parameters
    ----------
    directions : ndarray (n, 3)
        Unit vectors (upper hemisphere).

    Returns
    -------
    ndarray (n,)
        L / L_z = (1 + 2 sin α) / 3, α the altitude. Its horizontal illuminance is
        7π L_z / 9.

    References
    ----------
    Moon, P. & Spencer, D. E. (1942). Illumination from a non-uniform sky.
    Illuminating Engineering 37, 707–726 (adopted by the CIE in 1955).
    """
    return (1.0 + 2.0 * np.asarray(directions, dtype=float)[..., 2]) / 3.0


# --------------------------------------------------------------------------------------
# Sky vectors
# --------------------------------------------------------------------------------------

@dataclass(frozen=True, eq=False)
class SkyVectors:
    """Sky and sun sources of every time step for several building orientations.

    The sky is stored once per *orientation class*: orientations whose patches
    fall on the same set of site-frame directions (they differ by a multiple of
    every band's patch width, e.g. any multiple of 30° at MF2) see the same sky,
    only listed in another order. ``basis_sky[c]`` holds class ``c``'s patch
    values, and ``basis_index[k]`` says which row is orientation ``k``'s
    building-frame patch ``j``, so that

        sky[k, j, t] = basis_sky[orientation_class[k], basis_index[k, j], t]

    (:attr:`sky` builds that array on demand; the illuminance kernel gathers
    rows itself and never needs it).

    Attributes
    ----------
    orientations : ndarray (k,) [deg]
        Site azimuth of the front façade's outward normal, per orientation.
    time : pandas.DatetimeIndex (n_steps,)
        Step-ending stamps, local standard time.
    sun_altitude : ndarray (n_steps,) [deg]
        Apparent solar altitude at each step's representative sun time.
    daylight : ndarray (n_steps,) bool
        The sun is above the horizon (``sun_altitude > 0``).
    basis_sky : ndarray float32 (n_classes, n_patches + 1, n_steps) [lx]
        L_j Ω_j of the patches of each orientation class, the ground last.
    basis_index : ndarray int64 (k, n_patches + 1)
        Row of ``basis_sky[orientation_class[k]]`` holding building patch j of
        orientation k (the ground maps to the last row).
    orientation_class : ndarray int64 (k,)
        Class of each orientation.
    sun_index : ndarray int32 (k, n_steps, 3)
        The three sun points holding the sun (building frame).
    sun_weight : ndarray float32 (k, n_steps, 3) [lx]
        Barycentric weight × direct normal illuminance; 0 when the sun is down.
    global_horizontal_illuminance : ndarray (n_steps,) [lx]
        E_dh + E_dn sin(altitude): what the sky and sun deliver together on an
        unobstructed horizontal plane (also drives the ground luminance).
    diffuse_horizontal_illuminance, direct_normal_illuminance : ndarray (n_steps,) [lx]
    """

    orientations: np.ndarray
    time: pd.DatetimeIndex
    sun_altitude: np.ndarray
    daylight: np.ndarray
    basis_sky: np.ndarray
    basis_index: np.ndarray
    orientation_class: np.ndarray
    sun_index: np.ndarray
    sun_weight: np.ndarray
    global_horizontal_illuminance: np.ndarray
    diffuse_horizontal_illuminance: np.ndarray
    direct_normal_illuminance: np.ndarray

    @property
    def n_steps(self) -> int:
        """Number of time steps."""
        return int(self.sun_altitude.size)

    @functools.cached_property
    def sky(self) -> np.ndarray:
        """L_j Ω_j of every building-frame patch, ground last.

        float32 (k, n_patches + 1, n_steps) [lx], built from the class arrays.
        """
        k, n_basis = self.basis_index.shape
        out = np.empty((k, n_basis, self.basis_sky.shape[2]), dtype=np.float32)
        for o in range(k):
            np.take(self.basis_sky[self.orientation_class[o]], self.basis_index[o], axis=0,
                    out=out[o])
        return out


REFINE_BANDS = 1.5
"""Patches whose centre lies within this many band widths of the sun (18°, 9°,
4.5° for MF1, 2, 4) get their luminance averaged over stratified samples in
:func:`sky_vectors`; farther patches use the band-mean gradation × the
indicatrix at the centre. Measured against 256-sample patch means of the
formula (300 spring hours, Greensboro TMY3), L1 error of L_j Ω_j per step,
mean / max: MF1 0.33 % / 0.76 % (0.61 % / 1.8 % without refinement), MF2
0.10 % / 0.22 %, MF4 0.03 % / 0.06 %."""


def _site_basis(
    scheme: PatchScheme, orientations: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Distinct site-frame patches over several orientations.

    With orientation φ a patch at building azimuth a sits at site azimuth
    a + φ − 180 (DEVELOPERS.md frames); the sky's luminance there does not
    depend on the frame. Orientations that differ by a multiple of a band's
    patch width share that band's site patches (all twelve multiples of 30°
    share every band of MF2: 577 distinct patches instead of 6,924).

    Parameters
    ----------
    scheme : PatchScheme
    orientations : ndarray (k,) [deg]

    Returns
    -------
    centres : ndarray (V, 3)
        Unit vectors of the distinct site patches' centres, site frame; ordered
        by band, then site azimuth (so any subset keeps one order, whichever
        orientations are asked for together).
    band : ndarray (V,) int
        Band of each site patch.
    azimuth : ndarray (V,) [deg]
        Site azimuth of each site patch's centre, in [0, 360) (the cap: 0).
    index : ndarray (k, n_patches) int
        Site patch of each orientation's building-frame patch.
    """
    alt = np.degrees(np.arcsin(np.clip(scheme.centres[:, 2], -1.0, 1.0)))
    az = np.degrees(np.arctan2(scheme.centres[:, 0], scheme.centres[:, 1]))
    site = (az[None, :] + orientations[:, None] - 180.0) % 360.0  # (k, P)
    site = np.where(scheme.centres[:, 2] >= 1.0 - 1e-12, 0.0, site)  # the cap: any azimuth
    micro = np.round(site * 1e6).astype(np.int64) % 360_000_000  # same within 1e-6 deg
    band = np.repeat(np.arange(scheme.band_counts.size), scheme.band_counts)
    keys = band[None, :] * 360_000_000 + micro
    _, first, index = np.unique(keys.ravel(), return_index=True, return_inverse=True)
    k, p = np.divmod(first, scheme.n_patches)
    return _direction(site[k, p], alt[p]), band[p], site[k, p], index.reshape(keys.shape)


def _site_samples(scheme: PatchScheme, band: np.ndarray, azimuth: np.ndarray, n: int,
                  seed: int) -> np.ndarray:
    """Stratified directions inside site-frame patches, (V, n, 3), site frame.

    Every patch of a band gets the same jittered pattern relative to its own
    corner (one pattern per band, :func:`_jittered_unit_square`), so a patch's
    samples, like its centre, depend only on where it lies on the site's sky:
    rotating the building by a multiple of the patch width gives the same
    values, not just values equal up to sampling noise.
    """
    rng = np.random.default_rng(seed)
    uv = _jittered_unit_square(int(n), scheme.band_counts.size, rng)[band]  # (V, n, 2)
    s = np.sin(np.radians(scheme.band_edges))
    s_lo, s_hi = s[band][:, None], s[band + 1][:, None]
    width = (360.0 / scheme.band_counts[band])[:, None]
    az = azimuth[:, None] - 0.5 * width + uv[..., 1] * width
    return _direction_sin(az, s_lo + uv[..., 0] * (s_hi - s_lo))


def _orientation_classes(index: np.ndarray) -> tuple[np.ndarray, list[np.ndarray], np.ndarray]:
    """Group orientations that use the same set of site patches.

    Parameters
    ----------
    index : ndarray (k, n_patches) int
        Site patch of each orientation's patch (:func:`_site_basis`).

    Returns
    -------
    klass : ndarray (k,) int
        Class of each orientation (numbered in order of first appearance).
    rows : list of ndarray (n_patches,) int
        Each class's site patches, ascending.
    basis_index : ndarray (k, n_patches + 1) int
        Position of each orientation's patch in its class's rows; the ground
        (last entry) maps to ``n_patches``.
    """
    k, n_p = index.shape
    found: dict[bytes, int] = {}
    rows: list[np.ndarray] = []
    klass = np.empty(k, dtype=np.int64)
    basis_index = np.empty((k, n_p + 1), dtype=np.int64)
    for o in range(k):
        members = np.sort(index[o])
        c = found.setdefault(members.tobytes(), len(rows))
        if c == len(rows):
            rows.append(members)
        klass[o] = c
        basis_index[o, :n_p] = np.searchsorted(rows[c], index[o])
        basis_index[o, n_p] = n_p
    return klass, rows, basis_index


def _active_chunks(active: np.ndarray, chunk: int):
    """Yield (steps, runs) covering the active steps in chunks of about ``chunk``.

    ``steps`` are the chunk's active step indices; ``runs`` the (lo, hi, first)
    of each run of consecutive steps: positions lo:hi in ``steps`` and the
    step index ``first`` where it starts (so outputs are written as slices).
    """
    idx = np.flatnonzero(active)
    if not idx.size:
        return
    breaks = np.flatnonzero(np.diff(idx) > 1) + 1
    starts = np.concatenate([[0], breaks])
    ends = np.concatenate([breaks, [idx.size]])
    lo = 0
    while lo < idx.size:
        # whole runs until the chunk is full (a run longer than a chunk is split)
        hi = min(idx.size, lo + chunk)
        run_ends = ends[(ends > lo) & (ends <= hi)]
        hi = int(run_ends[-1]) if run_ends.size and hi < idx.size else hi
        cut = np.unique(np.concatenate([[lo], starts[(starts > lo) & (starts < hi)], [hi]]))
        runs = [(int(p - lo), int(q - lo), int(idx[p])) for p, q in itertools.pairwise(cut)]
        yield idx[lo:hi], runs
        lo = hi


def _band_quadrature(scheme: PatchScheme, n_nodes: int) -> tuple[np.ndarray, np.ndarray]:
    """Gauss–Legendre nodes in sin(altitude) per band, (n_bands, n_nodes) each.

    Returns the cos θ (= sin altitude) of the nodes and their weights (summing to 1
    per band): means over a band's solid angle of functions of altitude alone.
    """
    x, w = np.polynomial.legendre.leggauss(n_nodes)
    s = np.sin(np.radians(scheme.band_edges))
    lo, hi = s[:-1, None], s[1:, None]
    return lo + 0.5 * (x + 1.0) * (hi - lo), np.broadcast_to(0.5 * w, (lo.size, n_nodes))


def _illuminance_inputs(
    climate: Any, idx: np.ndarray, zenith: np.ndarray, extra: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Direct normal and diffuse horizontal illuminance [lx] of the chosen steps.

    The file's values where valid and plausible, the Perez (1990) efficacy model
    elsewhere (missing dew points take the file's median).
    """
    dew = np.asarray(climate.dew_point, dtype=float)
    dew_fill = np.nanmedian(dew) if np.isfinite(dew).any() else 10.0
    dew = np.where(np.isfinite(dew[idx]), dew[idx], dew_fill)
    ghi, dni, dhi = (np.nan_to_num(np.asarray(getattr(climate, q), float)[idx]) for q in
                     ("ghi", "dni", "dhi"))
    _, model_dn, model_dh = efficacy_perez1990(ghi, dni, dhi, zenith, dew, extra)
    out = []
    for lux_name, watt, model in (
        ("direct_illuminance", dni, model_dn),
        ("diffuse_illuminance", dhi, model_dh),
    ):
        lux = np.asarray(getattr(climate, lux_name), dtype=float)[idx]
        ok = np.asarray(climate.valid.get(lux_name, np.isfinite(lux)))[idx] & np.isfinite(lux)
        with np.errstate(divide="ignore", invalid="ignore"):
            k = lux / watt
        judged = watt > EFFICACY_MIN_IRRADIANCE
        ok &= ~judged | ((k >= PLAUSIBLE_EFFICACY[0]) & (k <= PLAUSIBLE_EFFICACY[1]))
        out.append(np.where(ok, lux, model))
    return out[0], out[1]


def sky_vectors(
    climate: Any,
    orientations: Any,
    scheme: PatchScheme,
    sun_points: Any,
    step_minutes: int = 60,
    ground_reflectance: float = 0.2,
    steps: Any = None,
    *,
    refine_samples: int = 16,
    seed: int = 0,
    chunk: int = 64,
    sun_position: tuple[np.ndarray, np.ndarray] | None = None,
    out: np.ndarray | None = None,
) -> SkyVectors:
    """Sky vectors (patch L Ω, ground) and sun weights of many orientations at once.

    Four stages: the chosen steps and their sun (here), the sky's
    illuminance and Perez coefficients (:func:`_sky_conditions`), the patch
    values per orientation class (:func:`_fill_basis_sky`) and the sun points
    with their weights (:func:`_sun_weights`).

    Parameters
    ----------
    climate : kernels.climate.Climate
        Hourly (or already resampled to ``step_minutes``) climate records.
    orientations : array_like (k,) [deg]
        Site azimuths of the front façade's outward normal.
    scheme : PatchScheme
        Sky subdivision (building frame).
    sun_points : kernels.sun.SunPoints
        Sun-point set of the direct-sun coefficients.
    step_minutes : int [min]
        Time step; sub-hourly steps resample the climate (``kernels.sun.resample``).
    ground_reflectance : float [-]
        ρ_g of the uniform ground: luminance ρ_g E_gh / π over 2π sr (common practice).
    steps : slice or int array, optional
        Only these steps of the year (the engine chunks in time).
    refine_samples : int
        Samples per patch (jittered grid, :func:`sample_directions`) for patches
        near the sun.
    seed : int
        Seed of those samples (the result is deterministic).
    chunk : int
        Time steps evaluated together (memory ~ 8 k · chunk · n_patches bytes).
    sun_position : (altitude, azimuth) of ndarray (n_steps_of_year,) [deg], optional
        The apparent solar altitude and site azimuth at every step's
        representative sun time for the *whole* year (``kernels.sun.solar_position``
        of ``kernels.sun.step_times(climate, step_minutes)[1]``). Callers that build
        the year in many ``steps`` chunks pass it to skip finding the sun times
        again on every call.
    out : ndarray float32 (n_classes, n_patches + 1, n_steps), optional
        Array that becomes ``basis_sky`` (every element is written), with
        n_classes = :func:`orientation_class_count`; a fresh one when omitted.
        Callers that run many blocks pass memory of their own to skip mapping
        fresh pages each time.

    Returns
    -------
    SkyVectors

    Notes
    -----
    * Orientation φ rotates only where the sky is sampled: the sun's building
      azimuth is A − φ + 180 (DEVELOPERS.md frames). The sky is evaluated once
      per distinct *site-frame* patch (:func:`_site_basis`; the sky does not
      depend on the building's frame), with near-sun samples placed by site
      azimuth (:func:`_site_samples`), and stored once per orientation class
      (:class:`SkyVectors`): twelve orientations 30° apart at MF2 cost one
      orientation's sky, and every orientation gets exactly what it gets alone.
    * Sky luminance: Perez, Seals & Michalsky (1993) from ε and Δ of the step's
      irradiance. A patch's luminance is its mean over the patch's solid angle:
      the gradation term (a function of altitude only) is averaged exactly per
      band with 6 Gauss–Legendre nodes in sin(altitude); the indicatrix is taken at
      the patch centre, except for patches whose centre lies within
      :data:`REFINE_BANDS` band widths of the sun, where the whole product is
      averaged over ``refine_samples`` stratified samples (the circumsolar term
      exp(d γ), d down to −7 per radian, varies too fast there for the centre
      value).
    * Normalisation per step: Σ_j C_j L_j Ω_j = E_dh with C_j the mean of
      sin(altitude) over patch j — an unobstructed upward sensor gets exactly
      the diffuse horizontal illuminance.
    * Steps with the sun at or below the horizon carry no sky and no sun (the
      representative sun of a step is the middle of its sunlit part, so only
      fully dark steps; twilight light is dropped, common practice).
    * Illuminance: the file's direct normal and diffuse horizontal values where
      valid and plausible (``kernels.climate.PLAUSIBLE_EFFICACY`` above
      ``EFFICACY_MIN_IRRADIANCE``), else
      :func:`efficacy_perez1990`. Where the irradiance needed for ε and Δ is
      missing, the step's sky takes the overcast bin (ε = 1, Δ = 0.2).
    * Cost: pass a climate already resampled to ``step_minutes``
      (``kernels.sun.resample``) and ``sun_position`` when calling repeatedly
      with ``steps``; otherwise each call resamples and finds the year's
      representative sun times again (about 1 s). Locating the sun
      among the sun points for every orientation is what remains per
      orientation (benchmarks/bench_series.py, docs/performance.md).
    """
    from luxsweep.kernels import sun as sunmod  # sun imports climate; keep sky importable alone

    clim = sunmod.resample(climate, step_minutes)
    idx = np.atleast_1d(np.arange(len(clim.time))[steps if steps is not None else slice(None)])
    if sun_position is None:
        altitude, azimuth = (v[idx] for v in sunmod.step_sun(clim))
    else:
        altitude, azimuth = (np.asarray(v, dtype=float)[idx] for v in sun_position)
    stamps = clim.time[idx]
    cond = _sky_conditions(clim, idx, stamps, altitude)
    phi = np.atleast_1d(np.asarray(orientations, dtype=float))
    sun_site = _direction(azimuth, altitude)
    site_centres, site_band, site_az, site_of = _site_basis(scheme, phi)
    klass, class_rows, basis_index = _orientation_classes(site_of)
    shape = (len(class_rows), scheme.n_patches + 1, idx.size)
    if out is None:
        basis_sky = np.empty(shape, np.float32)
    elif out.shape != shape or out.dtype != np.float32 or not out.flags.c_contiguous:
        raise ValueError(f"out must be a C-contiguous float32 array of shape {shape}, "
                         f"got {out.dtype} {out.shape}")
    else:
        basis_sky = out
    _fill_basis_sky(basis_sky, scheme, cond, sun_site, site_centres, site_band, site_az,
                    class_rows, refine_samples, seed, chunk)
    basis_sky[:, scheme.n_patches, :] = (2.0 * ground_reflectance * cond.e_gh).astype(np.float32)
    sun_index, sun_weight = _sun_weights(sun_points, sun_site, phi, cond.daylight, cond.e_dn)
    return SkyVectors(
        orientations=phi,
        time=stamps,
        sun_altitude=altitude,
        daylight=cond.daylight,
        basis_sky=basis_sky,
        basis_index=basis_index,
        orientation_class=klass,
        sun_index=sun_index,
        sun_weight=sun_weight,
        global_horizontal_illuminance=cond.e_gh,
        diffuse_horizontal_illuminance=cond.e_dh,
        direct_normal_illuminance=cond.e_dn,
    )


def orientation_class_count(scheme: PatchScheme, orientations: Any) -> int:
    """Number of orientation classes (first axis of ``SkyVectors.basis_sky``).

    Parameters
    ----------
    scheme : PatchScheme
    orientations : array_like (k,) [deg]

    Returns
    -------
    int
        Orientations whose patches land on the same site-frame directions
        share one class (:class:`SkyVectors`).
    """
    phi = np.atleast_1d(np.asarray(orientations, dtype=float))
    return len(_orientation_classes(_site_basis(scheme, phi)[3])[1])


@dataclass(frozen=True, eq=False)
class _Conditions:
    """The sky of the chosen steps: what :func:`_fill_basis_sky` and the sun need.

    ``e_dn``, ``e_dh``, ``e_gh`` [lx] are zero while the sun is down;
    ``active`` marks the steps with a sky to fill (daylight and E_dh > 0);
    ``coef`` float32 (5, n) are the Perez (1993) a…e of each step.
    """

    daylight: np.ndarray
    active: np.ndarray
    e_dn: np.ndarray
    e_dh: np.ndarray
    e_gh: np.ndarray
    coef: np.ndarray


def _sky_conditions(clim: Any, idx: np.ndarray, stamps: pd.DatetimeIndex,
                    altitude: np.ndarray) -> _Conditions:
    """Illuminance and Perez (1993) coefficients of the steps ``idx`` of a climate.

    Illuminance from :func:`_illuminance_inputs`; ε and Δ from irradiance
    (Perez et al. 1990). Where the irradiance is missing but illuminance exists,
    the step takes the overcast bin with a mid-range brightness (ε = 1, Δ = 0.2;
    a documented choice).
    """
    zenith = 90.0 - altitude
    extra = np.asarray(pvlib.irradiance.get_extra_radiation(stamps), dtype=float)
    e_dn, e_dh = _illuminance_inputs(clim, idx, zenith, extra)
    dni = np.nan_to_num(np.asarray(clim.dni, dtype=float)[idx])
    dhi = np.nan_to_num(np.asarray(clim.dhi, dtype=float)[idx])
    daylight = altitude > 0.0
    active = daylight & (e_dh > 0.0)
    e_dn = np.where(daylight, e_dn, 0.0)
    e_dh = np.where(daylight, e_dh, 0.0)
    e_gh = e_dh + e_dn * np.sin(np.radians(np.maximum(altitude, 0.0)))
    eps = sky_clearness(dhi, dni, zenith)
    delta = sky_brightness(dhi, zenith, extra)
    missing = ~np.isfinite(eps) | ~np.isfinite(delta)
    eps = np.where(missing, 1.0, eps)
    delta = np.where(missing, 0.2, delta)
    coef = perez1993_coefficients(eps, delta, zenith).astype(np.float32)  # (5, n)
    return _Conditions(daylight, active, e_dn, e_dh, e_gh, coef)


def _fill_basis_sky(
    basis_sky: np.ndarray, scheme: PatchScheme, cond: _Conditions, sun_site: np.ndarray,
    site_centres: np.ndarray, site_band: np.ndarray, site_az: np.ndarray,
    class_rows: list[np.ndarray], refine_samples: int, seed: int, chunk: int,
) -> None:
    """Write L_j Ω_j [lx] of every patch of every orientation class into ``basis_sky``.

    Evaluated once per distinct site-frame patch (``site_centres``), in chunks
    of active steps; inactive steps get zeros. The ground row is left to the
    caller. Normalised per step so that Σ_j C_j L_j Ω_j = E_dh with C_j the mean
    sin(altitude) of patch j (see :func:`sky_vectors`, Notes).
    """
    n_p = scheme.n_patches
    band_start = scheme.band_start
    omega = scheme.solid_angle[band_start][site_band].astype(np.float32)
    mean_sin = patch_mean_sin_altitude(scheme)[band_start][site_band].astype(np.float32)
    samples = _site_samples(scheme, site_band, site_az, refine_samples, seed).astype(np.float32)
    site_centres = site_centres.astype(np.float32)
    node_cos, node_w = _band_quadrature(scheme, 6)
    cos_radius = np.float32(np.cos(np.radians(REFINE_BANDS * scheme.band_edges[1])))
    sun_site32 = sun_site.astype(np.float32)
    e_dh, coef = cond.e_dh, cond.coef

    basis_sky[:, :n_p, np.flatnonzero(~cond.active)] = 0.0  # active steps are all written below
    for t, runs in _active_chunks(cond.active, chunk):
        a, b, c, d, e = coef[:, t]
        # gradation: exact mean over each band (altitude only), times Ω
        grad_band = (_perez_gradation(node_cos[:, :, None], a, b) * node_w[:, :, None]).sum(1)
        cos_sun = site_centres @ sun_site32[t].T  # (V, T)
        near_v, near_t = np.nonzero(cos_sun > cos_radius)
        lum = _perez_indicatrix(cos_sun, c, d, e)  # at the centres (cos_sun is consumed)
        lum *= grad_band[site_band].astype(np.float32)
        lum *= omega[:, None]
        # patches near the sun: mean of the whole product over stratified samples
        sp = samples[near_v]  # (N, S, 3)
        sun_n = sun_site32[t][near_t][:, None, :]  # (N, 1, 3)
        cos_s = sp[..., 0] * sun_n[..., 0]
        cos_s += sp[..., 1] * sun_n[..., 1]
        cos_s += sp[..., 2] * sun_n[..., 2]
        ti = near_t[:, None]
        lum[near_v, near_t] = (
            _perez_gradation(sp[..., 2], a[ti], b[ti])
            * _perez_indicatrix(cos_s, c[ti], d[ti], e[ti])
        ).mean(-1) * omega[near_v]
        np.maximum(lum, 0.0, out=lum)
        for cls, rows in enumerate(class_rows):
            part = lum if rows.size == lum.shape[0] else lum[rows]
            # normalise: Σ_j C_j L_j Ω_j = E_dh with C_j = mean sin(alt) of patch j
            scale = (e_dh[t] / (mean_sin[rows] @ part)).astype(np.float32)  # (T,)
            for lo, hi, first in runs:
                np.multiply(part[:, lo:hi], scale[lo:hi],
                            out=basis_sky[cls, :n_p, first : first + hi - lo])


def _sun_weights(sun_points: Any, sun_site: np.ndarray, phi: np.ndarray, daylight: np.ndarray,
                 e_dn: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Sun points and weights × E_dn [lx] of every orientation (building frame).

    Returns ``sun_index`` int32 and ``sun_weight`` float32 (k, n, 3); zero where
    the sun is down. Building azimuth = site azimuth − φ + 180 (DEVELOPERS.md).
    """
    n_k, n_t = phi.size, daylight.size
    rot = np.radians(180.0 - phi)  # building azimuth = site azimuth − φ + 180
    c_r, s_r = np.cos(rot)[:, None], np.sin(rot)[:, None]
    sun_b = np.stack(
        [
            sun_site[None, :, 0] * c_r + sun_site[None, :, 1] * s_r,
            sun_site[None, :, 1] * c_r - sun_site[None, :, 0] * s_r,
            np.broadcast_to(sun_site[None, :, 2], (n_k, n_t)),
        ],
        -1,
    )  # (k, n, 3)
    sun_index = np.zeros((n_k, n_t, 3), dtype=np.int32)
    sun_weight = np.zeros((n_k, n_t, 3), dtype=np.float32)
    day = np.flatnonzero(daylight)
    if day.size:
        si, sw = sun_points.weights(sun_b[:, day].reshape(-1, 3))
        sun_index[:, day] = si.reshape(n_k, day.size, 3)
        sun_weight[:, day] = (sw.reshape(n_k, day.size, 3) * e_dn[day, None]).astype(np.float32)
    return sun_index, sun_weight


def overcast_sky_vector(scheme: PatchScheme, ground_reflectance: float = 0.2) -> np.ndarray:
    """Sky-basis vector of the CIE overcast sky giving 1 lx on an unobstructed horizontal plane.

    Parameters
    ----------
    scheme : PatchScheme
    ground_reflectance : float [-]
        ρ_g of the uniform ground.

    Returns
    -------
    ndarray (n_patches + 1,) [lx per lx]
        L_j Ω_j with L_j the exact patch mean of L_z (1 + 2 sin α)/3 (linear in
        sin α, so the mean uses the patch's mean sin α), normalised so that
        Σ_j C_j L_j Ω_j = 1 with C_j the patch mean of sin α; the ground entry is
        2 ρ_g (luminance ρ_g · 1 lx / π over 2π sr). A sensor's daylight factor
        [%] is then 100 × (coefficients · vector).

    Notes
    -----
    The continuous sky gives 7π L_z / 9 on the horizontal (Moon & Spencer 1942).
    With patch means of L and of sin α the discrete sum is
    7π L_z/9 − (2/3) L_z Σ_j Ω_j Var_j(sin α), so the implied L_z is 0.4 % (MF1),
    0.1 % (MF2) above 9/(7π) (tests).
    """
    mean_sin = patch_mean_sin_altitude(scheme)
    lum = (1.0 + 2.0 * mean_sin) / 3.0
    lo = lum * scheme.solid_angle
    vec = np.empty(scheme.n_patches + 1)
    vec[:-1] = lo / (lo @ mean_sin)
    vec[-1] = 2.0 * ground_reflectance
    return vec


__all__ = [
    "CIE_GRADATION",
    "CIE_INDICATRIX",
    "CIE_SKY_TYPES",
    "CLEARNESS_BIN_EDGES",
    "REFINE_BANDS",
    "TREGENZA_BAND_COUNTS",
    "TREGENZA_BAND_WIDTH",
    "PatchScheme",
    "SkyVectors",
    "clearness_bin",
    "efficacy_perez1990",
    "ground_index",
    "luminance_cie",
    "luminance_cie_overcast",
    "luminance_perez1993",
    "orientation_class_count",
    "overcast_sky_vector",
    "patch_index",
    "patch_mean_sin_altitude",
    "patch_scheme",
    "perez1993_coefficients",
    "precipitable_water",
    "sample_directions",
    "sample_ground",
    "sky_brightness",
    "sky_clearness",
    "sky_vectors",
]
