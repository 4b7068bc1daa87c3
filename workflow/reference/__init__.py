"""What the validation suite compares bodysweep's results against, kept out of the production modules.

Closed-form reference solutions (``layered_planewave``: impedance recursion for a layered lossy medium)
and validation harnesses that solve a reference problem with openEMS (``planewave_fdtd``: a normally
incident plane wave on a planar tissue stack). Nothing in the pipeline imports this package.
"""
