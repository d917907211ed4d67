"""Property-based checks (hypothesis): valid studies round-trip through validation, and corrupted study files
never produce a traceback, only exit 0 or a one-line exit 2."""

from __future__ import annotations

import yaml
from conftest import BASE_STUDY, BASE_TABLE
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from inference import load_study
from inference.cli import main

names = st.from_regex(r"[A-Za-z][A-Za-z0-9_]{0,10}", fullmatch=True)
positive = st.floats(min_value=1e-8, max_value=1e8, allow_nan=False, allow_infinity=False)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    study_name=names,
    reaction_names=st.lists(names, min_size=1, max_size=3, unique=True),
    median=positive,
    factor=st.floats(min_value=1.01, max_value=1e6),
    ea_mean=st.floats(min_value=0.0, max_value=500.0),
    ea_sd=st.floats(min_value=0.01, max_value=200.0),
    draws=st.integers(min_value=10, max_value=5000),
)
def test_valid_studies_round_trip(tmp_path_factory, study_name, reaction_names, median, factor, ea_mean, ea_sd, draws):
    folder = tmp_path_factory.mktemp("roundtrip")
    (folder / "k.csv").write_text(BASE_TABLE)
    content = {
        "study": study_name,
        "units": {"temperature": "degC", "energy": "kJ/mol", "rate_constant": "1/s"},
        "data": {"rate_constants": "k.csv"},
        "reactions": [
            {"name": n, "k_ref": {"median": median, "factor": factor}, "Ea": {"mean": ea_mean, "sd": ea_sd}}
            for n in reaction_names
        ],
        "sampling": {"draws": draws},
    }
    path = folder / "study.yaml"
    path.write_text(yaml.safe_dump(content))
    first = load_study(path)
    path.write_text(yaml.safe_dump(first.canonical))  # the validated study, defaults filled in
    second = load_study(path)
    assert second.canonical == first.canonical
    assert second.reactions == first.reactions


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.data())
def test_corrupted_study_files_never_crash(tmp_path_factory, capsys, data):
    folder = tmp_path_factory.mktemp("corrupt")
    (folder / "k.csv").write_text(BASE_TABLE)
    text = BASE_STUDY
    for _ in range(data.draw(st.integers(min_value=1, max_value=4))):
        position = data.draw(st.integers(min_value=0, max_value=len(text)))
        action = data.draw(st.sampled_from(["delete", "insert", "duplicate"]))
        if action == "delete":
            length = data.draw(st.integers(min_value=1, max_value=12))
            text = text[:position] + text[position + length :]
        elif action == "insert":
            text = (
                text[:position]
                + data.draw(st.text(alphabet=":{}[]-,'\"\\t #&*!?0123456789aeEk.\\n", max_size=6))
                + text[position:]
            )
        else:
            text = text[:position] + text[max(0, position - 20) : position] + text[position:]
    path = folder / "study.yaml"
    path.write_text(text)
    code = main(["check", str(path)])
    captured = capsys.readouterr()
    assert code in (0, 2), captured.err
    assert "Traceback" not in captured.err
    if code == 2:
        assert len(captured.err.strip().splitlines()) == 1, captured.err
