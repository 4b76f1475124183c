"""``run`` and ``compare`` take ``--subject`` and ``--duration`` as ``sweep`` does.

Known answers: the built-in subjects' stature and mass are those of ``models.human.SUBJECTS``
(their own sources are named there); the number of ticks is duration / control period (1 ms
default, ``sim/loop/scenario.py``).  The rest is bookkeeping (the options reach meta.json).
"""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import pytest
from _scenario_files import write_scenario

from models.human import SUBJECTS
from sim.cli import main

DURATION_S = 0.05
DT_S = 1e-3  # default control period (sim/loop/scenario.py)


@pytest.fixture()
def hooked(tmp_path):
    """A small scenario with a ``for_subject`` hook that leaves a trace in the description."""
    path = write_scenario(tmp_path / "hooked.py", name='"hooked"')
    path.write_text(path.read_text() + "\n\nimport dataclasses\n\n\ndef for_subject(subject):\n"
                    "    return dataclasses.replace(SCENARIO, subject=subject, description='fitted to ' + subject)\n",
                    encoding="utf-8")
    return path


def check_meta(folder: Path, subject: str, duration_s: float) -> dict:
    meta = json.loads((folder / "meta.json").read_text())
    params = meta["parameters"]
    assert params["duration_s"] == duration_s
    assert meta["n_ticks_planned"] == round(duration_s / DT_S)
    assert params["subject"]["subject"] == dataclasses.asdict(SUBJECTS[subject])
    assert params["description"] == f"fitted to {subject}"  # the file's for_subject was used, as sweep does
    return meta


def test_run_with_subject_and_duration(hooked, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    assert main(["run", str(hooked), "--subject", "f5", "--duration", str(DURATION_S)]) == 0
    folder = tmp_path / "runs" / "hooked-gravity-f5-seed0"  # the subject shows in the default folder name
    assert str(folder.relative_to(tmp_path)) in capsys.readouterr().out
    check_meta(folder, "f5", DURATION_S)
    check_meta(folder / "human_alone", "f5", DURATION_S)  # the baseline is the same wearer, same length


def test_run_without_the_options_keeps_the_scenarios_subject_duration_and_folder_name(tmp_path, monkeypatch):
    path = write_scenario(tmp_path / "plain.py", name='"plain"', duration_s="0.04", subject='"m95"')
    monkeypatch.chdir(tmp_path)
    assert main(["run", str(path)]) == 0
    meta = json.loads((tmp_path / "runs" / "plain-gravity-seed0" / "meta.json").read_text())
    assert meta["parameters"]["duration_s"] == 0.04
    assert meta["parameters"]["subject"]["subject"] == dataclasses.asdict(SUBJECTS["m95"])


def test_compare_a_scenario_with_subject_and_duration(hooked, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    assert main(["compare", str(hooked), "--controller", "gravity", "--controller", "zero",
                 "--subject", "m95", "--duration", str(DURATION_S)]) == 0
    out = tmp_path / "runs" / "compare-m95"
    assert (out / "compare.csv").is_file()
    for c in ("gravity", "zero"):
        assert check_meta(out / c, "m95", DURATION_S)["controller"] == c


def one_line(capsys) -> str:
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1, err
    return err[0]


@pytest.mark.parametrize("command", ["run", "compare"])
def test_an_unknown_subject_is_one_line_listing_the_built_in_ones(command, hooked, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    assert main([command, str(hooked), "--subject", "m51", "--duration", str(DURATION_S)]) == 1
    line = one_line(capsys)
    assert "unknown subject 'm51'" in line and ", ".join(SUBJECTS) in line
    assert not (tmp_path / "runs").exists()


@pytest.mark.parametrize("command", ["run", "compare", "sweep"])
@pytest.mark.parametrize("value, expected", [("0", "--duration must be > 0, got 0.0"),
                                             ("-1", "--duration must be > 0, got -1.0"),
                                             ("nan", "--duration must be > 0, got nan"),
                                             ("inf", "--duration must be a finite number of seconds, got inf")])
def test_a_bad_duration_is_a_usage_error_naming_it(command, value, expected, hooked, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    with pytest.raises(SystemExit) as e:
        main([command, str(hooked), "--duration", value])
    assert e.value.code == 2
    assert one_line(capsys).endswith(expected)
    assert not (tmp_path / "runs").exists()


def test_compare_of_run_folders_refuses_subject_and_duration(tmp_path, capsys):
    for option in (["--subject", "f5"], ["--duration", "1"]):
        with pytest.raises(SystemExit) as e:
            main(["compare", str(tmp_path / "a"), str(tmp_path / "b"), *option])
        assert e.value.code == 2
        assert "go with a scenario file" in one_line(capsys)
