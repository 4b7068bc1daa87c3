"""Solver-neutral builders: tissue models, phantoms, antennas, passive concentrators and scenes.

Nothing in this package imports a field solver.
"""

#: bump when a change to any builder alters the primitives a spec produces (part of every case identity)
BUILDER_VERSION = "1"
