"""Warnings of suspect cases on a real coarse study (tests/pipeline/data/flags.yaml, three openEMS runs).

Each case is built so that its warnings are known beforehand:
- a 110 mm dipole over the middle of a 160 mm slab: its 1 g peak cube (about 11 mm) is far from every cut
  face and it accepts more than 5 % of the incident power: no warning;
- the same dipole along y, 3 mm inside the slab's side x = 80 mm: the 1 g cube around the peak must
  touch that side (half a cube side is about 5.5 mm; hand calculation): truncation warning;
- a 10 mm dipole at 915 MHz (0.03 wavelength, far below resonance; Balanis, Antenna Theory, §4.2, a short
  dipole's radiation resistance 20 pi^2 (l/lambda)^2 ~ 0.2 ohm): S11 close to 0 dB, normalisation warning.
"""
import os
from pathlib import Path

import pandas as pd
import pytest

from bodysweep.workflow import cli

pytestmark = [pytest.mark.pipeline, pytest.mark.solver, pytest.mark.timeout(900)]

STUDY = Path(__file__).parent / "data" / "flags.yaml"


@pytest.fixture(scope="module")
def tables(tmp_path_factory):
    work = tmp_path_factory.mktemp("flags")
    old = os.getcwd()
    os.chdir(work)
    try:
        rc = cli.main(["run", str(STUDY), "--cores", "2"])
    finally:
        os.chdir(old)
    assert rc == 0
    root = work / "results" / "flags"
    return pd.read_parquet(root / "tables" / "summary.parquet"), (root / "report" / "report.md").read_text()


def _row(summary, where, length):
    r = summary[(summary["scene.external.position_mm.0"] == where) & (summary["scene.external.length_mm"] == length)]
    assert len(r) == 1
    return r.iloc[0]


def test_the_warnings_are_the_expected_ones(tables):
    summary, _ = tables
    centre, side, short = _row(summary, 0, 110), _row(summary, 77, 110), _row(summary, 0, 10)
    assert centre["status"] == "ok" and not centre["warnings"]
    assert side["status"] == "warning" and short["status"] == "warning"
    assert "sar_cube_truncated: " in side["warnings"] and "accepted_power_low: " in short["warnings"]
    assert "touches the slab's side x = 80 mm" in side["warnings"]
    assert "accepted at port 1" not in side["warnings"]
    assert short["S11_dB"] > -0.2  # 1 - |S11|^2 < 4.5 %
    assert "accepted at port 1" in short["warnings"] and "implant_power_both_matched_dBm" in short["warnings"]
    assert "touches" not in short["warnings"]


def test_report_lists_the_warnings(tables):
    summary, report = tables
    assert "## Warnings" in report
    assert report.count("touches the slab's side") == 1 and report.count("ill-conditioned") == 1
