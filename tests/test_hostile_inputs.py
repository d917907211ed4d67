"""Hostile and malformed input files: each is refused with exit 2 and one line naming the file and the line or
key, or read correctly; none hangs, exhausts memory, shifts columns silently or ends in a traceback.

Each case is the exact input that found the defect (issue 14). External references: RFC 4180 (CSV: every
record has as many fields as the header; quoted fields may hold commas and line breaks), YAML 1.2.2 sec. 3.2.1.1
(the keys of a mapping are unique), POSIX/Linux (mkfifo, ELOOP for link loops, NAME_MAX = 255 bytes per name,
no NUL byte in a path), RFC 1952 (gzip).
"""

from __future__ import annotations

import gzip
import json
import os
from pathlib import Path

import pytest
from conftest import BASE_STUDY, BASE_TABLE

from inference.errors import StudyError
from inference.inputs import config, data

EA = "Ea: {mean: 80, sd: 30}"


def _snapshot(folder: Path) -> set[str]:
    return {str(p.relative_to(folder)) for p in folder.rglob("*")}


def _refused(run_cli, tmp_path: Path, study: Path, fragments: list[str], *extra: str) -> str:
    """Run ``check``; assert exit 2, exactly one stderr line holding every fragment, nothing written."""
    before = _snapshot(tmp_path)
    code, _stdout, stderr = run_cli("check", study, *extra)
    assert code == 2, stderr
    lines = stderr.strip().splitlines()
    assert len(lines) == 1, stderr
    assert lines[0].startswith("arrhenia: error: ")
    for fragment in fragments:
        assert fragment in lines[0], lines[0]
    assert _snapshot(tmp_path) == before
    return lines[0]


def _study_with(table_name: str, text: str = BASE_STUDY) -> str:
    return text.replace("k.csv", table_name)


# (id, table text, fragments of the message) -- defects 1 to 3 and 5 of the issue, in data tables.
TABLE_CASES = [
    # One cell more on every row: pandas took the first column as the index and shifted the others.
    ("one-field-more", "temperature,k\n" + "".join(f"{t},1e-3,{t}\n" for t in (30, 40, 50)), ["line 2", "3 cells"]),
    ("one-field-fewer", BASE_TABLE.replace("40,3.9e-4", "40"), ["line 3", "1 cell but", "2 columns"]),
    (
        "duplicate-header",
        "temperature,k,k\n30,1e-4,1e-4\n40,2e-4,2e-4\n",
        ["column 'k' appears twice (columns 2 and 3)"],
    ),
    ("trailing-comma-header", "temperature,k,\n30,1e-4,\n40,2e-4,\n", ["line 1", "trailing comma"]),
    ("trailing-comma-row", BASE_TABLE.replace("40,3.9e-4", "40,3.9e-4,"), ["line 3", "trailing comma"]),
    ("empty-column-name", "temperature,,k\n30,1,1e-4\n", ["line 1", "column 2 has an empty name"]),
    ("megabyte-cell", "temperature,k\n30," + "9" * 1_000_000 + "\n", ["line 2", "longer than"]),
    ("long-cell", BASE_TABLE.replace("3.9e-4", "x" * 100_000), ["line 3, column 'k'", "xxx..."]),
    ("long-column-name", "temperature,k," + "y" * 100_000 + "\n30,1,1\n", ["unknown column 'yyy", "..."]),
    ("not-utf8", "temperature,k\n30,1e-4\n40,2e-4 \xb5\n", ["k.csv: line 3", "UTF-8"]),
]


@pytest.mark.parametrize(("table", "fragments"), [c[1:] for c in TABLE_CASES], ids=[c[0] for c in TABLE_CASES])
def test_malformed_tables(make_study, run_cli, tmp_path, table, fragments):
    study = make_study(BASE_STUDY, None)
    encoding = "latin-1" if "\xb5" in table else "utf-8"
    (tmp_path / "k.csv").write_bytes(table.encode(encoding))
    message = _refused(run_cli, tmp_path, study, ["k.csv", *fragments])
    assert len(message) < 400  # echoed cells, names and keys are excerpts, never the whole text


def test_quoted_commas_and_hashes_in_cells_are_text(make_study, run_cli):
    # RFC 4180 sec. 2.6: a quoted field may hold commas and line breaks; only a line that starts with '#' is a
    # comment here, so a '#' inside a note is text and the row is whole.
    table = (
        "# measured 2024\n"
        "temperature,k,note\n"
        "30,1.2e-4,run #1\n"
        '40,3.9e-4,"lot A, then lot B"\n'
        "\n"
        '50,1.1e-3,"two\nlines"\n'
        "  # an indented comment line\n"
        "60,3.0e-3,\n"
        "70,7.9e-3,# only a note\n"
    )
    study = make_study(BASE_STUDY, table)
    code, stdout, stderr = run_cli("check", study)
    assert code == 0, stderr
    assert "5 measured rate constants" in stdout
    assert "30 to 70 degC (5 distinct)" in stdout
    frame = data.read_table(study.parent / "k.csv", {"temperature", "k"})
    assert list(frame["note"]) == ["run #1", "lot A, then lot B", "two\nlines", "", "# only a note"]
    assert list(frame["line"]) == [3, 4, 6, 9, 10]  # the lines of the file, comments and blank lines counted
    # A wrong cell after a quoted line break is named by its own line.
    (study.parent / "k.csv").write_text(table.replace("70,7.9e-3", "70,fast"))
    code, _, stderr = run_cli("check", study)
    assert code == 2 and "k.csv: line 10, column 'k'" in stderr, stderr


def test_good_tables_read_as_before(run_cli):
    # The committed demo studies still pass check with their data.
    demo = Path(__file__).resolve().parents[1] / "data_demo"
    for name in ("study.yaml", "rate_constants.yaml"):
        code, stdout, stderr = run_cli("check", demo / name)
        assert code == 0, stderr
        assert "the study is valid" in stdout


# (id, replacement of the Ea line or text appended, fragments) -- defects 5 to 8 and 11, in study files.
YAML_CASES = [
    ("duplicate-key", EA.replace("sd: 30", "sd: 40, mean: 800"), ["study.yaml: line 7: key 'mean' appears twice"]),
    ("duplicate-top-key", EA + "\nstudy: again", ["study.yaml: line 8: key 'study' appears twice (first on line 1)"]),
    ("int-key", EA + "\n1: x", ["study.yaml: line 8", "key '1'"]),
    ("list-key", EA + "\n[a]: b", ["study.yaml: line 8", "a key is a list"]),
    ("null-key", EA + "\nnull: 3", ["study.yaml: line 8", "key 'null'"]),
    ("bool-key", EA + "\ntrue: 1", ["study.yaml: line 8", "key 'true'"]),
    ("nested-3000", EA + "\ntitle: " + "[" * 3000 + "]" * 3000, ["study.yaml: line 8", "nested more than"]),
    ("infinite-number", EA.replace("80", "1e999"), ["study.yaml: line 7", "'1e999' is not a finite number"]),
    ("yaml-inf", EA.replace("80", ".inf"), ["study.yaml: line 7", "not a finite number"]),
    ("yaml-nan", EA.replace("30", ".nan"), ["study.yaml: line 7", "not a finite number"]),
    ("huge-integer", EA.replace("80", "9" * 5000), ["study.yaml: line 7", "too large a number"]),
    ("long-unknown-key", EA + "\n" + "z" * 1_000 + ": 1", ["study.yaml: zzz", "...: unknown key"]),
]


@pytest.mark.parametrize(("replacement", "fragments"), [c[1:] for c in YAML_CASES], ids=[c[0] for c in YAML_CASES])
def test_malformed_study_yaml(make_study, run_cli, tmp_path, replacement, fragments):
    study = make_study(BASE_STUDY.replace(EA, replacement))
    message = _refused(run_cli, tmp_path, study, fragments)
    assert len(message) < 400


def test_duplicate_keys_in_a_scenarios_file(tmp_path):
    # Every YAML file goes through the same reader (the scenarios file of `predict` too).
    path = tmp_path / "scenarios.yaml"
    path.write_text("scenarios:\n  - name: a\n    reactor: batch\n    name: b\n")
    with pytest.raises(StudyError, match=r"scenarios.yaml: line 4: key 'name' appears twice"):
        config.read_yaml(path)


def _special(tmp_path: Path, kind: str) -> Path:
    """A path of the given kind inside tmp_path (or a system device)."""
    target = tmp_path / "special.csv"
    if kind == "fifo":
        os.mkfifo(target)
    elif kind == "dev-zero":
        return Path("/dev/zero")
    elif kind == "dev-urandom":
        return Path("/dev/urandom")
    elif kind == "folder":
        target.mkdir()
    elif kind == "link-to-zero":
        target.symlink_to("/dev/zero")
    elif kind == "link-to-fifo":
        os.mkfifo(tmp_path / "pipe")
        target.symlink_to(tmp_path / "pipe")
    elif kind == "link-to-folder":
        (tmp_path / "folder").mkdir()
        target.symlink_to(tmp_path / "folder")
    elif kind == "link-loop":
        (tmp_path / "other.csv").symlink_to(target)
        target.symlink_to(tmp_path / "other.csv")
    elif kind == "name-300":
        return tmp_path / ("n" * 296 + ".csv")
    return target


# (kind, what the message says); symbolic links to devices are named by what they point to
PATH_CASES = [
    ("fifo", "named pipe (FIFO), not a regular file"),
    ("dev-zero", "character device, not a regular file"),
    ("dev-urandom", "character device, not a regular file"),
    ("folder", "is a folder, not a file"),
    ("link-to-zero", "character device, not a regular file"),
    ("link-to-fifo", "named pipe (FIFO), not a regular file"),
    ("link-to-folder", "is a folder, not a file"),
    ("link-loop", "symbolic link that loops"),
    ("name-300", "too long"),
]


@pytest.mark.parametrize(("kind", "problem"), PATH_CASES, ids=[c[0] for c in PATH_CASES])
def test_data_path_that_is_not_a_regular_file(make_study, run_cli, tmp_path, kind, problem):
    path = _special(tmp_path, kind)
    study = make_study(_study_with(str(path)), None)
    named = "/dev/" if kind in ("dev-zero", "dev-urandom", "link-to-zero") else str(path.parent)
    _refused(run_cli, tmp_path, study, [named, problem])


@pytest.mark.parametrize(("kind", "problem"), PATH_CASES, ids=[c[0] for c in PATH_CASES])
def test_study_path_that_is_not_a_regular_file(run_cli, tmp_path, kind, problem):
    path = _special(tmp_path, kind)
    _refused(run_cli, tmp_path, path, [str(path)[-60:], problem])


def test_nul_character_in_a_data_path(make_study, run_cli, tmp_path):
    study = make_study(_study_with('"k\\0.csv"'))
    _refused(run_cli, tmp_path, study, ["k\\x00.csv", "NUL character"])


def test_limits_apply_to_decompressed_bytes_and_rows(make_study, run_cli, tmp_path, monkeypatch):
    # A gzip file (RFC 1952) is read by its suffix; the limits count what it holds, not its compressed size.
    monkeypatch.setattr(data, "MAX_DATA_BYTES", 200_000)
    monkeypatch.setattr(data, "MAX_DATA_ROWS", 1_000)
    study = make_study(_study_with("k.csv.gz"), None)
    good = tmp_path / "k.csv.gz"
    good.write_bytes(gzip.compress(BASE_TABLE.encode()))
    code, stdout, stderr = run_cli("check", study)
    assert code == 0 and "5 measured rate constants" in stdout, stderr
    bomb = "temperature,k\n30," + "1" * 10_000_000 + "\n"  # 10 MB of digits in about 10 kB of gzip
    good.write_bytes(gzip.compress(bomb.encode()))
    assert good.stat().st_size < 200_000
    _refused(run_cli, tmp_path, study, ["k.csv.gz", "more than 200000 bytes once decompressed"])
    rows = "temperature,k\n" + "50,1e-3\n" * 1_000_000
    good.write_bytes(gzip.compress(rows.encode()))
    _refused(run_cli, tmp_path, study, ["k.csv.gz", "more than the 1000 rows"])
    good.write_bytes(gzip.compress(BASE_TABLE.encode())[:30])
    _refused(run_cli, tmp_path, study, ["k.csv.gz", "not a readable gzip file"])


def test_study_file_larger_than_its_limit(make_study, run_cli, tmp_path, monkeypatch):
    monkeypatch.setattr(config, "MAX_STUDY_BYTES", 1_000)
    study = make_study(BASE_STUDY + "title: " + "x" * 2_000 + "\n")
    _refused(run_cli, tmp_path, study, ["study.yaml", "more than the 1000 bytes"])


def test_malformed_manifest_under_check_against(make_study, run_cli, tmp_path):
    study = make_study()
    results = tmp_path / "results"
    results.mkdir()
    (results / "manifest.json").write_text(json.dumps({"arrhenia_version": "0", "config_sha256": "a", "data": 5}))
    (results / "posterior.nc").write_bytes(b"")
    code, stdout, stderr = run_cli("check", study, "--against", results)
    assert "Traceback" not in stderr and code != 1, stderr
    assert "is not a fit manifest Arrhenia wrote" in stdout + stderr
