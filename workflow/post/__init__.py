"""Post-processing as pure functions over numpy arrays.

Modules
-------
sparams
    DFT of probe signals, power waves, S-matrix assembly, accepted power, Touchstone writer.
twoport
    Rollett stability factor, maximum available / stable gain, transducer gain, conjugate match.
sar, sar_cubes, sar_average, sar_flush
    Local SAR from the raw field dump; exact box contents and cube sides; mass-averaged SAR over cubes
    placed on the voxel grid (IEC/IEEE 62704-1 procedure); the best cube flush with a tissue surface at
    any position along it.
limits, linkbudget
    Exposure limit table and the SAR-limited link budget.

No module here imports openEMS or reads solver files; the solver adapter feeds arrays in.
"""

# Part of every case identity: bump when a change here alters any result.
POST_VERSION = "6"  # 6: a dipole of wire without radius is warned (thin_wire)
# 5: metrics.json carries the energy balance and the suspect-case warnings (truncated peak cube,
#                        low accepted power, energy balance, end criterion)
# 4: the S-parameter band is transformed from the stored port time signals at the finish step
# 3: cube faces snap to mesh lines within 1 % of the cell width; reported SAR peak is the larger
#    of the voxel-grid peak and the best cube flush with a surface (continuous position)
# 2: a cube face within rounding of a mesh line lies on it (whole-cell cubes flush with the surface)
