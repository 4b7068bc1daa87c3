"""Unusable study files through the command line: one-line error, exit code 2, nothing written."""
from pathlib import Path

import pytest
import yaml

from bodysweep.workflow import cli

TINY = Path(__file__).parent / "data" / "tiny.yaml"


def _study(tmp_path, edit):
    d = yaml.safe_load(TINY.read_text())
    edit(d)
    p = tmp_path / "study.yaml"
    p.write_text(yaml.safe_dump(d))
    return p


def _unknown_key(d):
    d["scene"]["implant"]["depht_mm"] = 5  # misspelt key


def _bad_value(d):
    d["frequencies_MHz"] = [-5]  # schema: frequencies from 10 to 6000 MHz


def _bad_sweep_path(d):
    d["sweep"]["parameters"]["depth"] = "scene.implant.no_such_key_mm"


@pytest.mark.parametrize("command", ["check", "plan", "run"])
@pytest.mark.parametrize("edit", [_unknown_key, _bad_value, _bad_sweep_path])
def test_unusable_study_exits_2_and_writes_nothing(tmp_path, monkeypatch, capsys, command, edit):
    study = _study(tmp_path, edit)
    work = tmp_path / "work"
    work.mkdir()
    monkeypatch.chdir(work)
    rc = cli.main([command, str(study)])
    err = capsys.readouterr().err
    assert rc == 2
    lines = [ln for ln in err.splitlines() if ln.strip() and not ln.startswith("warning: ")]
    assert len(lines) == 1 and lines[0].startswith("bodysweep: error:")
    assert list(work.iterdir()) == []  # nothing written, not even results/


def test_missing_study_file(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    assert cli.main(["check", str(tmp_path / "nope.yaml")]) == 2
    assert "no such study file" in capsys.readouterr().err


def test_yaml_syntax_error(tmp_path, monkeypatch, capsys):
    p = tmp_path / "s.yaml"
    p.write_text("study: x\nfrequencies_MHz: [403\n")
    monkeypatch.chdir(tmp_path)
    assert cli.main(["check", str(p)]) == 2
    assert list(tmp_path.iterdir()) == [p]


def test_check_counts_cases(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    assert cli.main(["check", str(TINY)]) == 0
    assert "2 cases" in capsys.readouterr().out
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("command", ["check", "plan", "run", "collect", "preview", "report", "verify"])
def test_every_command_has_help(command, capsys):
    with pytest.raises(SystemExit) as e:
        cli.main([command, "--help"])
    assert e.value.code == 0
    assert "study" in capsys.readouterr().out


def _mirror(plane):
    def edit(d):
        d["solver"]["mirror_plane"] = plane
    return edit


@pytest.mark.parametrize("command", ["check", "run"])
def test_half_domain_on_an_asymmetric_plane_is_refused_before_any_job(tmp_path, monkeypatch, capsys, command):
    # the tiny scene's dipoles lie along x, centred on x = 0: it is its own mirror image in x = 0 only
    # (image theory, Balanis, Advanced Engineering Electromagnetics, 2nd ed., §7.4); y = 0 would need a
    # magnetic wall, which is not offered
    study = _study(tmp_path, _mirror("y"))
    work = tmp_path / "work"
    work.mkdir()
    monkeypatch.chdir(work)
    rc = cli.main([command, str(study)])
    lines = [ln for ln in capsys.readouterr().err.splitlines() if ln.strip() and not ln.startswith("warning: ")]
    assert rc == 2 and len(lines) == 1 and "solver.mirror_plane" in lines[0], lines
    assert list(work.iterdir()) == []
    ok = _study(tmp_path, _mirror("x"))
    assert cli.main(["check", str(ok)]) == 0


def _feed_gaps(gap_mm):
    def edit(d):  # a 2.5 mm skin, the external feed gap 2 mm and the implant's gap_mm, both centred at x = 0
        d["scene"]["phantom"]["layers"][0]["thickness_mm"] = 2.5
        d["scene"]["implant"]["feed_gap_mm"] = gap_mm
    return edit


def test_check_accepts_two_feed_gaps_at_nearby_positions(tmp_path, monkeypatch, capsys):
    """Gap ends 0.25 mm apart (under the 0.3125 mm merge threshold): both stay mesh lines, check passes."""
    study = _study(tmp_path, _feed_gaps(1.5))
    monkeypatch.chdir(tmp_path)
    assert cli.main(["check", str(study)]) == 0, capsys.readouterr().err
    assert "2 meshes the solver accepts" in capsys.readouterr().out


@pytest.mark.parametrize("command", ["check", "plan", "run"])
def test_a_mesh_the_solver_would_refuse_is_refused_before_any_job(tmp_path, monkeypatch, capsys, command):
    """Gap ends 0.01 mm apart: no usable mesh; one line naming the case and the reason in mm, exit 2, nothing
    written (plan lists it as without estimate instead, exit 0)."""
    study = _study(tmp_path, _feed_gaps(1.98))
    work = tmp_path / "work"
    work.mkdir()
    monkeypatch.chdir(work)
    rc = cli.main([command, str(study)])
    cap = capsys.readouterr()
    if command == "plan":
        assert rc == 0 and "no estimate: port lines at -1.0000 mm (port 1 gap end)" in cap.out
        return
    assert rc == 2, cap.out + cap.err
    (line,) = [ln for ln in cap.err.splitlines() if ln.strip() and not ln.startswith("warning: ")]
    assert line.startswith("bodysweep: error: case ") and "mesh: port lines at -1.0000 mm (port 1 gap end) and " \
        "-0.9900 mm (port 2 gap end) are only 0.0100 mm apart" in line, line
    assert list(work.iterdir()) == []
