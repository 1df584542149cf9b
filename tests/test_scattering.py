"""Backscatter laws against their published forms and defining properties."""

import math

import numpy as np
import pytest
from scipy.integrate import quad

from cluttersim import kernels
from cluttersim.physics import scattering
from cluttersim.physics.scattering import LAWS, sigma0


def hagfors_published(theta_deg, c, rho):
    """Hagfors (1964), J. Geophys. Res. 69(18), eq. for the quasi-specular law, written out
    independently here: σ0 = (Cρ/2)(cos⁴θ + C sin²θ)^(-3/2)."""
    t = math.radians(theta_deg)
    return c * rho / 2 * (math.cos(t) ** 4 + c * math.sin(t) ** 2) ** -1.5


def gaussian_published(theta_deg, s, rho):
    """Geometric optics for Gaussian slopes (Ulaby, Moore & Fung 1982, Vol. II, ch. 12):
    σ0 = ρ sec⁴θ exp(−tan²θ / 2s²) / (2 s²)."""
    t = math.radians(theta_deg)
    return rho / (2 * s**2) / math.cos(t) ** 4 * math.exp(-math.tan(t) ** 2 / (2 * s**2))


ANGLES_DEG = [0.0, 1.0, 2.5, 5.0, 10.0, 20.0, 30.0, 45.0, 60.0, 80.0]


@pytest.mark.parametrize("theta", ANGLES_DEG)
@pytest.mark.parametrize("c, rho", [(100.0, 0.1), (400.0, 0.08), (10.0, 0.3)])
def test_hagfors_matches_published_form(theta, c, rho):
    assert sigma0("hagfors", theta, C=c, rho=rho) == pytest.approx(hagfors_published(theta, c, rho), rel=1e-12)


def test_hagfors_hand_values():
    # Worked by hand from Hagfors (1964): C = 100, ρ = 0.1
    #   θ = 0:   Cρ/2 = 5
    #   θ = 90°: (Cρ/2) C^(-3/2) = 5 / 1000 = 0.005
    assert sigma0("hagfors", 0.0, C=100.0, rho=0.1) == pytest.approx(5.0, rel=1e-12)
    assert sigma0("hagfors", 90.0, C=100.0, rho=0.1) == pytest.approx(0.005, rel=1e-9)


@pytest.mark.parametrize("theta", ANGLES_DEG[:-1])
def test_gaussian_matches_published_form(theta):
    s = math.tan(math.radians(5.0))
    assert sigma0("gaussian", theta, rms_slope_deg=5.0, rho=0.1) == pytest.approx(gaussian_published(theta, s, 0.1), rel=1e-12)


@pytest.mark.parametrize("law, params", [("hagfors", {"C": 1000.0, "rho": 0.1}), ("gaussian", {"rms_slope_deg": 1.5, "rho": 0.1})])
def test_quasi_specular_laws_give_sphere_cross_section_rho_pi_a2(law, params):
    """A smooth sphere of radius a with reflectivity ρ has cross-section ρπa², so
    ∫₀^{π/2} σ0(θ) 2π a² sinθ dθ = ρπa² ⇒ ∫ σ0 sinθ dθ = ρ/2 (Evans & Hagfors 1968,
    Radar Astronomy, ch. 5). Holds for gentle slopes, to ~1/C."""
    val, _ = quad(lambda t: sigma0(law, math.degrees(t), **params) * math.sin(t), 0, math.pi / 2, limit=200, points=[0.01, 0.05])
    assert val == pytest.approx(params["rho"] / 2, rel=5e-3)


def test_hagfors_and_gaussian_share_the_nadir_value_when_c_is_one_over_s2():
    # At nadir Hagfors gives Cρ/2 and geometric optics ρ/(2s²): equal for C = 1/s²
    # (Hagfors 1964: rms slope = C^-1/2). Away from nadir the laws differ in shape.
    s = math.tan(math.radians(2.0))
    h = sigma0("hagfors", 0.0, C=1 / s**2, rho=0.1)
    g = sigma0("gaussian", 0.0, rms_slope_deg=2.0, rho=0.1)
    assert h == pytest.approx(g, rel=1e-12)
    assert h == pytest.approx(0.1 / (2 * s**2), rel=1e-12)


def test_lambert_and_cosine_laws():
    # σ0 = k cos²θ and k cosⁿθ (Evans & Hagfors 1968): at 60°, cos = 1/2.
    assert sigma0("lambert", 60.0, k=0.2) == pytest.approx(0.05, rel=1e-12)
    assert sigma0("cosine", 60.0, k=0.2, n=3.0) == pytest.approx(0.025, rel=1e-12)
    assert sigma0("cosine", 37.0, k=0.3, n=2.0) == pytest.approx(sigma0("lambert", 37.0, k=0.3), rel=1e-12)
    assert sigma0("constant", 70.0, sigma0=0.02) == pytest.approx(0.02)


@pytest.mark.parametrize("law", list(LAWS))
def test_kernel_dispatch_evaluates_the_same_law(law):
    spec = LAWS[law]
    params = dict(zip(spec.params, spec.defaults))
    p = list(params.values()) + [0.0]
    for theta in (0.0, 3.0, 25.0, 70.0):
        cos_inc = math.cos(math.radians(theta))
        assert kernels.sigma0_by_code(spec.code, cos_inc, p[0], p[1]) == pytest.approx(
            float(sigma0(law, theta, **params)), rel=1e-12
        )


def test_fresnel_reflectivity_of_water_ice():
    # ε = 3.15 (pure ice, common practice) → ((1 − √ε)/(1 + √ε))² ≈ 0.0781 (Born & Wolf §1.5.3)
    assert scattering.fresnel_reflectivity_normal(3.15) == pytest.approx(0.0781, abs=2e-4)
    assert np.isclose(scattering.fresnel_reflectivity_normal(1.0), 0.0)
