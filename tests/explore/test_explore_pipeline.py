"""`bodysweep explore` end to end on the tiny study: 2 rounds of 2 cases, killed during round 2 and resumed.

Checks (common practice for resumable batch work): no case that finished before the kill is run again
(its files keep their inode and modification time), the resumed search ends with the budget spent, and
the same seed with the same results gives the same proposals (a replay of the told values through the
driver in a fresh folder, analytic stand-in for the solver). The best point's uncertainty budget is
recomputed from its component runs' metrics (GUM, JCGM 100:2008: rectangular divisor sqrt 3 §4.3.7,
root-sum-square §5.1.2, k = 2 §6.2)."""
from __future__ import annotations

import json
import math
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest
import yaml

from bodysweep.workflow.explore.driver import Outcome, SearchDriver
from bodysweep.workflow.study import load_study
from bodysweep.workflow.study.exploration import parse_search

sys.path.insert(0, str(Path(__file__).parent.parent / "pipeline"))
from helpers_reliability import kill_group  # noqa: E402  (also ends Snakemake's own session)

pytestmark = [pytest.mark.pipeline, pytest.mark.solver, pytest.mark.timeout(900)]
TINY = Path(__file__).parent.parent / "pipeline" / "data" / "tiny.yaml"


def _study(path: Path) -> Path:
    d = yaml.safe_load(TINY.read_text())
    d["study"] = "tiny_explore"
    del d["sweep"]
    d["explore"] = {"parameters": {"depth": {"path": "scene.implant.depth_mm", "range": [5, 10]}},
                    "budget_cases": 4, "batch": 2, "seed": 11, "mesh_check": {"best": 1}}
    d["uncertainty"] = {"components": ["mesh", "tissue", "power_balance"]}  # the best point's budget
    path.write_text(yaml.safe_dump(d, sort_keys=False))
    return path


def _cmd(*args):
    return [sys.executable, "-m", "bodysweep.workflow.cli", *args]


def _rounds(root: Path):
    files = list((root / "explore").glob("*/rounds.json"))
    return json.loads(files[0].read_text())["rounds"] if files else []


def _finished(root: Path) -> dict[str, tuple[int, int]]:
    return {p.parent.name: (p.stat().st_ino, p.stat().st_mtime_ns) for p in (root / "cases").glob("*/metrics.json")}


def test_explore_two_rounds_killed_and_resumed(tmp_path):
    study = _study(tmp_path / "tiny_explore.yaml")
    root = tmp_path / "results" / "tiny_explore"
    proc = subprocess.Popen(_cmd("explore", str(study)), cwd=tmp_path, stdout=subprocess.PIPE,
                            stderr=subprocess.STDOUT, text=True, start_new_session=True)
    t0 = time.monotonic()
    while len(_rounds(root)) < 2:  # round 1 told, round 2 asked and running
        assert proc.poll() is None, proc.communicate()[0][-3000:]
        assert time.monotonic() - t0 < 600, "round 2 never started"
        time.sleep(0.5)
    time.sleep(3)
    kill_group(proc)
    before = _finished(root)
    assert len(before) >= 2  # round 1's two cases

    done = subprocess.run(_cmd("explore", str(study)), cwd=tmp_path, capture_output=True, text=True, timeout=800)
    assert done.returncode == 0, done.stdout[-3000:] + done.stderr[-3000:]
    after = _finished(root)
    for cid, stamp in before.items():
        assert after[cid] == stamp, f"case {cid} was run again"
    assert "resuming 2 points of round 2" in done.stdout
    assert "budget spent (4 points x 1 cases)" in done.stdout

    folder = next((root / "explore").glob("*/rounds.json")).parent
    rounds = _rounds(root)
    assert [len(r) for r in rounds] == [2, 2]
    summary = pd.read_csv(root / "tables" / "summary.csv")
    assert len(summary) == 4 and set(summary["status"]) <= {"ok", "warning"}
    assert summary["scene.implant.depth_mm"].between(5, 10).all()
    assert (folder / "report.md").exists() and (folder / "progress.png").exists()
    check = json.loads((folder / "mesh_check.json").read_text())
    assert check["cells_per_wavelength"]["check"] == pytest.approx(1.5 * 6)  # tiny.yaml: 6 cells per wavelength
    assert check["points"][0]["check_value"] is not None

    # the best point's uncertainty budget, recomputed from the component runs' own metrics
    budget = json.loads((folder / "uncertainty.json").read_text())
    best = budget["points"][0]
    assert best["value"] == pytest.approx(summary["implant_power_tx_matched_dBm"].max())
    assert best["quantity"] == "implant_power_tx_matched"  # tiny's figure of merit: implant power, port 1 matched
    broot = tmp_path / "results" / budget["study"]
    bsum = pd.read_csv(broot / "tables" / "summary.csv")
    assert len(bsum) == 1 and bsum["case_id"][0] == best["case_id"]  # only the best point's own case
    own = json.loads((broot / "cases" / best["case_id"] / "metrics.json").read_text())
    tx = lambda m: min(m["limits"], key=lambda lim: lim["sar_limited_accepted_W"])["implant_power_W"]["tx_matched"]
    runs = {r["component"]: r for r in pd.read_csv(broot / "tables" / "uncertainty.csv").to_dict("records")
            if r["case_id"] == best["case_id"] and r["quantity"] == "implant_power_tx_matched"}
    u2 = 0.0
    for comp in ("mesh", "tissue"):
        run = json.loads((broot / "cases" / runs[comp]["run_case_id"] / "metrics.json").read_text())
        dev = tx(run) / tx(own) - 1
        assert runs[comp]["deviation"] == pytest.approx(dev, rel=1e-6)
        u2 += (dev / 3 ** 0.5) ** 2
    u2 += runs["power_balance"]["standard_uncertainty"] ** 2
    U = 2 * u2 ** 0.5
    assert best["U_budget"] == pytest.approx(U, rel=1e-6)
    assert best["U"] == pytest.approx(max(10 * math.log10(1 + U), -10 * math.log10(1 - U)), rel=1e-6)
    lead = budget["leads"][0]
    second = sorted(summary["implant_power_tx_matched_dBm"])[-2]
    assert lead["over"] == "the runner-up" and lead["lead"] == pytest.approx(best["value"] - second)
    assert lead["exceeds"] == (lead["lead"] > best["U"])
    report = (folder / "report.md").read_text()
    assert "## Uncertainty budget of the best" in report and "Lead over the runner-up" in report

    # same seed, same told values -> same proposals (replay in a fresh folder)
    s = load_study(study)
    spec = parse_search(s.raw, s.parameters, set(), set(), 1, 1)
    told = SearchDriver(spec, folder, echo=lambda m: None)
    by_point = {json.dumps(t.user_attrs["point"], sort_keys=True): t.value for t in told.trials()
                if t.state.name == "COMPLETE" and "repeat_of" not in t.user_attrs}

    class Replay:
        def refuse(self, p):
            return None

        def evaluate(self, points, all_points):
            return [Outcome(by_point[json.dumps(p, sort_keys=True)]) for p in points]

    replay = SearchDriver(spec, tmp_path / "replay", echo=lambda m: None)
    replay.run(Replay())
    pts = lambda d: [[{t.number: t for t in d.trials()}[n].user_attrs["point"] for n in r] for r in d.rounds()]
    assert pts(replay) == pts(told)
