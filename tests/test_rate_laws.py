"""Saturating laws, the extended Arrhenius form, run-to-run variability, temperature errors and Eyring's
activation parameters, each against an outside reference named beside the check."""

from __future__ import annotations

import math
import textwrap

import numpy as np
import pytest
from scipy import constants
from scipy.integrate import solve_ivp
from test_network_model import _gradient_check, arrhenius_k, assert_recovered, write_study

from inference import fit_study
from inference.errors import StudyError
from inference.inputs.config import load_study
from inference.physics import closed_form
from inference.physics.arrhenius import R, eyring_activation, ln_pre_exponential, ln_rate_constant
from inference.physics.network import build_network, parse_equation
from inference.physics.parameters import KineticInputs
from inference.physics.solution import NetworkSolver
from inference.posterior.draws import parameter_draws, pick_draws
from inference.workflows.kinds import open_problem

T_REF = 330.0


def saturating_network(species, equation, exponent, adsorbed):
    parsed = (parse_equation(equation),)
    return build_network(tuple(species), ("r0",), parsed, None, ((exponent, tuple(adsorbed)),))


def solve(net, times, ln_k, ln_ads, initial, sensitivities=False):
    solver = NetworkSolver(net, [np.asarray(times, dtype=float)])
    inputs = KineticInputs(
        np.atleast_2d(ln_k), np.zeros((1, 0)), np.atleast_2d(ln_ads), net.forward_orders, np.atleast_2d(initial)
    )
    return solver.solve(inputs, sensitivities=sensitivities)


def test_saturating_law_with_vanishing_adsorption_is_mass_action():
    # K -> 0 leaves r = k c_A c_B; exact second-order profile (Levenspiel, Chemical Reaction Engineering, 3rd
    # ed., 1999, ch. 3; from memory) via the project's closed form, itself checked against it in test_solution.
    net = saturating_network("ABC", "A + B -> C", 2.0, "AB")
    times = np.array([0.5, 2.0, 6.0, 20.0])
    initial = np.array([1.0, 1.5, 0.0])
    result = solve(net, times, np.log(0.4), np.log([1e-12, 1e-12]), initial)
    mass_action = build_network(tuple("ABC"), ("r0",), (parse_equation("A + B -> C"),))
    exact = closed_form.concentrations("second_pair", mass_action, initial, 0.4, times)
    np.testing.assert_allclose(result.concentrations[0], exact, rtol=1e-5, atol=1e-9)


def test_michaelis_menten_matches_the_integrated_rate_law():
    # Integrated Michaelis-Menten equation, exact for constant enzyme: K_M ln(S0/S) + (S0 - S) = V_max t
    # (Cornish-Bowden, Fundamentals of Enzyme Kinetics, ch. "integrated rate equations"; from memory).
    # Here r = k c_E c_S / (1 + c_S/K_M), so V_max = k c_E K_M.
    study_like = saturating_network(("S", "E", "P"), "S + E -> P + E", 1.0, "S")
    k, k_m, enzyme, s0 = 3.0, 0.2, 0.05, 1.0
    times = np.array([0.5, 2.0, 5.0, 10.0, 15.0])
    result = solve(study_like, times, np.log(k), np.log(1.0 / k_m), [s0, enzyme, 0.0])
    s = result.concentrations[0][:, 0]
    v_max = k * enzyme * k_m
    # rtol 1e-5: ten times the solver's local relative tolerance, room for the global error.
    np.testing.assert_allclose(k_m * np.log(s0 / s) + (s0 - s), v_max * times, rtol=1e-5)
    np.testing.assert_allclose(result.concentrations[0][:, 1], enzyme)  # the enzyme is not consumed


def test_saturation_at_high_concentration_is_zero_order():
    # With K c >> 1 the rate tends to k/K whatever c is (zero order; common practice): S0 - S = (k/K) t.
    # The integrated law above bounds the departure: (S0 - S) - V_max t = -K_M ln(S0/S), here below 1e-4 of it.
    net = saturating_network(("S", "P"), "S -> P", 1.0, "S")
    k, big_k, s0 = 2.0, 1e4, 1.0
    times = np.array([0.5e3, 1.5e3, 3.0e3, 4.0e3])
    s = solve(net, times, np.log(k), np.log(big_k), [s0, 0.0]).concentrations[0][:, 0]
    np.testing.assert_allclose(s0 - s, (k / big_k) * times, rtol=1e-3)


def lh_rates(t, c, k, ads, n):
    # Hougen-Watson form written out independently: r = k c_A c_B / (1 + K_A c_A + K_B c_B + K_C c_C)^n.
    a, b, product = c
    r = k * a * b / (1.0 + ads[0] * a + ads[1] * b + ads[2] * product) ** n
    return [-r, -r, r]


def test_saturating_profiles_match_scipy_and_sensitivities_match_finite_differences():
    # Profiles against scipy's Radau on the rate law written out by hand; sensitivities to ln k and every ln K
    # against central differences of the profiles.
    net = saturating_network("ABC", "A + B -> C", 2.0, "ABC")
    times = np.array([0.3, 1.0, 3.0, 8.0])
    initial = np.array([1.0, 0.7, 0.0])
    base = np.log([1.5, 0.8, 2.5, 4.0])  # ln k, ln K_A, ln K_B, ln K_C

    def run(x, sensitivities=False):
        return solve(net, times, x[:1], x[1:], initial, sensitivities)

    reference = solve_ivp(
        lh_rates, (0, times[-1]), initial, t_eval=times, method="Radau", rtol=1e-11, atol=1e-13,
        args=(1.5, [0.8, 2.5, 4.0], 2.0),
    )  # fmt: skip
    np.testing.assert_allclose(run(base).concentrations[0], reference.y.T, rtol=2e-5, atol=1e-8)
    exact = run(base, sensitivities=True).sensitivities[0]
    step = 1e-6
    numeric = np.stack(
        [
            (run(base + step * e).concentrations[0] - run(base - step * e).concentrations[0]) / (2 * step)
            for e in np.eye(base.size)
        ],
        axis=-1,
    )
    np.testing.assert_allclose(exact, numeric, rtol=2e-4, atol=2e-7)


EVERYTHING = """\
study: everything
units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}
data: {runs: runs.csv, measurements: measurements.csv}
species: [A, B, C]
reactions:
  - name: surface
    equation: A + B -> C
    rate_law: saturating
    adsorption:
      A: {K_ref: {median: 1.0, factor: 10}, dH: {mean: -30, sd: 20}}
      C: {K_ref: {median: 0.5, factor: 10}, dH: {mean: -20, sd: 20}}
    inhibition_exponent: 2
    k_ref: {median: 0.5, factor: 10}
    Ea: {mean: 60, sd: 20}
    temperature_exponent: {mean: 0.5, sd: 1.0}
run_variability: {sd: {scale: 0.3}, by: lot}
temperature_uncertainty: 1.0
reference_temperature: 330 K
"""


@pytest.mark.parametrize("parameterisation", ["non_centred", "centred"])
def test_model_with_every_new_term_has_an_exact_gradient(tmp_path, parameterisation):
    # The log density's gradient (PyTensor graph + the compiled sensitivities) against central differences.
    runs = "run,temperature,A,B,C,lot\nr1,50,1.0,1.2,0,L1\nr2,70,0.8,1.0,0,L2\nr3,60,1.0,1.0,0,L1\n"
    meas = "run,time,A,C\nr1,2,0.85,0.14\nr1,6,0.6,0.38\nr2,1,0.6,0.2\nr2,4,0.3,0.5\nr3,3,0.6,0.4\n"
    body = EVERYTHING.replace("by: lot}", f"by: lot, parameterisation: {parameterisation}}}")
    problem = open_problem(load_study(write_study(tmp_path, body, runs, meas)))
    model = problem.build_model(T_REF)
    assert {"ln_K_ads_ref", "temperature_exponent", "ln_k_spread", "run_effect", "temperature"} <= set(model.named_vars)
    _gradient_check(model)
    # The start check compiles the likelihood alone, which need not depend on every variable (centred effects).
    from inference.model.sampling import non_finite_start

    terms, measurements = non_finite_start(model)
    assert terms == [] and measurements.size == 0


@pytest.mark.parametrize(
    ("change", "key", "fragment"),
    [
        (("rate_law: saturating", "rate_law: mass_action"), "reactions[0].adsorption", "not a parameter of"),
        (("    adsorption:\n      A: {K_ref: {median: 1.0, factor: 10}, dH: {mean: -30, sd: 20}}\n"
          "      C: {K_ref: {median: 0.5, factor: 10}, dH: {mean: -20, sd: 20}}\n", ""),
         "reactions[0].adsorption", "required key is missing"),
        (("      C: {K_ref", "      D: {K_ref"), "reactions[0].adsorption.D", "not in species"),
        (("by: lot", "by: day"), "runs.csv", "unknown column 'lot'"),
    ],
)  # fmt: skip
def test_rate_law_keys_are_checked_against_the_registry(tmp_path, change, key, fragment):
    runs = "run,temperature,A,B,C,lot\nr1,50,1.0,1.2,0,L1\n"
    meas = "run,time,A\nr1,2,0.85\n"
    path = write_study(tmp_path, EVERYTHING.replace(*change), runs, meas)
    with pytest.raises(StudyError) as error:
        open_problem(load_study(path))
    assert key in str(error.value) and fragment in str(error.value), str(error.value)


def test_michaelis_menten_needs_one_substrate(tmp_path):
    body = """\
    study: mm
    units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}
    data: {runs: runs.csv, measurements: measurements.csv}
    species: [S, T, P]
    reactions:
      - name: enzyme
        equation: S + T -> P
        rate_law: michaelis_menten
        K_M: {median: 0.1, factor: 10}
        K_M_dH: {mean: 0, sd: 20}
        k_ref: {median: 0.5, factor: 10}
        Ea: {mean: 60, sd: 20}
    """
    path = write_study(tmp_path, body, "run,temperature,S,T,P\nr1,30,1,1,0\n", "run,time,S\nr1,1,0.5\n")
    with pytest.raises(StudyError, match=r"reactions\[0\]\.equation.*exactly one substrate"):
        load_study(path)


# GRI-Mech 3.0: G. P. Smith, D. M. Golden, M. Frenklach, N. W. Moriarty, B. Eiteneer, M. Goldenberg, C. T. Bowman,
# R. K. Hanson, S. Song, W. C. Gardiner Jr., V. V. Lissianski, Z. Qin, "GRI-Mech 3.0",
# http://combustion.berkeley.edu/gri-mech/ (1999). Rows (equation, A in cm3/(mol s), n, Ea in cal/mol)
# transcribed from that publication's rate table, from memory (no value was written out here before):
# bimolecular steps with temperature exponents of both signs and a wide spread of A.
GRI_MECH_30_RATES = (
    ("O + H2 <=> H + OH", 3.87e4, 2.7, 6260.0),
    ("O + CH4 <=> OH + CH3", 1.02e9, 1.5, 8600.0),
    ("O + C2H2 <=> OH + C2H", 4.6e19, -1.41, 28950.0),
    ("H + O2 <=> O + OH", 2.65e16, -0.6707, 17041.0),
)


@pytest.mark.parametrize(("equation", "a", "n", "ea_cal"), GRI_MECH_30_RATES)
def test_extended_arrhenius_matches_gri_mech_30_rates(equation, a, n, ea_cal):
    # Reference: the closed form k = A T^n exp(-Ea/(R T)) with the table's values, computed here with
    # scipy.constants alone; GRI-Mech's cal is the thermochemical calorie, 4.184 J (scipy.constants.calorie).
    r_cal = constants.R / constants.calorie  # cal/(mol K)

    def reference(kelvin: float) -> float:
        return a * kelvin**n * math.exp(-ea_cal / (r_cal * kelvin))

    ea = ea_cal * constants.calorie  # J/mol, Arrhenia's unit
    t_ref = 1000.0
    ln_k_ref = math.log(reference(t_ref))
    assert ln_pre_exponential(ln_k_ref, ea, t_ref, n) == pytest.approx(math.log(a), rel=1e-10), equation
    for kelvin in (300.0, 800.0, 1500.0, 2500.0):
        ours = math.exp(ln_rate_constant(kelvin, ln_k_ref, ea, t_ref, n))
        assert ours == pytest.approx(reference(kelvin), rel=1e-10), (equation, kelvin)


def test_eyring_activation_parameters_by_hand_and_round_trip():
    # Eyring (J. Chem. Phys. 3, 107, 1935); forms as in the IUPAC Gold Book entries "Eyring equation" and
    # "enthalpy of activation" (from memory). No textbook example was at hand to copy, so this one is worked
    # by hand with CODATA constants: a first-order reaction in solution, k = 1.0e-4 1/s at 298.15 K,
    # Ea = 80.0 kJ/mol.
    #   dH = Ea - R T = 80000 - 8.314463 * 298.15 = 77521.0 J/mol
    #   k_B T / h = 2.083662e10 * 298.15 = 6.21244e12 1/s
    #   dS = R ln(k h / (k_B T)) + dH / T = 8.314463 * (-38.66800) + 260.007 = -61.50 J/(mol K)
    values = eyring_activation(math.log(1.0e-4), 80_000.0, 298.15, 1.0, "solution", 1000.0)
    assert values.enthalpy == pytest.approx(77_521.0, abs=0.1)
    assert values.entropy == pytest.approx(-61.50, abs=0.01)
    # ln(k_B/h) = 23.760, the intercept constant of the linear Eyring plot (physical-organic texts; from memory).
    assert math.log(constants.k / constants.h) == pytest.approx(23.760, abs=5e-4)
    # Round trip: the parameters put back into Eyring's equation give k again.
    kelvin = 298.15
    back = constants.k * kelvin / constants.h * math.exp(values.entropy / R - values.enthalpy / (R * kelvin))
    assert back == pytest.approx(1.0e-4, rel=1e-12)
    # Second order in solution with c° = 1 mol/L: k = 1.0e-4 L/(mol s) = 1.0e-7 m^3/(mol s) gives the same dS,
    # the usual observation that k in L mol^-1 s^-1 enters numerically (common practice).
    pair = eyring_activation(math.log(1.0e-7), 80_000.0, 298.15, 2.0, "solution", 1000.0)
    assert pair.entropy == pytest.approx(values.entropy, abs=1e-9)
    # Gas phase, bimolecular: dH = Ea - 2 R T (IUPAC Gold Book, as above).
    gas = eyring_activation(math.log(1.0e-7), 80_000.0, 298.15, 2.0, "gas", 1000.0)
    assert gas.enthalpy == pytest.approx(80_000.0 - 2 * R * 298.15)


def _write_rate_study(folder, body, rows):
    (folder / "k.csv").write_text("temperature,k\n" + "".join(f"{t:.6g},{k:.6g}\n" for t, k in rows))
    path = folder / "study.yaml"
    path.write_text(textwrap.dedent(body))
    return path


def test_fitted_temperature_exponent_is_recovered(tmp_path):
    # Data made with k = A T^n exp(-Ea/RT), n = 1.5 (a common combustion form, cf. GRI-Mech above), over a wide
    # range so n and Ea are told apart; 4 % lognormal scatter, seed 11.
    rng = np.random.default_rng(11)
    true_n, true_ea, t_ref = 1.5, 40_000.0, 700.0
    kelvin = np.repeat(np.linspace(400.0, 1400.0, 11), 2)
    k = np.exp(ln_rate_constant(kelvin, math.log(2.0), true_ea, t_ref, true_n) + 0.04 * rng.standard_normal(22))
    body = """\
    study: exponent
    units: {temperature: K, energy: kJ/mol, rate_constant: 1/s}
    data: {rate_constants: k.csv}
    reactions:
      - name: step
        k_ref: {median: 1.0, factor: 20}
        Ea: {mean: 50, sd: 30}
        temperature_exponent: {mean: 0, sd: 2}
    reference_temperature: 700 K
    sampling: {draws: 500, tune: 500, chains: 2, seed: 3}
    """
    result = fit_study(_write_rate_study(tmp_path, body, zip(kelvin, k, strict=True)), out=tmp_path / "r", quiet=True)
    summary = result.summary.set_index("parameter")
    assert_recovered(summary, "n[step]", true_n)
    assert_recovered(summary, "Ea[step]", true_ea / 1000)
    assert_recovered(summary, "k_ref[step]", 2.0)


def test_temperature_errors_widen_ea_and_keep_the_truth(tmp_path):
    # Each of six set points over a narrow 20 K range is off by N(0, 1.5 K), shared by its three replicates: a
    # fit that knows it reports a wider Ea interval that still holds the truth (errors-in-variables; common
    # practice). 2 % scatter, seed 5.
    rng = np.random.default_rng(5)
    nominal = np.repeat(np.linspace(330.0, 350.0, 6), 3)
    actual = nominal + np.repeat(1.5 * rng.standard_normal(6), 3)
    k = np.exp(ln_rate_constant(actual, math.log(0.01), 90_000.0, 340.0) + 0.02 * rng.standard_normal(nominal.size))
    body = """\
    study: thermocouple
    units: {temperature: K, energy: kJ/mol, rate_constant: 1/s}
    data: {rate_constants: k.csv}
    reactions:
      - name: step
        k_ref: {median: 0.01, factor: 10}
        Ea: {mean: 80, sd: 40}
    reference_temperature: 340 K
    sampling: {draws: 500, tune: 500, chains: 2, seed: 8}
    """
    rows = list(zip(nominal, k, strict=True))
    plain = fit_study(_write_rate_study(tmp_path, body, rows), out=tmp_path / "plain", quiet=True)
    aware_body = body + "temperature_uncertainty: 1.5\n"
    aware = fit_study(_write_rate_study(tmp_path, aware_body, rows), out=tmp_path / "aware", quiet=True)
    sd_plain = plain.summary.set_index("parameter").loc["Ea[step]", "sd"]
    summary = aware.summary.set_index("parameter")
    assert summary.loc["Ea[step]", "sd"] > 1.2 * sd_plain
    assert_recovered(summary, "Ea[step]", 90.0)


def test_hierarchical_model_recovers_a_known_between_run_spread(tmp_path):
    # Eight catalyst lots, two runs each (45 and 65 degC), A -> B first order; each lot shifts ln k by
    # tau z, z ~ N(0, 1), tau = 0.4; 3 % lognormal noise; seed 21. Profiles from the exact exponential.
    rng = np.random.default_rng(21)
    tau, k_ref, ea = 0.4, 0.1, 60_000.0
    shifts = tau * rng.standard_normal(8)
    runs, meas = ["run,temperature,A,B,lot"], ["run,time,A"]
    for lot in range(8):
        for celsius in (45, 65):
            ln_k = ln_rate_constant(celsius + 273.15, math.log(k_ref), ea, T_REF) + shifts[lot]
            times = np.geomspace(0.5, 3.0 / math.exp(ln_k), 8)
            a = np.exp(-math.exp(ln_k) * times) * np.exp(0.03 * rng.standard_normal(times.size))
            name = f"L{lot}_{celsius}"
            runs.append(f"{name},{celsius},1.0,0,lot{lot}")
            meas += [f"{name},{t:.6g},{v:.6g}" for t, v in zip(times, a, strict=True)]
    body = """\
    study: lots
    units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}
    data: {runs: runs.csv, measurements: measurements.csv}
    species: [A, B]
    reactions:
      - name: decay
        equation: A -> B
        k_ref: {median: 0.1, factor: 10}
        Ea: {mean: 60, sd: 20}
    run_variability: {sd: {scale: 0.5}, by: lot, parameterisation: centred}
    reference_temperature: 330 K
    sampling: {draws: 500, tune: 500, chains: 2, seed: 9, target_accept: 0.95}
    """
    path = write_study(tmp_path, body, "\n".join(runs) + "\n", "\n".join(meas) + "\n")
    result = fit_study(path, out=tmp_path / "res", quiet=True)
    summary = result.summary.set_index("parameter")
    assert_recovered(summary, "ln_k_spread[decay]", tau)
    assert_recovered(summary, "Ea[decay]", ea / 1000)
    # A prediction is for a new lot: its ln k scatters by the fitted spread on top of the parameter uncertainty.
    study = load_study(path)
    posterior = result.idata.posterior
    picks = pick_draws(posterior, 1000)
    draws = parameter_draws(study, posterior, T_REF, picks)
    shift = draws.ln_k(T_REF)[:, 0] - draws.ln_k_ref[:, 0]
    tau_draws = posterior["ln_k_spread"].stack(sample=("chain", "draw")).values[0, picks]
    # sd of tau z over draws is sqrt(E[tau^2]); the tolerance is ~5 Monte Carlo standard errors of an sd.
    assert np.std(shift) == pytest.approx(math.sqrt(np.mean(tau_draws**2)), rel=5 / math.sqrt(2 * picks.size))


def test_michaelis_menten_fit_recovers_k_m_and_k_cat(tmp_path):
    # S + E -> P + E with r = k c_E c_S / (1 + c_S/K_M); truths K_M = 0.3 mol/L, k_cat = k K_M = 2 /min at
    # T_ref, Ea = 50 kJ/mol, K_M independent of T; data from scipy's Radau (rtol 1e-10), 3 % noise, seeds 30+.
    k_m, k_cat, ea, enzyme = 0.3, 2.0, 50_000.0, 0.01
    runs, meas = ["run,temperature,S,E,P"], ["run,time,S,P"]
    for index, (celsius, s0) in enumerate([(40, 0.2), (40, 2.0), (60, 0.2), (60, 2.0)]):
        k = arrhenius_k(k_cat / k_m, ea, celsius, t_ref=323.15)
        rate = lambda t, c, k=k: [-k * c[1] * c[0] / (1 + c[0] / k_m), 0.0, k * c[1] * c[0] / (1 + c[0] / k_m)]  # noqa: E731
        horizon = 3.0 * (s0 + k_m) / (k * enzyme * k_m)
        times = np.linspace(horizon / 10, horizon, 10)
        rng = np.random.default_rng(30 + index)
        solution = solve_ivp(rate, (0, horizon), [s0, enzyme, 0.0], t_eval=times, method="Radau", rtol=1e-10)
        noisy = solution.y.T * np.exp(0.03 * rng.standard_normal((times.size, 3)))
        runs.append(f"r{index},{celsius},{s0},{enzyme},0")
        meas += [f"r{index},{t:.6g},{c[0]:.6g},{c[2]:.6g}" for t, c in zip(times, noisy, strict=True)]
    body = """\
    study: enzyme
    units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}
    data: {runs: runs.csv, measurements: measurements.csv}
    species: [S, E, P]
    reactions:
      - name: turnover
        equation: S + E -> P + E
        rate_law: michaelis_menten
        K_M: {median: 0.5, factor: 10}
        K_M_dH: {mean: 0, sd: 10}
        k_ref: {median: 5, factor: 20}
        Ea: {mean: 50, sd: 25}
    reference_temperature: 323.15 K
    sampling: {draws: 300, tune: 300, chains: 2, seed: 12}
    """
    path = write_study(tmp_path, body, "\n".join(runs) + "\n", "\n".join(meas) + "\n")
    summary = fit_study(path, out=tmp_path / "res", quiet=True).summary.set_index("parameter")
    assert_recovered(summary, "K_M[turnover]", k_m)
    assert_recovered(summary, "k_cat[turnover]", k_cat)
    assert_recovered(summary, "Ea[turnover]", ea / 1000)


def test_transition_state_table_follows_the_posterior(tmp_path):
    # Per draw, dH = Ea - R T_ref and dS from Eyring (checked by hand above), so their posterior means follow
    # from the means of Ea and ln k_ref exactly: both are linear in them.
    rows = [(t, math.exp(ln_rate_constant(t, math.log(2e-3), 75_000.0, 320.0))) for t in (300, 310, 320, 330, 340)]
    body = """\
    study: eyring
    units: {temperature: K, energy: kJ/mol, rate_constant: L/(mol*s), concentration: mol/L}
    data: {rate_constants: k.csv}
    reactions:
      - name: pair
        k_ref: {median: 0.002, factor: 10}
        Ea: {mean: 70, sd: 20}
    reference_temperature: 320 K
    transition_state: {phase: solution}
    sampling: {draws: 200, tune: 300, chains: 2, seed: 2}
    """
    result = fit_study(_write_rate_study(tmp_path, body, rows), out=tmp_path / "r", quiet=True)
    summary = result.summary.set_index("parameter")
    posterior = result.idata.posterior
    ea_mean = float(posterior["Ea"].mean())
    ln_k_mean = float(posterior["ln_k_ref"].mean())
    assert summary.loc["dH_activation[pair]", "mean"] == pytest.approx((ea_mean - R * 320.0) / 1000, rel=1e-9)
    # Second order, c° = 1 mol/L = 1000 mol/m^3, k in L/(mol s) = 1e-3 m^3/(mol s): the factors cancel.
    ln_frequency = math.log(constants.k * 320.0 / constants.h)
    ds = R * (ln_k_mean - ln_frequency) + (ea_mean - R * 320.0) / 320.0
    assert summary.loc["dS_activation[pair]", "mean"] == pytest.approx(ds, rel=1e-9)
    assert summary.loc["dS_activation[pair]", "unit"] == "J/(mol*K)"
