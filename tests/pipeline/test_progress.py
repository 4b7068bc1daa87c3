"""Within-case progress from the engine's console log (line format of openEMS 0.0.35 as it prints it)."""
from __future__ import annotations

import json

from bodysweep.workflow.layout import StudyLayout
from bodysweep.workflow.progress import last_progress, running_progress

# copied from a real openEMS 0.0.35 console (verbose 1) of this project's demo case
LINES = """Running FDTD engine... this may take a while... grab a cup of coffee?!?
[@        9s] Timestep:          210 || Speed:    9.4 MC/s (4.379e-02 s/TS) || Energy: ~2.09e-22 (- 0.00dB)
[@       17s] Timestep:          420 || Speed:   10.2 MC/s (4.044e-02 s/TS) || Energy: ~1.75e-22 (- 0.76dB)
[@       40s] Timestep:         1000 || Speed:   10.2 MC/s (4.044e-02 s/TS) || Energy: ~1.75e-23 (- 12.50dB)
"""


def test_last_progress_line_is_read(tmp_path):
    log = tmp_path / "console.log"
    log.write_text(LINES)
    assert last_progress(log) == {"elapsed_s": 40.0, "timestep": 1000, "energy_dB": -12.5}
    log.write_text("Create FDTD operator\n")
    assert last_progress(log) is None
    assert last_progress(tmp_path / "missing.log") is None


def test_running_excitations_get_steps_decay_and_time_left(tmp_path):
    layout = StudyLayout.of("p", tmp_path)
    (layout.root).mkdir(parents=True)
    (layout.root / "cost_estimates.json").write_text(json.dumps({"cases": {"aaa": {"timesteps": 5000}}}))
    for cid in ("aaa", "bbb"):
        d = layout.case_dir(cid) / "excite_1" / ".engine_run"
        d.mkdir(parents=True)
        (d / "console.log").write_text(LINES)
        (layout.case_dir(cid) / "case.json").write_text(json.dumps({"solver": {"end_criterion_dB": -30.0}}))
    (layout.case_dir("bbb") / "metrics.json").write_text("{}")  # finished: not listed
    lines = running_progress(layout, [{"case_id": "aaa", "ports": [1]}, {"case_id": "bbb", "ports": [1]}])
    assert len(lines) == 1
    # 1000 of 5000 steps in 40 s: 4000 steps left at 25 steps/s = 160 s (arithmetic)
    assert "aaa port 1: 1,000 of ~5,000 timesteps, energy -12.5 dB (ends at -30 dB), 40s in, about 2m40s left" in lines[0]
