"""bodysweep: parametric openEMS FDTD studies of radio links to implanted devices.

Subpackages: :mod:`bodysweep.geometry` (solver-neutral builders) and :mod:`bodysweep.workflow` (study
files, solver, post-processing, pipeline, command line). Importing this package loads neither.
"""
__version__ = "0.1.0"
