"""Post-processing as pure functions over numpy arrays.

Modules
-------
sparams
    DFT of probe signals, power waves, S-matrix assembly, accepted power, Touchstone writer.
twoport
    Rollett stability factor, maximum available / stable gain, transducer gain, conjugate match.
sar, sar_average
    Local SAR from the raw field dump and mass-averaged SAR over cubes (IEC/IEEE 62704-1 style).
limits, linkbudget
    Exposure limit table and the SAR-limited link budget.

No module here imports openEMS or reads solver files; the solver adapter feeds arrays in.
"""

# Part of every case identity: bump when a change here alters any result.
POST_VERSION = "3"  # 2: a cube face within rounding of a mesh line lies on it (whole-cell cubes flush with the surface)
# 3: metrics.json carries the peak cube side, the energy balance and per-case warnings
