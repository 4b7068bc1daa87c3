"""Print the single-thread openEMS throughput (MCells/s), timestep and peak memory for a few sizes."""
from bodysweep.workflow.meshing.cost import CALIBRATED_CELLS_PER_S, calibrate

if __name__ == "__main__":
    for r in calibrate():
        print(f"{r['cells']:>9d} cells  {r['timesteps']:>6d} steps  {r['MC_per_s']:7.1f} MC/s  "
              f"dt {r['timestep_s']:.4e} s  peak RSS {r['max_rss_B'] / 1e6 if r['max_rss_B'] else float('nan'):.0f} MB")
    print(f"calibration constant in cost.py: {CALIBRATED_CELLS_PER_S / 1e6:.0f} MC/s")
