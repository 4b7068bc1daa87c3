"""A planar inverted-F through the real pipeline resonates where the quarter-wave estimate says.

Reference (closed-form estimate): a planar inverted-F whose shorting pin is narrow and stands at a corner of
the patch resonates where the path from the pin around the patch edge is a quarter wavelength,
``L + W = lambda / 4`` (Hirasawa and Haneishi, Analysis, Design, and Measurement of Small and Low-Profile
Antennas, Artech House 1992, ch. 5; from memory). The estimate ignores the height ``h`` (with it,
``L + W + h = lambda / 4``); the two bracket the resonance by about +-4 % for the board below, so the check
allows 8 %. In air (substrate eps_r 1) so that no effective permittivity enters the estimate.

Measured here (draft mesh, 87 k cells, 2026-12-03): resonance (|S22| minimum over the band) at 884 MHz,
the estimate gives 914 MHz (L + W) and 852 MHz (L + W + h): -3.3 % and +3.7 %.
"""
from __future__ import annotations

import numpy as np
import pytest

from dipole_cases import run_study

pytestmark = [pytest.mark.solver, pytest.mark.validation, pytest.mark.pipeline, pytest.mark.timeout(900)]

C0 = 299_792_458.0
L_MM, W_MM, H_MM = 50.0, 32.0, 6.0


def _study() -> dict:
    f_est = C0 / (4 * (L_MM + W_MM) * 1e-3)
    return {
        "study": "val_inverted_f",
        "frequencies_MHz": [round(f_est / 1e6, 1)],
        "scene": {
            "phantom": {"type": "none"},
            # a short dipole far from resonance at 40 mm: it loads the implant port only weakly
            "external": {"type": "dipole", "length_mm": 30, "feed_gap_mm": 2, "axis": "x", "standoff_mm": 40},
            "implant": {"type": "inverted_f", "patch_length_mm": L_MM, "patch_width_mm": W_MM,
                        "pin_position_mm": 0, "feed_distance_mm": 6, "board_size_mm": [70, 50],
                        "substrate": {"thickness_mm": H_MM, "eps_r": 1.0}, "depth_mm": 1},
        },
        # band 0.4: the pulse stays clear of DC (fc = 0.5 f), see workflow/solver/run.py excitation_pulse
        "solver": {"preset": "draft", "band_fraction": 0.4, "n_band_points": 201, "max_timesteps": 200000},
        "excite": [1, 2],
    }


def test_inverted_f_resonates_at_the_quarter_wave_estimate(tmp_path):
    import pandas as pd

    res = run_study(tmp_path, _study())
    summary = pd.read_parquet(res / "tables" / "summary.parquet")
    assert summary["status"].isin(("ok", "warning")).all(), summary[["status"]].to_string()
    sp = pd.read_parquet(res / "tables" / "sparams.parquet")
    s22 = sp[(sp["i"] == 2) & (sp["j"] == 2)].sort_values("frequency_MHz")
    f = s22["frequency_MHz"].to_numpy()
    mag = s22["mag_dB"].to_numpy()
    k = int(np.argmin(mag))
    assert 0 < k < len(f) - 1, "the |S22| minimum lies on the band edge: no resonance inside the band"
    f_res = f[k] * 1e6
    f_lw = C0 / (4 * (L_MM + W_MM) * 1e-3)
    f_lwh = C0 / (4 * (L_MM + W_MM + H_MM) * 1e-3)
    print(f"inverted-F: resonance {f_res / 1e6:.1f} MHz, |S22| {mag[k]:.2f} dB; estimate L+W {f_lw / 1e6:.1f} MHz "
          f"({(f_res / f_lw - 1) * 100:+.1f} %), L+W+h {f_lwh / 1e6:.1f} MHz ({(f_res / f_lwh - 1) * 100:+.1f} %)")
    assert f_res == pytest.approx(f_lw, rel=0.08)
    assert f_lwh * 0.96 <= f_res <= f_lw * 1.04  # between the two forms of the estimate, with a little slack
    assert mag[k] < mag[0] - 0.2 and mag[k] < mag[-1] - 0.2  # a real dip, not noise
