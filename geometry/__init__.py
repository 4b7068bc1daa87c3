"""Solver-neutral builders: tissue models, phantoms, antennas, passive concentrators and scenes.

Nothing in this package imports a field solver.
"""
