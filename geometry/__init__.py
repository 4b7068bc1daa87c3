"""Solver-neutral builders: tissue models, phantoms, antennas, passive concentrators and scenes.

Nothing in this package imports a field solver.
"""

#: bump when a change to any builder alters the primitives a spec produces (part of every case identity)
BUILDER_VERSION = "2"  # 2: a cylinder's extent no longer widened by its radius along its own axis (mesh lines, clearance)
