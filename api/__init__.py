"""bodysweep: parametric openEMS FDTD studies of radio links to implanted devices.

Subpackages: :mod:`bodysweep.geometry` (solver-neutral builders) and :mod:`bodysweep.workflow` (study
files, solver, post-processing, pipeline, command line). Importing this package loads neither's modules
(``bodysweep.workflow`` itself only holds the version).
"""
from .workflow import __version__
