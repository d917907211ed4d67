"""The Arrhenius law about a reference temperature, and the classical fits it is compared with.

Pure numerics: plain numbers and numpy arrays in, numbers out; temperatures in K, energies in J/mol. The
functions written with arithmetic operators only (``ln_rate_constant``, ``ln_pre_exponential``) work on
PyTensor tensors too, which is how the model builder reuses them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import constants

#: Molar gas constant, J/(mol K) (CODATA, exact since the 2019 SI redefinition), from scipy.constants.
R = constants.R


def ln_rate_constant(temperature, ln_k_ref, ea, temperature_ref, exponent=0.0):
    """ln k(T) = ln k_ref + n ln(T/T_ref) - (Ea/R)(1/T - 1/T_ref); T and T_ref in K, Ea in J/mol, n the
    temperature exponent of the extended (modified) Arrhenius form, 0 for the plain law."""
    value = ln_k_ref - ea / R * (1.0 / temperature - 1.0 / temperature_ref)
    if isinstance(exponent, float | int) and exponent == 0:
        return value
    return value + exponent * np.log(temperature / temperature_ref)


def ln_pre_exponential(ln_k_ref, ea, temperature_ref, exponent=0.0):
    """ln A of k = A T^n exp(-Ea/(R T)), from k at T_ref: ln A = ln k_ref + Ea/(R T_ref) - n ln T_ref
    (A in the rate-constant unit per K^n; n = 0 is the plain law)."""
    return ln_k_ref + ea / (R * temperature_ref) - exponent * np.log(temperature_ref)


#: Boltzmann and Planck constants (CODATA, exact in the 2019 SI), from scipy.constants.
BOLTZMANN, PLANCK = constants.k, constants.h


@dataclass(frozen=True)
class ActivationParameters:
    """Eyring's activation enthalpy and Gibbs energy (J/mol) and entropy (J/(mol K)) at one temperature."""

    enthalpy: np.ndarray
    entropy: np.ndarray
    gibbs: np.ndarray


def eyring_activation(
    ln_k_si,
    ea,
    temperature: float,
    molecularity: float,
    phase: str,
    standard_concentration_si: float,
    exponent=0.0,
) -> ActivationParameters:
    """Transition-state parameters from k and Ea at ``temperature`` (K), with transmission coefficient 1.

    Eyring: k = (k_B T / h) (c°)^(1-m) exp(dS/R) exp(-dH/(R T)), k in SI units ((mol/m^3)^(1-m)/s) and c°
    in mol/m^3. From the local activation energy Ea_T = Ea + n R T (n: temperature exponent):
    dH = Ea_T - R T in solution, dH = Ea_T - m R T in the gas phase (m: molecularity); IUPAC Gold Book,
    "Eyring equation" and "enthalpy of activation" (from memory).
    """
    local_ea = ea + exponent * R * temperature
    enthalpy = local_ea - (1.0 if phase == "solution" else molecularity) * R * temperature
    ln_frequency = np.log(BOLTZMANN * temperature / PLANCK)
    ln_standard = (1.0 - molecularity) * np.log(standard_concentration_si)
    entropy = R * (ln_k_si - ln_standard - ln_frequency) + enthalpy / temperature
    return ActivationParameters(enthalpy, entropy, enthalpy - temperature * entropy)


def auto_reference_temperature(temperature_K: np.ndarray) -> float:
    """T_ref = 1 / mean(1/T), which centres 1/T and so decorrelates ln k_ref from Ea (K)."""
    return float(1.0 / np.mean(1.0 / np.asarray(temperature_K, dtype=float)))


@dataclass(frozen=True)
class LinearisedFit:
    """Ordinary least squares of ln k on 1/T: ln k = intercept + slope / T.

    slope in K, intercept in ln of the rate-constant unit; ``ci`` are two-sided 95 % confidence intervals
    from Student's t with n - 2 degrees of freedom; Ea = -R slope (J/mol), A = exp(intercept).
    """

    n: int
    slope: float
    intercept: float
    se_slope: float
    se_intercept: float
    r_squared: float
    t95: float

    @property
    def slope_ci(self) -> tuple[float, float]:
        return self.slope - self.t95 * self.se_slope, self.slope + self.t95 * self.se_slope

    @property
    def intercept_ci(self) -> tuple[float, float]:
        return self.intercept - self.t95 * self.se_intercept, self.intercept + self.t95 * self.se_intercept

    @property
    def ea(self) -> float:
        return -R * self.slope

    @property
    def se_ea(self) -> float:
        return R * self.se_slope

    @property
    def ea_ci(self) -> tuple[float, float]:
        low, high = self.slope_ci
        return -R * high, -R * low

    @property
    def a(self) -> float:
        return float(np.exp(self.intercept))

    @property
    def a_ci(self) -> tuple[float, float]:
        low, high = self.intercept_ci
        return float(np.exp(low)), float(np.exp(high))


def linearised_fit(temperature_K: np.ndarray, k: np.ndarray) -> LinearisedFit:
    """The classical Arrhenius plot fit: OLS of ln k on 1/T with standard errors (needs 3+ points for them)."""
    x = 1.0 / np.asarray(temperature_K, dtype=float)
    y = np.log(np.asarray(k, dtype=float))
    n = x.size
    x_mean = x.mean()
    sxx = np.sum((x - x_mean) ** 2)
    slope = float(np.sum((x - x_mean) * (y - y.mean())) / sxx)
    intercept = float(y.mean() - slope * x_mean)
    residuals = y - (intercept + slope * x)
    dof = n - 2
    if dof > 0:
        s2 = float(np.sum(residuals**2) / dof)
        se_slope = float(np.sqrt(s2 / sxx))
        se_intercept = float(np.sqrt(s2 * (1.0 / n + x_mean**2 / sxx)))
        from scipy import stats  # imported here: scipy.stats takes half a second, and few commands need it

        t95 = float(stats.t.ppf(0.975, dof))
    else:
        se_slope = se_intercept = t95 = float("nan")
    total = float(np.sum((y - y.mean()) ** 2))
    r_squared = 1.0 - float(np.sum(residuals**2)) / total if total > 0 else float("nan")
    return LinearisedFit(n, slope, intercept, se_slope, se_intercept, r_squared, t95)


@dataclass(frozen=True)
class TwoPointEstimate:
    """Ea and A from two temperatures alone (no uncertainty): Ea in J/mol, A in the rate-constant unit."""

    temperature_low: float
    temperature_high: float
    ea: float
    a: float


def two_point_estimate(temperature_K: np.ndarray, k: np.ndarray) -> TwoPointEstimate:
    """Ea = R ln(k2/k1) / (1/T1 - 1/T2) from the lowest and highest temperatures (replicates: geometric mean)."""
    temperature_K = np.asarray(temperature_K, dtype=float)
    ln_k = np.log(np.asarray(k, dtype=float))
    t1, t2 = float(temperature_K.min()), float(temperature_K.max())
    ln_k1 = float(ln_k[temperature_K == t1].mean())
    ln_k2 = float(ln_k[temperature_K == t2].mean())
    ea = R * (ln_k2 - ln_k1) / (1.0 / t1 - 1.0 / t2)
    a = float(np.exp(ln_k1 + ea / (R * t1)))
    return TwoPointEstimate(t1, t2, ea, a)
