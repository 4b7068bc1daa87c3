"""Time the collector on 10,000 synthetic case folders (metrics.json only) in a temporary folder.

    .venv/bin/python benchmarks/collect_scale.py [N]

Prints the time to build the three tables in memory and to write them (Parquet + CSV).
The metrics are random numbers in the shape of the case-folder contract; they mean nothing physically.
"""
from __future__ import annotations

import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from bodysweep.workflow.atomic import json_text
from bodysweep.workflow.collect import collect_frames, write_frames
from bodysweep.workflow.layout import StudyLayout, write_plan


def synthetic_study(root: Path, n: int, seed: int = 1) -> StudyLayout:
    rng = np.random.default_rng(seed)
    layout = StudyLayout.of("scale", root)
    entries = []
    for k in range(n):
        cid = f"{k:012x}"
        f = float(rng.choice([403e6, 433e6, 915e6]))
        params = {"frequency_MHz": f * 1e-6, "scene.implant.depth_mm": float(rng.integers(3, 30)),
                  "scene.external": str(rng.choice(["loop", "dipole"]))}
        entries.append({"case_id": cid, "label": f"case {k}", "parameters": params, "frequency_Hz": f,
                        "ports": [1]})
        s = rng.normal(size=8) * 0.3
        failed = rng.random() < 0.02
        m = {"status": "failed", "reason": "synthetic failure"} if failed else {
            "status": "ok", "reason": "", "frequency_Hz": f,
            "S11": [s[0], s[1]], "S21": [s[2] * 0.01, s[3] * 0.01], "S12": [s[2] * 0.01, s[3] * 0.01],
            "S22": [s[6], s[7]],
            "sar": [{"mass_kg": mk, "peak_W_per_kg_per_W": pk, "peak_from": "grid",
                     "cube_centre_m": rng.normal(size=3).tolist(), "cube_side_m": 0.01,
                     "voxel_centre_m": rng.normal(size=3).tolist(), "grid_peak_W_per_kg_per_W": pk,
                     "flush_peak_W_per_kg_per_W": pk * 0.99, "flush_face": "+z"}
                    for mk, pk in ((0.001, float(rng.uniform(1, 50))), (0.01, float(rng.uniform(1, 20))))],
            "limits": [{"mass_kg": 0.001, "limit_W_per_kg": 1.6, "source": "limit A",
                        "sar_limited_accepted_W": float(rng.uniform(0.01, 1)),
                        "implant_power_W": {"unmatched": float(rng.uniform(1e-7, 1e-6)),
                                            "tx_matched": float(rng.uniform(1e-6, 1e-3)), "both_matched": None}},
                       {"mass_kg": 0.01, "limit_W_per_kg": 2.0, "source": "limit B",
                        "sar_limited_accepted_W": float(rng.uniform(0.01, 1)),
                        "implant_power_W": {"unmatched": float(rng.uniform(1e-7, 1e-6)),
                                            "tx_matched": float(rng.uniform(1e-6, 1e-3)), "both_matched": None}}],
            "ports": {"Zin1_ohm": [float(rng.uniform(1, 50)), float(rng.uniform(-500, 500))], "Zin2_ohm": None,
                      "mismatch_loss_port1_dB": float(rng.uniform(0, 20)), "mismatch_loss_port2_dB": None,
                      "rollett_K": None, "port2_reason": "port 2 not excited"},
            "max_available_gain": None, "warnings": [], "runtime_s": float(rng.uniform(5, 500)),
            "cells": int(rng.integers(10_000, 1_000_000)), "timesteps": int(rng.integers(1000, 100_000)),
            "decay_reached": True}
        d = layout.case_dir(cid)
        d.mkdir(parents=True)
        (d / "metrics.json").write_text(json_text(m))
    write_plan(layout, "scale", entries)
    return layout


def main(n: int = 10_000) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        layout = synthetic_study(Path(tmp), n)
        t1 = time.perf_counter()
        frames = collect_frames(layout)
        t2 = time.perf_counter()
        write_frames(layout, frames)
        t3 = time.perf_counter()
        print(f"generated {n} synthetic case folders in {t1 - t0:.1f} s")
        print(f"collect {n} cases: tables in memory {t2 - t1:.2f} s, written (Parquet + CSV) {t3 - t2:.2f} s, "
              f"total {t3 - t1:.2f} s")
        print(f"rows: summary {len(frames['summary'])}, sparams {len(frames['sparams'])}, sar {len(frames['sar'])}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 10_000)
