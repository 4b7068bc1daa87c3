"""Solver settings: mesh density, grading, absorbing boundary, stop criterion and S-parameter band.

Everything is SI inside (metres, hertz). A study file writes lengths with ``_mm`` (e.g. ``min_cell_mm``);
the study layer converts them once with :func:`bodysweep.geometry.units.from_edge_units`, so the dict
handed to :func:`settings_from_dict` carries ``min_cell_m``.

Three quality presets are shipped: ``"draft"`` (quick look, coarse), ``"standard"`` (the default) and
``"fine"`` (convergence checks). A study picks one with ``preset`` and overrides single keys.
"""
from __future__ import annotations

from dataclasses import asdict, dataclass, fields, replace
from typing import Any, Literal

BOUNDARIES = ("pml", "mur")


def _is_int(v: Any) -> bool:
    return isinstance(v, int) and not isinstance(v, bool)


def _is_number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


@dataclass(frozen=True)
class SolverSettings:
    """How one case is meshed and run.

    Parameters
    ----------
    cells_per_wavelength : float
        Largest cell is ``lambda / cells_per_wavelength`` in each material, with
        ``lambda = c0 / (f sqrt(eps_r))`` at the case frequency. Allowed 6 ... 200.
    max_growth_ratio : float
        Largest ratio between neighbouring cell sizes along an axis. Allowed 1.05 ... 2.
    min_cell_m : float or None
        Mesh lines closer than this are merged into one (the more important one is kept), so that no
        sliver cell sets the timestep. ``None`` derives it: a quarter of the finest cell size the
        geometry asks for (see :func:`bodysweep.workflow.meshing.mesh.auto_mesh`).
    port_cells : int
        Cells across each port feed gap; the gap length divided by this is also the fine cell size
        used next to the conductor edges of that antenna. Allowed 1 ... 20.
    min_cells_per_layer : int
        At least this many cells across each layer (tissue layer, substrate, encapsulation). 1 ... 20.
    air_margin_wavelengths : float
        Every structure is at least this many free-space wavelengths away from the absorbing
        boundary. Allowed 0.05 ... 2.
    boundary : {"pml", "mur"}
        Absorbing boundary: perfectly matched layer of ``pml_cells`` cells, or first-order Mur.
    pml_cells : int
        Thickness of the PML in cells (of the edge cell size). Allowed 4 ... 20; unused for ``mur``.
    end_criterion_dB : float
        The run stops when the field energy fell this far below its peak. Allowed -120 ... -10.
    max_timesteps : int
        Hard cap on the number of timesteps. Allowed 1000 ... 10 000 000.
    excite_ports : tuple of int
        Ports excited one after the other: ``(1,)`` gives S11 and S21, ``(1, 2)`` also S22 and S12.
    band_fraction : float
        S-parameters are reported over ``f (1 +- band_fraction / 2)``; the excitation pulse covers at
        least this band. Allowed 0.01 ... 1.5.
    n_band_points : int
        Number of frequency points in that band (odd numbers put the case frequency on a point).
        Allowed 3 ... 10001.
    threads : int
        Engine threads; 0 lets the engine decide. Allowed 0 ... 256.
    engine_sar_average : bool
        Also run the engine's own IEEE 62704 mass averaging (one more engine run of port 1) and record
        its 1 g / 10 g peaks beside bodysweep's in the case metrics, as information only.
    mirror_plane : {None, "x", "y", "z"}
        Solve half the domain: the plane ``<axis> = 0`` becomes an electric wall (PEC) and only the
        side ``<axis> >= 0`` is meshed (see :mod:`bodysweep.workflow.solver.mirror`). The scene must be
        mirror-symmetric about that plane and every port must point along ``<axis>`` with its feed
        gap centred on the plane; the case is refused otherwise. ``None`` (default): full domain.
        Left out of :meth:`to_dict` when ``None``, so case ids of studies without it do not change.
    """

    cells_per_wavelength: float = 20.0
    max_growth_ratio: float = 1.4
    min_cell_m: float | None = None
    port_cells: int = 3
    min_cells_per_layer: int = 2
    air_margin_wavelengths: float = 0.25
    boundary: Literal["pml", "mur"] = "pml"
    pml_cells: int = 8
    end_criterion_dB: float = -50.0
    max_timesteps: int = 200_000
    excite_ports: tuple[int, ...] = (1,)
    band_fraction: float = 0.3
    n_band_points: int = 201
    threads: int = 0
    engine_sar_average: bool = False
    mirror_plane: str | None = None

    def __post_init__(self):
        def need(cond: bool, key: str, allowed: str):
            if not cond:
                raise ValueError(f"solver setting {key}: got {getattr(self, key)!r}; allowed {allowed}")

        need(_is_number(self.cells_per_wavelength) and 6 <= self.cells_per_wavelength <= 200,
             "cells_per_wavelength", "a number from 6 to 200")
        need(_is_number(self.max_growth_ratio) and 1.05 <= self.max_growth_ratio <= 2.0,
             "max_growth_ratio", "a number from 1.05 to 2")
        need(self.min_cell_m is None or (_is_number(self.min_cell_m) and 1e-7 <= self.min_cell_m <= 1e-2),
             "min_cell_m", "None (derived from the geometry) or a length from 1e-7 m to 1e-2 m")
        need(_is_int(self.port_cells) and 1 <= self.port_cells <= 20, "port_cells", "an integer from 1 to 20")
        need(_is_int(self.min_cells_per_layer) and 1 <= self.min_cells_per_layer <= 20,
             "min_cells_per_layer", "an integer from 1 to 20")
        need(_is_number(self.air_margin_wavelengths) and 0.05 <= self.air_margin_wavelengths <= 2.0,
             "air_margin_wavelengths", "a number from 0.05 to 2")
        need(self.boundary in BOUNDARIES, "boundary", f"one of {BOUNDARIES}")
        need(_is_int(self.pml_cells) and 4 <= self.pml_cells <= 20, "pml_cells", "an integer from 4 to 20")
        need(_is_number(self.end_criterion_dB) and -120 <= self.end_criterion_dB <= -10,
             "end_criterion_dB", "a number from -120 to -10 (dB below the energy peak)")
        need(_is_int(self.max_timesteps) and 1000 <= self.max_timesteps <= 10_000_000,
             "max_timesteps", "an integer from 1000 to 10000000")
        ports = self.excite_ports
        if isinstance(ports, list):
            ports = tuple(ports)
            object.__setattr__(self, "excite_ports", ports)
        need(isinstance(ports, tuple) and len(ports) >= 1 and all(_is_int(p) and p >= 1 for p in ports)
             and len(set(ports)) == len(ports),
             "excite_ports", "a non-empty list of distinct port numbers >= 1, e.g. [1] or [1, 2]")
        need(_is_number(self.band_fraction) and 0.01 <= self.band_fraction <= 1.5,
             "band_fraction", "a number from 0.01 to 1.5 (relative width of the S-parameter band)")
        need(_is_int(self.n_band_points) and 3 <= self.n_band_points <= 10001,
             "n_band_points", "an integer from 3 to 10001")
        need(_is_int(self.threads) and 0 <= self.threads <= 256, "threads", "an integer from 0 (auto) to 256")
        need(isinstance(self.engine_sar_average, bool), "engine_sar_average", "true or false")
        need(self.mirror_plane in (None, "x", "y", "z"), "mirror_plane",
             "null (full domain) or one of 'x', 'y', 'z' (electric wall on the plane <axis> = 0)")
        need(self.mirror_plane is None or not self.engine_sar_average, "mirror_plane",
             "null when engine_sar_average is true (the engine would average the half domain only)")
        # the integer-valued floats are stored as float so that to_dict / from_dict round trip exactly
        for key in ("cells_per_wavelength", "max_growth_ratio", "air_margin_wavelengths", "end_criterion_dB",
                    "band_fraction"):
            object.__setattr__(self, key, float(getattr(self, key)))
        if self.min_cell_m is not None:
            object.__setattr__(self, "min_cell_m", float(self.min_cell_m))

    # -- derived quantities -------------------------------------------------------------------------
    def band_Hz(self, frequency_Hz: float) -> tuple[float, float]:
        """``(f_low, f_high)`` of the S-parameter band around ``frequency_Hz``."""
        h = 0.5 * self.band_fraction
        return frequency_Hz * (1.0 - h), frequency_Hz * (1.0 + h)

    def band_frequencies_Hz(self, frequency_Hz: float):
        """The ``n_band_points`` frequencies of the S-parameter band, shape ``(n_band_points,)``."""
        import numpy as np

        lo, hi = self.band_Hz(frequency_Hz)
        return np.linspace(lo, hi, self.n_band_points)

    @property
    def end_criterion_linear(self) -> float:
        """The stop criterion as the energy ratio openEMS expects (``10 ** (dB / 10)``)."""
        return 10.0 ** (self.end_criterion_dB / 10.0)

    @property
    def absorbing_cells(self) -> int:
        """Mesh cells the absorbing boundary occupies at each domain face (0 for Mur)."""
        return self.pml_cells if self.boundary == "pml" else 0

    # -- dict form -----------------------------------------------------------------------------------
    def to_dict(self) -> dict:
        """Plain JSON-ready dict in SI; :func:`settings_from_dict` of it gives back an equal object."""
        d = asdict(self)
        d["excite_ports"] = list(self.excite_ports)
        if d["mirror_plane"] is None:  # off: not part of the dict, so existing case ids stay the same
            del d["mirror_plane"]
        return d

    @classmethod
    def from_dict(cls, d: dict) -> "SolverSettings":
        return settings_from_dict(d)


SETTING_KEYS: tuple[str, ...] = tuple(f.name for f in fields(SolverSettings))

#: quality presets; "standard" equals the dataclass defaults
PRESETS: dict[str, SolverSettings] = {
    "draft": SolverSettings(cells_per_wavelength=12.0, max_growth_ratio=1.5, port_cells=2,
                            min_cells_per_layer=1, air_margin_wavelengths=0.15, boundary="mur",
                            end_criterion_dB=-30.0, max_timesteps=50_000, n_band_points=51),
    "standard": SolverSettings(),
    "fine": SolverSettings(cells_per_wavelength=30.0, max_growth_ratio=1.3, port_cells=4,
                           min_cells_per_layer=3, air_margin_wavelengths=0.3, pml_cells=10,
                           end_criterion_dB=-60.0, max_timesteps=1_000_000, n_band_points=401),
}
DEFAULT_PRESET = "standard"


def preset(name: str) -> SolverSettings:
    """The settings of a named quality preset (``"draft"``, ``"standard"``, ``"fine"``)."""
    try:
        return PRESETS[name]
    except (KeyError, TypeError):
        raise ValueError(f"solver preset {name!r} is unknown; allowed: {sorted(PRESETS)}") from None


def settings_from_dict(d: dict | None) -> SolverSettings:
    """Settings from a preset plus overrides.

    Parameters
    ----------
    d : dict or None
        Optional ``"preset"`` (default ``"standard"``) and any :class:`SolverSettings` field in SI
        units (``min_cell_m``, not ``min_cell_mm``). ``None`` or ``{}`` gives the standard preset.

    Raises
    ------
    ValueError
        Unknown key (the message lists the allowed ones), a length still in mm, or a bad value.
    """
    d = dict(d or {})
    base = preset(d.pop("preset", DEFAULT_PRESET))
    unknown = sorted(k for k in d if k not in SETTING_KEYS)
    if unknown:
        hint = ""
        if any(k.endswith("_mm") for k in unknown):
            hint = " (convert *_mm keys to SI first with bodysweep.geometry.units.from_edge_units)"
        raise ValueError(f"solver settings: unknown key(s) {unknown}{hint}; allowed: ['preset'] + {sorted(SETTING_KEYS)}")
    if "excite_ports" in d and isinstance(d["excite_ports"], list):
        d["excite_ports"] = tuple(d["excite_ports"])
    return replace(base, **d)
