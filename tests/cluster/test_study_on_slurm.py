"""A tiny real study through `bodysweep run --profile slurm` on the local SLURM, against a local run.

Three coarse cases: two that finish and one that is made to fail (its timestep cap of 1000 is far
too small for the field energy to decay, so the solver reports "decay not reached" as a failure).
Checked: every solve job ran as a SLURM job in the partition asked for with the memory/time the
cost estimate gives; the failing case is reported failed while the others finish; the merged tables
equal those of a local run of the same study.
"""
from __future__ import annotations

import json
import subprocess
import sys
import time
from pathlib import Path

import pytest
import yaml

pytestmark = [pytest.mark.slurm, pytest.mark.timeout(1500)]

# the cost estimate the solve rule sizes its jobs with (the mesh developer's module)
pytest.importorskip("bodysweep.workflow.meshing.cost", reason="the case cost estimate (workflow/meshing/cost.py) is not in the tree yet")

from bodysweep.workflow.cluster import resources_for_case  # noqa: E402
from bodysweep.workflow.pipeline import PROFILES_DIR  # noqa: E402
from slurm_records import tres2dict, tres_mem2mib  # noqa: E402  tests/cluster/

# Our own invented test scene: a two-layer slab, a strip dipole above it and a short implant dipole.
STUDY = {
    "study": "slurm-check",
    "frequencies_MHz": [2450],
    "scene": {
        "phantom": {"type": "layered_slab", "size_x_mm": 40, "size_y_mm": 30,
                    "layers": [{"tissue": "skin_dry", "thickness_mm": 2}, {"tissue": "muscle", "thickness_mm": 12}]},
        "external": {"type": "dipole", "length_mm": 40, "feed_gap_mm": 2, "strip_width_mm": 2, "axis": "x",
                     "position_mm": [0, 0], "standoff_mm": 4, "conductor": "pec"},
        "implant": {"type": "dipole", "length_mm": 12, "feed_gap_mm": 2, "wire_radius_mm": 0, "axis": "x",
                    "position_mm": [0, 0], "depth_mm": 6, "conductor": "pec"},
        "concentrators": [], "materials": [], "min_clearance_mm": 0.5,
    },
    # coarse: about 43 000 cells, a few seconds per case
    "solver": {"preset": "draft", "air_margin_wavelengths": 0.1, "port_cells": 1},
    "excite": [1],
    "sweep": {
        "parameters": {"depth": "scene.implant.depth_mm", "steps": "solver.max_timesteps"},
        "blocks": [{"list": [{"depth": 5, "steps": 50000}, {"depth": 7, "steps": 50000},
                             {"depth": 5, "steps": 1000}]}],
    },
}
FAILING_LABEL_PART = "steps=1000"
PARTITION = "bulk"  # the non-default partition of the local SLURM (start_slurm.sh)

# columns that legitimately differ between two runs of the same case
# timesteps: the energy-decay end criterion is checked at intervals, so two runs of one case can stop
# a check apart (seen: 8092 vs 7980 and 8190 vs 8585 steps; the engine checks it on a wall-clock interval); results then agree to the tolerance used below.
RUN_DEPENDENT = {"runtime_s", "reason", "timesteps", "warnings"}  # warnings quote run-dependent figures (energy balance)


def _test_profile(tmp: Path) -> Path:
    """The repository's SLURM profile with the settings a SLURM without accounting needs."""
    conf = yaml.safe_load((PROFILES_DIR / "slurm" / "config.yaml").read_text())
    conf.update({
        "slurm-status-command": "squeue",   # no slurmdbd here, so no sacct
        "slurm-no-account": True,           # no accounts either
        "slurm-init-seconds-before-status-checks": 1,
        "seconds-between-status-checks": 2,
        "latency-wait": 5,                  # one machine, no shared-file-system delay
        "retries": 0,                       # the failing case fails for a reason a retry does not fix
    })
    d = tmp / "profile"
    d.mkdir()
    (d / "config.yaml").write_text(yaml.safe_dump(conf, sort_keys=False))
    return d


def _bodysweep(args: list[str], cwd: Path, env: dict) -> subprocess.CompletedProcess:
    exe = str(Path(sys.executable).with_name("bodysweep"))
    return subprocess.run([exe, *args], cwd=cwd, env=env, capture_output=True, text=True, timeout=1400)


def _tables(root: Path) -> dict:
    import pandas as pd

    return {n: pd.read_parquet(root / "tables" / f"{n}.parquet") for n in ("summary", "sparams", "sar")}


def test_study_on_slurm_matches_local_run(slurm_cluster, slurm_env, tmp_path):
    import pandas as pd

    study = tmp_path / "study.yaml"
    study.write_text(yaml.safe_dump(STUDY, sort_keys=False))
    profile = _test_profile(tmp_path)

    t0 = time.monotonic()
    run = _bodysweep(["run", str(study), "--profile", str(profile), "--partition", PARTITION,
                      "--results-dir", "on_slurm", "--accept-cost"], tmp_path, slurm_env)
    wall_slurm = time.monotonic() - t0
    out = run.stdout + run.stderr
    # one case fails by design: exit code 3 = "some cases failed" (bodysweep.workflow.cli.EXIT_FAILED)
    assert run.returncode == 3, out[-4000:]
    assert "done: 2 of 3 cases have results" in out, out[-4000:]

    root = tmp_path / "on_slurm" / STUDY["study"]
    plan = json.loads((root / "plan.json").read_text())["cases"]
    jobs = slurm_cluster.completed_jobs()
    measured = []
    for entry in plan:
        case_dir = root / "cases" / entry["case_id"]
        status = json.loads((case_dir / "solve" / "excite_1" / "status.json").read_text())
        metrics = json.loads((case_dir / "metrics.json").read_text())
        failing = FAILING_LABEL_PART in entry["label"]
        # the solver ran inside a SLURM job (it records SLURM_JOB_ID) that SLURM completed in our partition
        job_id = status.get("slurm_job_id")
        assert job_id, f"{entry['label']}: status.json has no slurm_job_id: {status}"
        rec = jobs[job_id]
        assert rec["Partition"] == PARTITION
        assert rec["JobState"] == "COMPLETED"   # a failed case is a recorded result, not a crashed job
        want = resources_for_case(case_dir, attempt=1)
        tres = tres2dict(rec["Tres"])
        assert tres_mem2mib(tres["mem"]) == want["mem_mb"]
        assert rec["TimeLimit"] == str(want["runtime"])
        assert tres["cpu"] == str(want["threads"])
        if failing:
            assert status["status"] == "failed" and metrics["status"] == "failed"
            assert f"failed {entry['case_id']}" in out
        else:
            assert status["status"] == "ok", status
            assert metrics["status"] in ("ok", "warning"), metrics
        measured.append((entry["label"], want, status.get("runtime_s"), rec["StartTime"], rec["EndTime"]))
    for label, want, runtime_s, start, end in measured:
        print(f"[slurm] {label}: requested {want['mem_mb']} MiB, {want['runtime']} min, {want['threads']} threads;"
              f" solver ran {runtime_s} s (job {start} .. {end})")
    print(f"[slurm] wall time of the SLURM run: {wall_slurm:.1f} s")

    local = _bodysweep(["run", str(study), "--results-dir", "run_here", "--accept-cost"], tmp_path, slurm_env)
    assert local.returncode == 3, (local.stdout + local.stderr)[-4000:]
    a, b = _tables(root), _tables(tmp_path / "run_here" / STUDY["study"])
    for name in a:
        x, y = a[name], b[name]
        assert list(x.columns) == list(y.columns), name
        keys = [c for c in ("case_id", "frequency_MHz", "i", "j", "mass_g") if c in x.columns]
        x = x.sort_values(keys).reset_index(drop=True)
        y = y.sort_values(keys).reset_index(drop=True)
        cols = [c for c in x.columns if c not in RUN_DEPENDENT]
        if name == "sar":
            # the peak's location may jump between near-tied cube averages (seen: z -2.5 vs -10.9 mm with
            # equal peak values to 1e-3); the peak value itself is compared
            cols = [c for c in cols if not (c.startswith("cube_") or c.startswith("voxel_"))]
        # the same FDTD case on the same machine. Observed here: differences up to 2e-4 relative between
        # the SLURM and the local run (the engine's energy-decay end criterion is checked at intervals and the
        # runs may stop a check apart); 1e-3 still catches any real divergence of inputs or post-processing.
        # S-parameter real/imaginary parts cross zero over the band: there the check is absolute, 1e-4 in
        # |S| (observed 4e-6), far below any change of inputs.
        atol = 1e-4 if name == "sparams" else 1e-12
        pd.testing.assert_frame_equal(x[cols], y[cols], check_exact=False, rtol=1e-3, atol=atol, check_dtype=False)
