"""Angular transmittance of uncoated glazing (kernels/glazing.py) against analytic optics.

Section and equation numbers quoted for Duffie & Beckman (Solar Engineering of
Thermal Processes, 4th ed., 2013) and Born & Wolf (Principles of Optics, 7th ed.,
1999) are from memory; the formulas themselves are the textbook results.
"""

from __future__ import annotations

import numpy as np
import pytest

from luxsweep.kernels.errors import InputError
from luxsweep.kernels.glazing import (
    REFERENCE_ABSORPTION,
    fit_absorption,
    fresnel_reflectance,
    glazing_optics,
    relative_transmittance,
    transmittance_fresnel,
)

N = 1.52
ANGLES = np.radians(np.arange(0.0, 90.0, 2.5))


def test_normal_incidence_reflectance():
    # analytic: ((n - 1) / (n + 1))² = 0.04257 for n = 1.52 (Born & Wolf §1.5.2)
    r_s, r_p = fresnel_reflectance(1.0, N)
    assert r_s == pytest.approx(((N - 1) / (N + 1)) ** 2, rel=1e-12)
    assert r_p == pytest.approx(((N - 1) / (N + 1)) ** 2, rel=1e-12)
    assert r_s == pytest.approx(0.0426, abs=5e-5)


def test_fresnel_matches_the_sine_tangent_form():
    # analytic, independent form of Fresnel's equations (Duffie & Beckman 2013, eqs.
    # 5.1.1–5.1.2; Born & Wolf §1.5.2): r⊥ = sin²(θ2−θ1)/sin²(θ2+θ1),
    # r∥ = tan²(θ2−θ1)/tan²(θ2+θ1), sin θ1 = n sin θ2; float rounding only
    th1 = ANGLES[1:]
    th2 = np.arcsin(np.sin(th1) / N)
    r_s, r_p = fresnel_reflectance(np.cos(th1), N)
    np.testing.assert_allclose(r_s, np.sin(th2 - th1) ** 2 / np.sin(th2 + th1) ** 2, rtol=1e-10)
    np.testing.assert_allclose(r_p, np.tan(th2 - th1) ** 2 / np.tan(th2 + th1) ** 2,
                               rtol=1e-9, atol=1e-15)


def test_brewster_angle_p_reflectance_vanishes():
    # analytic: tan θ_B = n (Brewster's law)
    r_s, r_p = fresnel_reflectance(np.cos(np.arctan(N)), N)
    assert r_p == pytest.approx(0.0, abs=1e-15)
    assert r_s > 0.1


def test_single_lossless_pane_with_multiple_reflections():
    # analytic: per polarisation τ = (1 − r)/(1 + r) for a lossless slab summing all
    # internal reflections (Duffie & Beckman 2013, §5.1)
    r = ((N - 1) / (N + 1)) ** 2
    tau = glazing_optics(1.0, 1, absorption=0.0, refractive_index=N)[0]
    assert tau == pytest.approx((1 - r) / (1 + r), rel=1e-12)


@pytest.mark.parametrize("panes", [1, 2, 3, 4])
def test_lossless_stack_matches_n_cover_formula(panes):
    # analytic: N lossless covers transmit (1 − r)/(1 + (2N − 1) r) per polarisation,
    # averaged over s and p (Duffie & Beckman 2013, §5.1, eq. 5.1.8 — number from memory)
    c = np.cos(ANGLES)
    r_s, r_p = fresnel_reflectance(c, N)
    expect = 0.5 * ((1 - r_s) / (1 + (2 * panes - 1) * r_s)
                    + (1 - r_p) / (1 + (2 * panes - 1) * r_p))
    tau = glazing_optics(c, panes, absorption=0.0, refractive_index=N)[0]
    np.testing.assert_allclose(tau, expect, rtol=1e-12)


@pytest.mark.parametrize("panes", [1, 2, 3])
@pytest.mark.parametrize("absorption", [0.0, 0.03, 0.2])
def test_energy_balance(panes, absorption):
    # energy conservation: τ + ρ + α = 1 with α summed on its own path (every
    # absorption event of the ray sum), not taken as 1 − τ − ρ; float rounding only
    c = np.cos(np.radians(np.linspace(0, 90, 91)))
    tau, rho, alpha = glazing_optics(c, panes, absorption)
    np.testing.assert_allclose(tau + rho + alpha, 1.0, atol=1e-13)
    assert np.all(alpha >= 0) and np.all(rho >= 0) and np.all(tau >= 0)
    if absorption == 0:
        np.testing.assert_allclose(alpha, 0.0, atol=1e-15)


@pytest.mark.parametrize("panes", [1, 2, 3])
def test_grazing_incidence_transmits_nothing(panes):
    # analytic: r → 1 as θ → 90° (Fresnel), so τ → 0
    c = np.cos(np.radians([85.0, 89.0, 89.9, 90.0]))
    tau = transmittance_fresnel(c, panes)
    assert tau[-1] == pytest.approx(0.0, abs=1e-12)  # cos(90°) is 6e-17 in floating point
    assert transmittance_fresnel(0.0, panes) == 0.0
    assert np.all(np.diff(tau) < 0) and tau[-2] < 0.005
    assert np.all(np.diff(transmittance_fresnel(np.cos(ANGLES), panes)) <= 1e-15)


def test_absorbing_pane_close_to_product_approximation():
    # Duffie & Beckman 2013 §5.3: τ ≈ τ_a · τ_r with τ_a = exp(−K L / cos θ2), τ_r the
    # lossless value; the approximation drops absorption in the repeated internal
    # passes, which at K L = 0.03 and r ≤ 0.3 costs below 0.5 % up to 70°
    th1 = np.radians(np.arange(0, 71, 5.0))
    th2 = np.arcsin(np.sin(th1) / N)
    tau_a = np.exp(-REFERENCE_ABSORPTION / np.cos(th2))
    tau_r = glazing_optics(np.cos(th1), 1, absorption=0.0)[0]
    tau = glazing_optics(np.cos(th1), 1, absorption=REFERENCE_ABSORPTION)[0]
    np.testing.assert_allclose(tau, tau_a * tau_r, rtol=5e-3)


@pytest.mark.parametrize(("panes", "target"), [(1, 0.88), (2, 0.70), (3, 0.55), (2, 0.30)])
def test_fitted_normal_transmittance(panes, target):
    kd = fit_absorption(target, panes)
    assert kd > 0
    # the fit reproduces the requested value (brentq tolerance 1e-12)
    assert transmittance_fresnel(1.0, panes, normal_transmittance=target) == pytest.approx(
        target, abs=1e-10
    )


def test_impossible_normal_transmittance_is_an_error():
    # lossless double glazing transmits at most (1 − r)/(1 + 3 r) = 0.849 (analytic)
    with pytest.raises(InputError, match=r"0\.8490") as err:
        transmittance_fresnel(1.0, 2, normal_transmittance=0.9)
    assert err.value.field == "transmittance"
    with pytest.raises(InputError):
        fit_absorption(0.0, 1)


def test_relative_transmittance():
    c = np.cos(ANGLES)
    for panes in (1, 2, 3):
        rel = relative_transmittance(c, panes)
        assert rel[0] == pytest.approx(1.0, abs=1e-15)  # definition: τ(θ)/τ(0)
        assert np.all(np.diff(rel) < 0)
        np.testing.assert_allclose(rel, transmittance_fresnel(c, panes)
                                   / transmittance_fresnel(1.0, panes), rtol=1e-14)
    # more panes lose more at oblique incidence (more reflecting interfaces)
    assert np.all(relative_transmittance(c[1:], 3) < relative_transmittance(c[1:], 1))
    # panes = 0: an unglazed opening transmits everything at every angle
    assert np.array_equal(relative_transmittance(c, 0), np.ones_like(c))
    assert np.array_equal(transmittance_fresnel(c, 0, 0.5), np.ones_like(c))


def test_transmittance_alone_equals_the_full_optics_bit_for_bit():
    # relative_transmittance runs on every ray that crosses a window, so it evaluates the
    # transmittance path of glazing_optics alone; the same operations in the same order
    # must give the same bits (IEEE 754 arithmetic is deterministic), grazing included.
    from luxsweep.kernels.glazing import _transmittance

    rng = np.random.default_rng(4)
    c = np.concatenate([[0.0, 1.0, 1e-300, 1e-9, 0.5, -0.2, 1.3], np.cos(ANGLES),
                        rng.random(3000), rng.random(500) ** 12])
    for panes in (1, 2, 3, 4):
        for absorption in (0.0, REFERENCE_ABSORPTION, 0.4):
            for n in (1.33, N, 1.9):
                assert np.array_equal(_transmittance(c, panes, absorption, n),
                                      glazing_optics(c, panes, absorption, n)[0])
        assert np.array_equal(relative_transmittance(c, panes),
                              glazing_optics(c, panes)[0] / glazing_optics(1.0, panes)[0])
