"""The Arrhenius law and the classical fits, against closed forms, scipy and a published table."""

import numpy as np
import pytest
from scipy import stats

from inference.physics.arrhenius import (
    R,
    auto_reference_temperature,
    linearised_fit,
    ln_pre_exponential,
    ln_rate_constant,
    two_point_estimate,
)

# Decomposition of N2O5 in the gas phase, first order; rate constants of Daniels and Johnston,
# J. Am. Chem. Soc. 43 (1921) 53, as reproduced in physical-chemistry textbooks (values from memory):
# t/degC: 25, 35, 45, 55, 65;  k/s^-1: 3.46e-5, 1.35e-4, 4.98e-4, 1.50e-3, 4.87e-3.
# The published activation energy is 24.7 kcal/mol = 103.3 kJ/mol (from memory; quoted to three figures).
N2O5_T = np.array([25.0, 35.0, 45.0, 55.0, 65.0]) + 273.15
N2O5_K = np.array([3.46e-5, 1.35e-4, 4.98e-4, 1.50e-3, 4.87e-3])
N2O5_EA_PUBLISHED = 24.7 * 4184.0


def test_linearised_fit_matches_scipy_linregress():
    # Independent computation: scipy.stats.linregress on the same ln k versus 1/T.
    fit = linearised_fit(N2O5_T, N2O5_K)
    ref = stats.linregress(1.0 / N2O5_T, np.log(N2O5_K))
    assert fit.slope == pytest.approx(ref.slope, rel=1e-12)
    assert fit.intercept == pytest.approx(ref.intercept, rel=1e-12)
    assert fit.se_slope == pytest.approx(ref.stderr, rel=1e-10)
    assert fit.se_intercept == pytest.approx(ref.intercept_stderr, rel=1e-10)
    assert fit.r_squared == pytest.approx(ref.rvalue**2, rel=1e-12)
    # 95 % interval from Student's t with n - 2 = 3 degrees of freedom: t = 3.182 (any t table).
    assert fit.t95 == pytest.approx(3.182446, rel=1e-6)


def test_linearised_fit_reproduces_published_activation_energy():
    fit = linearised_fit(N2O5_T, N2O5_K)
    # The source quotes 24.7 kcal/mol, i.e. to +-0.05 kcal/mol = 0.2 kJ/mol; allow 0.5 kJ/mol for rounding of
    # the tabulated k values.
    assert fit.ea == pytest.approx(N2O5_EA_PUBLISHED, abs=500.0)
    low, high = fit.ea_ci
    assert low < N2O5_EA_PUBLISHED < high


def test_two_point_estimate_is_exact_on_an_exact_arrhenius_line():
    # Closed form: two points on k = A exp(-Ea/RT) give back Ea and A exactly.
    ea, a = 90_000.0, 3.0e12
    temperature = np.array([300.0, 320.0, 340.0])
    k = a * np.exp(-ea / (R * temperature))
    pair = two_point_estimate(temperature, k)
    assert pair.ea == pytest.approx(ea, rel=1e-10)
    assert pair.a == pytest.approx(a, rel=1e-9)


def test_reference_form_equals_the_usual_form():
    # ln k_ref - (Ea/R)(1/T - 1/T_ref) = ln A - Ea/(R T) with ln A = ln k_ref + Ea/(R T_ref) (algebra).
    ln_k_ref, ea, t_ref = np.log(2e-3), 75_000.0, 330.0
    temperature = np.linspace(290.0, 380.0, 7)
    ln_a = ln_pre_exponential(ln_k_ref, ea, t_ref)
    assert ln_rate_constant(temperature, ln_k_ref, ea, t_ref) == pytest.approx(ln_a - ea / (R * temperature))


def test_auto_reference_temperature_is_harmonic_mean():
    temperature = np.array([300.0, 330.0, 360.0])
    assert auto_reference_temperature(temperature) == pytest.approx(3.0 / np.sum(1.0 / temperature))
    # It centres 1/T, so the OLS intercept at x = 1/T - 1/T_ref is uncorrelated with the slope (algebra).
    assert np.mean(1.0 / temperature - 1.0 / auto_reference_temperature(temperature)) == pytest.approx(0.0, abs=1e-18)


def test_gas_constant_is_codata():
    # R = N_A k_B = 8.314462618... J/(mol K), exact since the 2019 SI redefinition (CODATA 2018).
    assert pytest.approx(8.314462618, rel=1e-9) == R
