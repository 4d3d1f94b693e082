"""Angular transmittance of uncoated glazing from Fresnel's equations.

Each pane is a parallel slab of refractive index ``n`` with internal
transmittance ``a = exp(−k·d / cos θ_t)`` along the refracted path (``k·d``,
the product of extinction coefficient and thickness, is the pane's
*absorption*). Reflection at each interface follows Fresnel's equations for the
s- and p-polarised halves of unpolarised light; the multiple reflections inside
a pane and between panes are summed exactly (the layer-by-layer ray-sum /
net-radiation result), per polarisation, and the two polarisations are averaged
at the end.

References
----------
.. [1] J. A. Duffie, W. A. Beckman, "Solar Engineering of Thermal Processes",
   4th ed., Wiley, 2013, ch. 5 (transmission of radiation through glazing).
.. [2] M. Born, E. Wolf, "Principles of Optics", 7th ed., Cambridge University
   Press, 1999, §1.5 (Fresnel formulae).
.. [3] ISO 9050:2003, "Glass in building — Determination of light transmittance
   … and related glazing factors" (multiple-pane combination of layers).

Section numbers above are from memory.
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import brentq

from luxsweep.kernels.errors import InputError

REFRACTIVE_INDEX = 1.52
"""Refractive index of soda-lime float glass in the visible (common practice)."""

REFERENCE_ABSORPTION = 0.03
"""Absorption k·d [-] of one pane of the reference clear glass used for
:func:`relative_transmittance`: about 4 mm at k ≈ 7.5 m⁻¹, between the
water-white (k ≈ 4 m⁻¹) and greenish-edge (k ≈ 32 m⁻¹) glasses quoted by
Duffie & Beckman [1] (from memory). It gives a single-pane normal transmittance
of 0.891, typical of clear float glass."""


def fresnel_reflectance(
    cos_incidence: np.ndarray, refractive_index: float = REFRACTIVE_INDEX
) -> tuple[np.ndarray, np.ndarray]:
    """Reflectance of one air–glass interface for s- and p-polarised light.

    Parameters
    ----------
    cos_incidence : array_like [-]
        Cosine of the angle of incidence (clipped to [0, 1]).
    refractive_index : float [-]

    Returns
    -------
    r_s, r_p : ndarray [-]

    Notes
    -----
    ``r_s = ((cos θ − n cos θ_t) / (cos θ + n cos θ_t))²``,
    ``r_p = ((cos θ_t − n cos θ) / (cos θ_t + n cos θ))²`` with Snell's law
    ``sin θ = n sin θ_t`` (Born & Wolf [2], §1.5.2). At normal incidence both
    are ``((n − 1)/(n + 1))²``; ``r_p`` vanishes at Brewster's angle
    ``tan θ_B = n``; both reach 1 at grazing incidence.
    """
    c = np.clip(np.asarray(cos_incidence, dtype=np.float64), 0.0, 1.0)
    n = refractive_index
    ct = _cos_refracted(c, n)
    r_s = ((c - n * ct) / (c + n * ct)) ** 2
    r_p = ((ct - n * c) / (ct + n * c)) ** 2
    return r_s, r_p


def _cos_refracted(c: np.ndarray, n: float) -> np.ndarray:
    return np.sqrt(1.0 - (1.0 - c * c) / (n * n))


def _pane(r: np.ndarray, a: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Transmittance, reflectance and absorptance of one slab, one polarisation.

    ``τ = (1−r)² a / (1 − r² a²)``, ``ρ = r + r (1−r)² a² / (1 − r² a²)``,
    ``α = (1−r)(1−a) / (1 − r a)`` (the geometric series of the passes inside
    the slab; Duffie & Beckman [1], §5.3). At grazing incidence (r = 1) the
    slab reflects everything.
    """
    grazing = r >= 1.0
    r = np.where(grazing, 0.0, r)
    den = 1.0 - (r * a) ** 2
    tau = (1 - r) ** 2 * a / den
    rho = r + r * (1 - r) ** 2 * a * a / den
    alpha = (1 - r) * (1 - a) / (1 - r * a)
    return (np.where(grazing, 0.0, tau), np.where(grazing, 1.0, rho),
            np.where(grazing, 0.0, alpha))


def glazing_optics(
    cos_incidence: np.ndarray,
    panes: int,
    absorption: float = REFERENCE_ABSORPTION,
    refractive_index: float = REFRACTIVE_INDEX,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Transmittance, reflectance and absorptance of ``panes`` identical uncoated panes.

    Parameters
    ----------
    cos_incidence : array_like [-]
        Cosine of the angle of incidence on the outer pane.
    panes : int
        Number of panes (≥ 1).
    absorption : float [-]
        k·d of each pane (0 = lossless).
    refractive_index : float [-]

    Returns
    -------
    tau, rho, alpha : ndarray [-]
        Transmittance, front reflectance and total absorptance for unpolarised
        light; each is computed on its own path, so ``tau + rho + alpha = 1``
        is a check, not an identity.

    Notes
    -----
    A stack S (front) and a pane L behind it combine as (per polarisation,
    ``D = 1 − ρ_S,back ρ_L``) ``τ = τ_S τ_L / D``,
    ``ρ_front = ρ_S,front + τ_S² ρ_L / D``, ``ρ_back = ρ_L + τ_L² ρ_S,back / D``,
    ``α_front = α_S,front + τ_S (α_L + ρ_L α_S,back) / D``,
    ``α_back = α_L + τ_L (α_S,back + ρ_S,back α_L) / D`` — the sum of the
    inter-reflections in the gap (Duffie & Beckman [1] §5.3; ISO 9050 [3]).
    """
    c = np.clip(np.asarray(cos_incidence, dtype=np.float64), 0.0, 1.0)
    a = np.exp(-absorption / _cos_refracted(c, refractive_index))
    out = []
    for r in fresnel_reflectance(c, refractive_index):
        t1, p1, a1 = _pane(r, a)
        tau, rf, rb, af, ab = t1, p1, p1, a1, a1
        for _ in range(panes - 1):
            den = 1.0 - rb * p1
            den = np.where(den > 0, den, 1.0)  # both reflect fully at grazing: τ = α = 0
            tau, rf, rb, af, ab = (
                tau * t1 / den,
                rf + tau * tau * p1 / den,
                p1 + t1 * t1 * rb / den,
                af + tau * (a1 + p1 * ab) / den,
                a1 + t1 * (ab + rb * a1) / den,
            )
        out.append((tau, rf, af))
    (ts, rs, as_), (tp, rp, ap) = out
    return 0.5 * (ts + tp), 0.5 * (rs + rp), 0.5 * (as_ + ap)


def fit_absorption(
    normal_transmittance: float, panes: int, refractive_index: float = REFRACTIVE_INDEX
) -> float:
    """Absorption k·d [-] per pane that gives ``normal_transmittance`` at normal incidence.

    Raises
    ------
    InputError
        When the value is not in (0, τ_lossless], τ_lossless being the normal
        transmittance of ``panes`` lossless panes.
    """
    lossless = float(glazing_optics(1.0, panes, 0.0, refractive_index)[0])
    if not 0.0 < normal_transmittance <= lossless:
        raise InputError(
            f"normal transmittance {normal_transmittance:g} is not possible for {panes} "
            f"uncoated pane(s) of refractive index {refractive_index:g}: it must lie in "
            f"(0, {lossless:.4f}]; lower it or reduce the number of panes",
            field="transmittance",
        )
    if normal_transmittance == lossless:
        return 0.0
    return float(
        brentq(
            lambda kd: float(glazing_optics(1.0, panes, kd, refractive_index)[0])
            - normal_transmittance,
            0.0,
            60.0,
            xtol=1e-14,
            rtol=1e-12,
        )
    )


def transmittance_fresnel(
    cos_incidence: np.ndarray,
    panes: int,
    normal_transmittance: float | None = None,
    refractive_index: float = REFRACTIVE_INDEX,
) -> np.ndarray:
    """Angular transmittance [-] of ``panes`` uncoated panes.

    Parameters
    ----------
    cos_incidence : array_like [-]
        Cosine of the angle of incidence.
    panes : int
        Number of panes; 0 is an unglazed opening (1 at all angles).
    normal_transmittance : float, optional [-]
        Transmittance at normal incidence; the absorption of each pane is
        fitted to it (:func:`fit_absorption`). Default: the reference clear
        glass (:data:`REFERENCE_ABSORPTION`).
    refractive_index : float [-]

    Returns
    -------
    ndarray [-]
    """
    c = np.asarray(cos_incidence, dtype=np.float64)
    if panes == 0:
        return np.ones_like(c)
    kd = (REFERENCE_ABSORPTION if normal_transmittance is None
          else fit_absorption(normal_transmittance, panes, refractive_index))
    return glazing_optics(c, panes, kd, refractive_index)[0]


def _transmittance(
    cos_incidence: np.ndarray,
    panes: int,
    absorption: float = REFERENCE_ABSORPTION,
    refractive_index: float = REFRACTIVE_INDEX,
) -> np.ndarray:
    """Transmittance [-] of ``panes`` identical uncoated panes, alone.

    The transmittance of :func:`glazing_optics` without its reflectance and
    absorptance outputs: the same operations in the same order on the
    quantities the transmittance needs (Fresnel reflectances, the slab's
    ``τ`` and back reflectance ``ρ``, the stack recursion), so the result is
    bit for bit ``glazing_optics(...)[0]`` at about half the work.
    """
    c = np.clip(np.asarray(cos_incidence, dtype=np.float64), 0.0, 1.0)
    n = refractive_index
    ct = _cos_refracted(c, n)
    a = np.exp(-absorption / ct)
    n_ct, n_c = n * ct, n * c
    total = None
    for r in (((c - n_ct) / (c + n_ct)) ** 2, ((ct - n_c) / (ct + n_c)) ** 2):
        grazing = r >= 1.0
        some = bool(np.any(grazing))
        if some:
            r = np.where(grazing, 0.0, r)
        lost = (1 - r) ** 2  # as in _pane
        den = 1.0 - (r * a) ** 2
        t1 = lost * a / den
        if some:
            t1 = np.where(grazing, 0.0, t1)
        tau = t1
        if panes > 1:
            p1 = r + r * lost * a * a / den
            if some:
                p1 = np.where(grazing, 1.0, p1)
            rb = p1
            for k in range(panes - 1):
                d = 1.0 - rb * p1
                d = np.where(d > 0, d, 1.0)
                if k < panes - 2:  # the last back reflectance is not needed
                    rb = p1 + t1 * t1 * rb / d
                tau = tau * t1 / d
        total = tau if total is None else 0.5 * (total + tau)
    return total


def relative_transmittance(cos_incidence: np.ndarray, panes: int) -> np.ndarray:
    """Angular profile τ(θ)/τ(0) [-] of the reference clear glass.

    Coefficient sets are computed with unit normal transmittance and this
    profile; a variant's normal transmittance scales them (DESIGN.md §2.6).
    Uses n = :data:`REFRACTIVE_INDEX` and :data:`REFERENCE_ABSORPTION` per
    pane; ``panes = 0`` (unglazed opening) gives 1 at all angles. Evaluated
    with the transmittance part of :func:`glazing_optics` only (the same
    numbers, bit for bit, in about half the time: it runs on every ray that
    crosses a window in the coefficient stage).
    """
    c = np.asarray(cos_incidence, dtype=np.float64)
    if panes == 0:
        return np.ones_like(c)
    return _transmittance(c, panes) / _transmittance(1.0, panes)


__all__ = [
    "REFERENCE_ABSORPTION",
    "REFRACTIVE_INDEX",
    "fit_absorption",
    "fresnel_reflectance",
    "glazing_optics",
    "relative_transmittance",
    "transmittance_fresnel",
]
