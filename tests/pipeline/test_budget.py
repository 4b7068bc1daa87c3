"""Limits before work: over the CPU, memory or disk budget a study stops at plan time (exit 4, one line with
the numbers, nothing written) unless confirmed with --accept-cost; the disk estimate against real files."""
import json

import h5py
import numpy as np
import pytest
import yaml

from bodysweep.workflow import cli
from bodysweep.workflow.budget import case_disk_bytes

from helpers_reliability import final_files, run, tiny_study

pytestmark = [pytest.mark.pipeline]


def _refusal(capsys, argv, tmp_path):
    rc = cli.main(argv)
    cap = capsys.readouterr()
    lines = [ln for ln in cap.err.splitlines() if ln.strip() and not ln.startswith("warning: ")]
    assert rc == 4, cap.out + cap.err
    assert len(lines) == 1 and lines[0].startswith("bodysweep: error: over budget: "), cap.err
    assert "--accept-cost" in lines[0]
    assert not (tmp_path / "results").exists()  # refused before anything is written
    return lines[0]


@pytest.mark.parametrize("command", ["plan", "run"])
def test_cpu_memory_disk_refusals(tmp_path, monkeypatch, capsys, command):
    study = tiny_study(tmp_path / "s.yaml", "tiny_budget")
    monkeypatch.chdir(tmp_path)
    msg = _refusal(capsys, [command, str(study), "--max-cpu-hours", "1e-6"], tmp_path)
    assert "estimated CPU time" in msg and "1e-06 h (--max-cpu-hours)" in msg and "for 2 cases" in msg
    msg = _refusal(capsys, [command, str(study), "--max-memory-GB", "0.01"], tmp_path)
    assert "2 cases need more memory than 0.01 GB (--max-memory-GB)" in msg and "MB" in msg and "cells)" in msg
    msg = _refusal(capsys, [command, str(study), "--max-disk-GB", "0.001"], tmp_path)
    assert "estimated disk use" in msg and "0.001 GB (--max-disk-GB)" in msg and "scratch" in msg
    # all three at once: still one line, naming each
    msg = _refusal(capsys, [command, str(study), "--max-cpu-hours", "1e-6", "--max-memory-GB", "0.01",
                            "--max-disk-GB", "0.001"], tmp_path)
    assert msg.count("--max-") == 3


def test_study_file_disk_budget(tmp_path, monkeypatch, capsys):
    """budget.max_disk_GB of the study file (workflow/schema/study.schema.json) is the default disk budget."""
    d = yaml.safe_load(tiny_study(tmp_path / "s.yaml", "tiny_budget").read_text())
    d["budget"] = {"max_disk_GB": 0.002}
    p = tmp_path / "s.yaml"
    p.write_text(yaml.safe_dump(d))
    monkeypatch.chdir(tmp_path)
    msg = _refusal(capsys, ["plan", str(p)], tmp_path)
    assert "budget.max_disk_GB" in msg
    assert cli.main(["plan", str(p), "--max-disk-GB", "1"]) == 0  # the command line overrides the study file
    assert cli.main(["plan", str(p), "--accept-cost"]) == 0
    assert "disk " in capsys.readouterr().out


def test_disk_estimate_hand_calculation():
    """Per cell: E as 3 complex128 (3 x 16 B) + sigma, density, volume float64 (3 x 8 B) in fields_raw.h5,
    density float64 (8 B) + local and 2 averaged SAR float32 (3 x 4 B) in result.h5 = 92 B; 0.25 MB fixed
    per excitation; scratch 40 B per cell. Itemsizes from numpy's dtypes (IEEE 754 binary64/binary32)."""
    per_cell = 3 * np.dtype(np.complex128).itemsize + 3 * np.dtype(np.float64).itemsize \
        + np.dtype(np.float64).itemsize + 3 * np.dtype(np.float32).itemsize
    assert per_cell == 92
    e = case_disk_bytes(1e6, n_masses=2, n_excitations=1)
    assert e["disk_B"] == pytest.approx(1e6 * per_cell + 0.25e6, rel=1e-12)
    assert e["scratch_B"] == pytest.approx(40e6, rel=1e-12)
    assert case_disk_bytes(1e6, 2, 2)["disk_B"] - e["disk_B"] == pytest.approx(0.25e6)
    assert np.isnan(case_disk_bytes(float("nan"))["disk_B"])


def test_half_domain_case_keeps_full_grid_fields():
    # mirror_plane solves half the cells but stores the fields unfolded onto the full grid (image theory:
    # the other half is the mirror image), so what the case keeps is the full grid's; the scratch is the half's
    from bodysweep.workflow.budget import case_disk_estimate

    case = {"sar": {"masses_kg": [1e-3, 1e-2]}, "excite_ports": [1], "solver": {}}
    half = {**case, "solver": {"mirror_plane": "x"}}
    full = case_disk_estimate(case, 2e5)
    mirrored = case_disk_estimate(half, 1e5)
    assert mirrored["disk_B"] == pytest.approx(full["disk_B"], rel=1e-12)
    assert mirrored["scratch_B"] == pytest.approx(full["scratch_B"] / 2, rel=1e-12)


@pytest.mark.solver
@pytest.mark.timeout(600)
def test_accept_cost_runs_and_the_disk_estimate_bounds_the_real_files(tmp_path):
    """--accept-cost runs a study that is over every budget; the case folder it leaves is smaller than the
    estimate (an upper bound: uncompressed arrays) but not by more than a factor 5."""
    study = tiny_study(tmp_path / "s.yaml", "tiny_accept", depths=(6,))
    r = run(["run", str(study), "--max-cpu-hours", "1e-6", "--max-memory-GB", "0.01", "--max-disk-GB", "0.0001",
             "--accept-cost", "--cores", "2"], tmp_path)
    assert r.returncode == 0, r.stdout + r.stderr
    root = tmp_path / "results" / "tiny_accept"
    (cid,) = [e["case_id"] for e in json.loads((root / "plan.json").read_text())["cases"]]
    case = root / "cases" / cid
    assert json.loads((case / "metrics.json").read_text())["status"] in ("ok", "warning")
    cells = json.loads((case / "solve" / "excite_1" / "status.json").read_text())["cells"]
    est = case_disk_bytes(cells, n_masses=2, n_excitations=1)
    # the file system's own sizes, of the case folder and of its solve in the shared store
    used = sum(p.stat().st_size for p in final_files(case) + final_files((case / "solve").resolve()))
    assert used < est["disk_B"] < 5 * used, (used, est)
    # the arrays' uncompressed size as h5py reports it stays below the per-cell figures
    with h5py.File(case / "solve" / "excite_1" / "fields_raw.h5", "r") as h5:
        nbytes = sum(h5[k].nbytes for k in h5 if h5[k].ndim >= 3)
    assert nbytes <= cells * 72
    p = run(["plan", str(study), "--max-disk-GB", "0.0001"], tmp_path)  # nothing left to run: within budget
    assert p.returncode == 0, p.stdout + p.stderr
