"""The results folder: every file present, read back identical, and the same seed gives the same numbers."""

from __future__ import annotations

import json

import arviz as az
import numpy as np
import pandas as pd
import pytest
import yaml

from inference import fit_study, load_study
from inference.outputs.results import StagedFolder

EXPECTED_FILES = {
    "summary.csv",
    "classical.csv",
    "correlations.csv",
    "fit_checks.csv",
    "diagnostics.json",
    "posterior.nc",
    "study.yaml",
    "manifest.json",
    "figures/arrhenius.png",
    "figures/pair.png",
    "figures/prior_posterior.png",
    "report.html",
}


@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    folder = tmp_path_factory.mktemp("fit")
    (folder / "k.csv").write_text("temperature,k\n30,1.2e-4\n40,3.9e-4\n50,1.1e-3\n60,3.0e-3\n70,7.9e-3\n")
    (folder / "study.yaml").write_text(
        "study: roundtrip\nunits: {temperature: degC, energy: kJ/mol, rate_constant: 1/s}\n"
        "data: {rate_constants: k.csv}\nreactions:\n  - name: step\n    k_ref: {median: 0.001, factor: 100}\n"
        "    Ea: {mean: 80, sd: 30}\nreport: {k_at: [20, 50]}\nsampling: {draws: 300, tune: 300, chains: 2, seed: 7}\n"
    )
    first = fit_study(folder / "study.yaml", out=folder / "first", quiet=True)
    second = fit_study(folder / "study.yaml", out=folder / "second", quiet=True, cores=1)
    return folder, first, second


def test_every_file_is_written(fitted):
    folder, first, _ = fitted
    written = {str(p.relative_to(first.results_dir)) for p in first.results_dir.rglob("*") if p.is_file()}
    assert written == EXPECTED_FILES
    assert not [p for p in folder.iterdir() if p.name.startswith(".")]  # no staging folder left behind


def test_summary_columns_and_names(fitted):
    _, first, _ = fitted
    summary = pd.read_csv(first.results_dir / "summary.csv")
    assert list(summary.columns) == [
        "parameter",
        "unit",
        "mean",
        "sd",
        "median",
        "q05",
        "q95",
        "ess_bulk",
        "ess_tail",
        "r_hat",
        "T_ref_K",
        "extrapolated",
    ]
    assert list(summary["parameter"]) == [
        "k_ref[step]",
        "Ea[step]",
        "A[step]",
        "k[step, 20 degC]",
        "k[step, 50 degC]",
        "sigma",
    ]
    assert list(summary["unit"][:3]) == ["1/s", "kJ/mol", "1/s"]


def test_files_read_back_identical(fitted):
    _, first, _ = fitted
    summary = pd.read_csv(first.results_dir / "summary.csv")
    numeric = ["mean", "sd", "median", "q05", "q95", "ess_bulk", "ess_tail", "r_hat"]
    np.testing.assert_allclose(summary[numeric].to_numpy(), first.summary[numeric].to_numpy(), rtol=1e-7)
    saved = az.from_netcdf(first.results_dir / "posterior.nc")
    for group in ("posterior", "sample_stats", "log_likelihood", "posterior_predictive", "observed_data"):
        assert group in saved.groups()
    np.testing.assert_array_equal(saved.posterior["Ea"].values, first.idata.posterior["Ea"].values)
    assert json.loads(saved.posterior.attrs["arrhenia"])["reference_temperature_K"] == first.reference_temperature_K
    assert saved.log_likelihood["observation"].sizes["measurement"] == 5


def test_resolved_study_reloads_to_the_same_study(fitted):
    _, first, _ = fitted
    again = load_study(first.results_dir / "study.yaml")
    assert again.reactions == first.study.reactions
    assert again.reference_temperature_K == pytest.approx(first.reference_temperature_K, rel=1e-15)
    assert again.data_files == first.study.data_files
    header = yaml.safe_load((first.results_dir / "study.yaml").read_text())
    assert header["sampling"]["seed"] == 7


def test_manifest_records_provenance(fitted):
    _, first, _ = fitted
    manifest = json.loads((first.results_dir / "manifest.json").read_text())
    assert manifest["seed"] == 7
    assert len(manifest["data"]["rate_constants"]["sha256"]) == 64
    assert {"pymc", "arviz", "numpy", "python"} <= set(manifest["versions"])
    # 20 degC lies below the fitted range (30-70 degC) and must be flagged (project rule).
    assert any("20 degC" in note and "below" in note for note in manifest["extrapolations"])


def test_same_seed_gives_byte_identical_summary(fitted):
    # The second fit ran its chains in sequence, the first in parallel: the numbers must not depend on it.
    _, first, second = fitted
    assert (first.results_dir / "summary.csv").read_bytes() == (second.results_dir / "summary.csv").read_bytes()


def test_staged_folder_leaves_earlier_results_on_failure(tmp_path):
    target = tmp_path / "res"
    target.mkdir()
    (target / "summary.csv").write_text("old")
    # --overwrite replaces only folders Arrhenia wrote: the old folder carries an Arrhenia manifest.
    (target / "manifest.json").write_text('{"arrhenia_version": "0", "files": {"summary.csv": ""}}')
    with pytest.raises(RuntimeError), StagedFolder(target, overwrite=True) as folder:
        folder.write_text("summary.csv", "new, half written")
        raise RuntimeError("interrupted")
    assert (target / "summary.csv").read_text() == "old"
    assert [p.name for p in tmp_path.iterdir()] == ["res"]
    with StagedFolder(target, overwrite=True) as folder:
        folder.write_text("summary.csv", "new")
    assert (target / "summary.csv").read_text() == "new"
    assert [p.name for p in tmp_path.iterdir()] == ["res"]


def test_staged_folder_refuses_paths_outside_it(tmp_path):
    with pytest.raises(ValueError, match="outside"), StagedFolder(tmp_path / "res", overwrite=False) as folder:
        folder.path("../escape.txt")


def test_check_against_says_whether_results_still_match(fitted, run_cli):
    folder, first, _ = fitted
    code, out, _ = run_cli("check", folder / "study.yaml", "--against", first.results_dir)
    assert code == 0
    assert "matches this study and its data" in out
    table = folder / "k.csv"
    original = table.read_text()
    try:
        table.write_text(original.replace("7.9e-3", "8.0e-3"))
        code, out, _ = run_cli("check", folder / "study.yaml", "--against", first.results_dir)
        assert code == 3
        assert "does NOT match" in out and "rate_constants data file differs" in out
    finally:
        table.write_text(original)
