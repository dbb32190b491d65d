"""Project settings: ``.pitchguard.toml`` or ``[tool.pitchguard]`` of
pyproject.toml give the deck and option defaults; the command line wins.

Reference: the same scans with every option on the command line (the
README's contract for settings); TOML as the TOML 1.0 specification reads it.
"""

from __future__ import annotations

import json
import os
import shutil

import pytest

from decks import DEMO_DECK, SAMPLE_GDS

from .conftest import run_cli


@pytest.fixture
def design(tmp_path):
    """A design repository: .git at its root, a deck and a chip inside."""
    root = tmp_path / "design"
    (root / ".git").mkdir(parents=True)
    (root / "rules").mkdir()
    (root / "chips").mkdir()
    shutil.copy(DEMO_DECK, root / "rules" / "process.toml")
    shutil.copy(SAMPLE_GDS, root / "chips" / "top.gds")
    return root


def _summary(path) -> dict:
    return json.loads(path.read_text())["summary"]


def test_own_file_sets_the_deck_and_options(design, capsys, monkeypatch):
    (design / ".pitchguard.toml").write_text('rules = "rules/process.toml"\nfail_on = "never"\n')
    monkeypatch.chdir(design / "chips")  # found from a subfolder, up to the root
    code, _, err = run_cli(capsys, "scan", "top.gds", "--json", "out.json")
    assert code == 0, err  # fail_on "never" from the settings
    assert "settings from" in err and ".pitchguard.toml" in err
    s = _summary(design / "chips" / "out.json")
    assert s["fail_on"] == "never" and s["by_severity"]["fail"] > 0
    # The command line wins over the settings.
    code, _, _ = run_cli(capsys, "scan", "top.gds", "-q", "--fail-on", "fail")
    assert code == 1


def test_pyproject_table_and_paths_relative_to_it(design, capsys, monkeypatch):
    (design / "pyproject.toml").write_text(
        '[project]\nname = "chip"\n\n[tool.pitchguard]\nrules = "rules/process.toml"\n'
        'sarif_root = "chips"\ntop = 3\n'
    )
    monkeypatch.chdir(design)
    code, _, err = run_cli(capsys, "scan", "chips/top.gds", "-q", "--sarif", "pg.sarif")
    assert code == 1, err
    run = json.loads((design / "pg.sarif").read_text())["runs"][0]
    loc = run["results"][0]["locations"][0]["physicalLocation"]["artifactLocation"]
    assert loc == {"uri": "top.gds", "uriBaseId": "REPOROOT"}
    assert run["originalUriBaseIds"]["REPOROOT"]["uri"].endswith("/design/chips/")
    # probe takes the deck from the settings too.
    code, out, _ = run_cli(
        capsys, "probe", "--layer", "metal1", "--pitch", "140", "--cd", "70", "--json"
    )
    assert code == 0 and json.loads(out)["pitch_nm"] == 140


def test_no_config_ignores_the_file_and_no_deck_is_one_line(design, capsys, monkeypatch):
    (design / ".pitchguard.toml").write_text('rules = "rules/process.toml"\n')
    monkeypatch.chdir(design)
    code, _, err = run_cli(capsys, "scan", "chips/top.gds", "-q", "--no-config")
    assert code == 2
    assert err.strip().startswith("pitchguard: error: no rule deck") and err.count("\n") == 1


def test_settings_stop_at_the_repository_root(design, tmp_path, capsys, monkeypatch):
    (tmp_path / ".pitchguard.toml").write_text('rules = "nowhere.toml"\n')  # above the root
    monkeypatch.chdir(design)
    code, _, err = run_cli(capsys, "scan", "chips/top.gds", "-q")
    assert code == 2 and "no rule deck" in err


@pytest.mark.parametrize(
    ("text", "says"),
    [
        ('rules = "rules/process.toml"\ncolour = "red"\n', "colour: unknown key"),
        ('rules = "rules/process.toml"\njobs = "inf"\n', "jobs:"),
        ('rules = "rules/process.toml"\njobs = 0\n', "jobs:"),
        ('rules = "rules/process.toml"\nfail_on = "sometimes"\n', "fail_on: expected one of"),
        ('rules = "rules/process.toml"\nuntiled = "yes"\n', "untiled: expected true or false"),
        ('rules = ["a", "b"]\n', "rules: expected a string or a number"),
        ("rules = \n", "not valid TOML"),
        ("x = " + "[" * 100_000 + "]" * 100_000 + "\n", ".pitchguard.toml"),
    ],
)
def test_bad_settings_are_one_line_errors(design, capsys, monkeypatch, text, says):
    (design / ".pitchguard.toml").write_text(text)
    monkeypatch.chdir(design)
    code, out, err = run_cli(capsys, "scan", "chips/top.gds", "-q")
    assert code == 2 and out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("pitchguard: error: "), err
    assert says in lines[0], lines[0]


def test_other_commands_do_not_read_settings(design, capsys, monkeypatch):
    (design / ".pitchguard.toml").write_text("not toml at all = = =\n")
    monkeypatch.chdir(design)
    code, out, err = run_cli(capsys, "rules", "check", "rules/process.toml")
    assert code == 0, err


@pytest.mark.timeout(60)
def test_a_pipe_or_a_huge_file_is_not_read_as_settings(design, capsys, monkeypatch):
    """A FIFO with no writer would block a plain read forever."""
    monkeypatch.chdir(design)
    own = design / ".pitchguard.toml"
    os.mkfifo(own)
    code, _, err = run_cli(capsys, "scan", "chips/top.gds", "-q")
    assert code == 2 and "named pipe" in err and err.count("\n") == 1, err
    own.unlink()
    own.write_text("# " + "x" * (1 << 20) + "\n")  # over the 1 MiB a settings file may be
    code, _, err = run_cli(capsys, "scan", "chips/top.gds", "-q")
    assert code == 2 and "larger than 1 MiB" in err and err.count("\n") == 1, err
