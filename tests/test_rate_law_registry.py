"""The rate-law registry: one module per law, the schema's names from it, each law's check line and derived
quantities in the study file's terms, and the ``catalysed`` law against the closed form of its kinetics."""

from __future__ import annotations

import math
import re

import numpy as np
import pytest
import xarray as xr
from test_network_model import write_study
from test_rate_laws import solve

from inference.errors import StudyError
from inference.inputs import plausibility, schema
from inference.inputs.config import load_study
from inference.inputs.rate_laws import LAW_KEYS, REGISTRY
from inference.posterior.summaries import derived_quantities

RUNS = "run,temperature,A,Cat,P\nr1,40,1.0,0.05,0\n"
MEASUREMENTS = "run,time,A\nr1,5,0.8\nr1,20,0.4\n"

CATALYSED = """\
study: catalysed
units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}
data: {runs: runs.csv, measurements: measurements.csv}
species: [A, Cat, P]
reactions:
  - name: step
    equation: A + Cat -> P + Cat
    rate_law: catalysed
    k_ref: {median: 1.0, factor: 10}
    Ea: {mean: 60, sd: 20}
"""

ENZYME = """\
study: enzyme
units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}
data: {runs: runs.csv, measurements: measurements.csv}
species: [S, E, P]
reactions:
  - name: turnover
    equation: S + E -> P + E
    rate_law: michaelis_menten
    K_M: {median: 0.25, factor: 7}
    K_M_dH: {mean: -12, sd: 20}
    k_ref: {median: 40, factor: 10}
    Ea: {mean: 50, sd: 20}
"""
ENZYME_RUNS = "run,temperature,S,E,P\nr1,30,1.0,0.01,0\n"
ENZYME_MEASUREMENTS = "run,time,S\nr1,5,0.8\nr1,20,0.5\n"

SATURATING = """\
study: surface
units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}
data: {runs: runs.csv, measurements: measurements.csv}
species: [A, B]
reactions:
  - name: surface
    equation: A -> B
    rate_law: saturating
    adsorption:
      A: {K_ref: {median: 2.5, factor: 12}, dH: {mean: -30, sd: 15}}
    k_ref: {median: 0.1, factor: 10}
    Ea: {mean: 60, sd: 20}
"""
SATURATING_RUNS = "run,temperature,A,B\nr1,50,1.0,0\n"
SATURATING_MEASUREMENTS = "run,time,A\nr1,5,0.8\nr1,20,0.5\n"


def test_schema_names_are_the_registry_and_every_key_is_a_schema_key():
    assert tuple(REGISTRY) == schema.RATE_LAWS
    assert all(name == law.name and law.description for name, law in REGISTRY.items())
    assert set(schema.Reaction.model_fields) >= LAW_KEYS
    assert all(law.requires <= law.takes for law in REGISTRY.values())


def test_catalysed_step_decays_first_order_with_k_times_the_catalyst(tmp_path):
    # A + Cat -> P + Cat with r = k c_Cat c_A and c_Cat constant: first-order decay c_A = c_A0 exp(-k c_Cat t)
    # (the integrated first-order rate law, Levenspiel, Chemical Reaction Engineering, 3rd ed., 1999, ch. 3; from
    # memory), here through the study file and the project's solver.
    study = load_study(write_study(tmp_path, CATALYSED, RUNS, MEASUREMENTS))
    network = study.network
    np.testing.assert_array_equal(network.forward_orders, [[1.0, 1.0, 0.0]])
    np.testing.assert_array_equal(network.stoichiometry, [[-1.0, 0.0, 1.0]])
    assert study.reactions[0].molecularity == 2.0 and study.reactions[0].k_unit == "(mol/L)^-1/min"
    k, c_cat, c_a0 = 3.0, 0.05, 1.0
    times = np.array([0.5, 2.0, 7.0, 20.0, 60.0])
    result = solve(network, times, np.log(k), np.zeros(0), np.array([c_a0, c_cat, 0.0]))
    exact = c_a0 * np.exp(-k * c_cat * times)
    # Tolerances as for the project's other closed-form checks of the solver (test_rate_laws).
    np.testing.assert_allclose(result.concentrations[0][:, 0], exact, rtol=1e-5, atol=1e-9)
    np.testing.assert_allclose(result.concentrations[0][:, 1], c_cat, rtol=1e-12)
    np.testing.assert_allclose(result.concentrations[0][:, 2], c_a0 - exact, rtol=1e-5, atol=1e-9)


@pytest.mark.parametrize(
    ("change", "key", "fragment"),
    [
        (("A + Cat -> P + Cat", "A -> P"), "reactions[0].equation", "0 species on both sides"),
        (("A + Cat -> P + Cat", "A + Cat + P -> 2 P + Cat"), "reactions[0].equation", "2 species on both sides"),
        (("A + Cat -> P + Cat", "A + 2 Cat -> P + 2 Cat"), "reactions[0].equation", "'Cat' with a coefficient"),
        (("rate_law: catalysed", "rate_law: catalysed\n    orders: {A: 1}"), "reactions[0].orders", "not a parameter"),
    ],
)
def test_catalysed_refuses_what_does_not_fit_it(tmp_path, change, key, fragment):
    path = write_study(tmp_path, CATALYSED.replace(*change), RUNS, MEASUREMENTS)
    with pytest.raises(StudyError) as error:
        load_study(path)
    assert key in str(error.value) and fragment in str(error.value), str(error.value)


def test_network_only_laws_are_refused_for_rate_constants(make_study, run_cli):
    study = """\
    study: k-only
    units: {temperature: degC, energy: kJ/mol, rate_constant: 1/s}
    data: {rate_constants: k.csv}
    reactions:
      - name: step
        rate_law: catalysed
        k_ref: {median: 0.001, factor: 100}
        Ea: {mean: 80, sd: 30}
    """
    code, _, err = run_cli("check", make_study(study))
    assert code == 2 and "reactions[0].rate_law" in err and "reaction networks" in err, err
    assert len(err.strip().splitlines()) == 1


def _reaction_line(out: str, name: str) -> str:
    (line,) = [line for line in out.splitlines() if line.strip().startswith(f"{name}:")]
    return line


def test_check_accepts_catalysed_and_names_the_catalyst(tmp_path, run_cli):
    code, out, err = run_cli("check", write_study(tmp_path, CATALYSED, RUNS, MEASUREMENTS))
    assert code == 0, err
    assert "catalysed" in _reaction_line(out, "step") and "catalyst Cat at order 1" in _reaction_line(out, "step")


def test_check_prints_k_m_as_the_study_file_gives_it(tmp_path, run_cli):
    code, out, err = run_cli("check", write_study(tmp_path, ENZYME, ENZYME_RUNS, ENZYME_MEASUREMENTS))
    assert code == 0, err
    line = _reaction_line(out, "turnover")
    # The values written in ENZYME above: K_M median 0.25 mol/L, factor 7; K_M_dH mean -12, sd 20 kJ/mol.
    found = re.search(
        r"K_M ~ lognormal\(median (\S+) mol/L, x/÷ (\S+) at 95 %\), K_M_dH ~ normal\((\S+), sd (\S+) kJ/mol\)", line
    )
    assert found, line
    assert [float(value) for value in found.groups()] == pytest.approx([0.25, 7.0, -12.0, 20.0], rel=1e-12)


def test_check_prints_the_factor_of_each_adsorption_constant(tmp_path, run_cli):
    code, out, err = run_cli("check", write_study(tmp_path, SATURATING, SATURATING_RUNS, SATURATING_MEASUREMENTS))
    assert code == 0, err
    line = _reaction_line(out, "surface")
    # The values written in SATURATING above: K_A median 2.5 per mol/L, factor 12; dH mean -30, sd 15 kJ/mol.
    assert "K_A ~ lognormal(median 2.5 per mol/L, x/÷ 12 at 95 %), dH_ads ~ normal(-30, sd 15 kJ/mol)" in line, line
    assert "denominator power 1" in line


def test_energy_warning_shows_k_m_dh_with_the_sign_written(tmp_path):
    body = ENZYME.replace("K_M_dH: {mean: -12, sd: 20}", "K_M_dH: {mean: -12000, sd: 20}")
    study = load_study(write_study(tmp_path, body, ENZYME_RUNS, ENZYME_MEASUREMENTS))
    (note,) = [note for note in plausibility.energy_warnings(study) if "K_M_dH" in note]
    assert "prior mean -12000, sd 20 kJ/mol" in note, note


def test_michaelis_menten_reports_k_m_and_k_cat_from_the_kernel_constant(tmp_path):
    # The kernel holds K = 1/K_M; r = k c_E c_S / (1 + c_S/K_M) = (k K_M) c_E c_S / (K_M + c_S), so k_cat = k K_M
    # (the Michaelis-Menten form, Cornish-Bowden, Fundamentals of Enzyme Kinetics; from memory).
    study = load_study(write_study(tmp_path, ENZYME, ENZYME_RUNS, ENZYME_MEASUREMENTS))
    (site,) = study.reactions[0].adsorption
    assert math.exp(-site.ln_ref_mean) == pytest.approx(0.25) and site.dh_mean == pytest.approx(12e3)
    ln_k, ln_ads, dh_ads = np.log([[40.0, 50.0]]), np.log([[4.0, 2.0]]), np.array([[15e3, -5e3]])
    posterior = xr.Dataset(
        {
            "ln_k_ref": (("chain", "draw", "reaction"), ln_k[..., None]),
            "Ea": (("chain", "draw", "reaction"), np.full((1, 2, 1), 5e4)),
            "ln_K_ads_ref": (("chain", "draw", "adsorption_site"), ln_ads[..., None]),
            "dH_ads": (("chain", "draw", "adsorption_site"), dh_ads[..., None]),
        },
        coords={"reaction": ["turnover"], "adsorption_site": ["turnover:S"]},
    )
    quantities = derived_quantities(study, posterior, 303.15)
    assert quantities["K_M[turnover]"][0] == "mol/L"
    np.testing.assert_allclose(quantities["K_M[turnover]"][1].values, [[0.25, 0.5]], rtol=1e-12)
    np.testing.assert_allclose(quantities["K_M_dH[turnover]"][1].values, [[-15.0, 5.0]], rtol=1e-12)
    assert quantities["k_cat[turnover]"][0] == "1/min"
    np.testing.assert_allclose(quantities["k_cat[turnover]"][1].values, [[10.0, 25.0]], rtol=1e-12)
    assert not any(name.startswith("K_ads_ref") for name in quantities)
