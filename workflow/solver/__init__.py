"""Solver adapter: the only part of bodysweep that imports openEMS (in :mod:`.engine`)."""
