"""Where SAR and coupling are decided: size limits in the tissue next to conductors (pure numpy, metres).

The automatic mesh (:mod:`.mesh`) sizes cells by the wavelength in each material and grades them away
from conductor edges and feed gaps. Peak averaged SAR and the coupling to an implant are decided in the
tissue nearest the conductors, where the reactive near field falls off over millimetres, much faster than
the wavelength: there the wavelength rule alone leaves cells too coarse. The *tissue zone* of a conductor
is every tissue primitive's extent within ``tissue_zone_m`` of the conductor's extent (or of a port); its
cells are at most ``lambda_tissue / (cells_per_wavelength * tissue_zone_refinement)``.

A rectilinear mesh line runs through the whole domain, so a limit is an interval per axis: the zone's
extent along x, y and z.
"""
from __future__ import annotations

import numpy as np

from bodysweep.geometry.model import SceneModel

from .settings import SolverSettings

C0 = 299_792_458.0  # speed of light in vacuum, m/s (SI definition)


def tissue_zone_limits(model: SceneModel, settings: SolverSettings) -> list[tuple[int, float, float, float, str]]:
    """Size limits ``(axis index, lo, hi, h_max, reason)`` of the tissue zones of ``model``.

    Empty when ``settings.tissue_zone_refinement`` is 1 or ``tissue_zone_m`` is 0 (no zone) or the scene
    has no tissue.
    """
    k, reach = settings.tissue_zone_refinement, settings.tissue_zone_m
    if k <= 1.0 or reach <= 0.0:
        return []
    f, n = model.frequency_Hz, settings.cells_per_wavelength
    metal = [p.bounds() for p in model.primitives if model.material(p.material).kind in ("pec", "conductor")]
    metal += [p.bounds() for p in model.ports]
    tissue = [(p.bounds(), model.material(p.material)) for p in model.primitives
              if model.material(p.material).is_tissue]
    out = []
    for clo, chi in metal:
        zlo, zhi = np.asarray(clo) - reach, np.asarray(chi) + reach
        for (tlo, thi), mat in tissue:
            lo, hi = np.maximum(zlo, tlo), np.minimum(zhi, thi)
            if np.any(hi <= lo):
                continue
            h = C0 / (f * np.sqrt(mat.eps_r)) / (n * k)
            for i in range(3):
                out.append((i, float(lo[i]), float(hi[i]), float(h), f"{mat.name} near a conductor (tissue zone)"))
    return out
