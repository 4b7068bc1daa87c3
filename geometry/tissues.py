"""Tissue and material models: dispersive tissues (Cole-Cole), fixed tissues, liquids, casings, metals.

Every spec here turns into a :class:`~bodysweep.geometry.primitives.Material` at one frequency
(``to_material(f_Hz)``), because one case is one frequency.

The dispersive tissues use the four-pole Cole-Cole model of Gabriel, Lau & Gabriel (1996),
Phys. Med. Biol. 41:2271, Table 1, whose parameters live in ``data/tissues.json``::

    eps*(w) = eps_inf + sum_n d_eps_n / (1 + (j w tau_n)^(1 - alpha_n)) + sigma_i / (j w eps0)

with ``eps_r = Re(eps*)`` and the total conductivity ``sigma = -Im(eps*) w eps0``.
"""
from __future__ import annotations

import json
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources
from typing import Mapping

import numpy as np

from .primitives import Material

#: vacuum permittivity, F/m (CODATA 2018)
EPS0 = 8.8541878128e-12

#: tau units in the parameter table, in seconds (tau1 ps, tau2 ns, tau3 us, tau4 ms)
_TAU_UNITS_S = (1e-12, 1e-9, 1e-6, 1e-3)

#: material names that are always available without being declared
PEC_NAME = "pec"


@dataclass(frozen=True)
class ColeColeParams:
    """Parameters of a multi-pole Cole-Cole model.

    Parameters
    ----------
    eps_inf : float
        Permittivity at frequencies far above all dispersions.
    poles : tuple of (d_eps, tau_s, alpha)
        Each dispersion: magnitude ``d_eps`` (>= 0), relaxation time ``tau_s`` in seconds (> 0)
        and broadening ``alpha`` in [0, 1).
    sigma_i_S_per_m : float
        Static ionic conductivity (S/m, >= 0).
    """

    eps_inf: float
    poles: tuple[tuple[float, float, float], ...]
    sigma_i_S_per_m: float

    def __post_init__(self):
        if not self.eps_inf >= 1.0:
            raise ValueError(f"Cole-Cole model: eps_inf must be >= 1, got {self.eps_inf}")
        if not self.sigma_i_S_per_m >= 0.0:
            raise ValueError(f"Cole-Cole model: sigma_i must be >= 0 S/m, got {self.sigma_i_S_per_m}")
        poles = tuple((float(d), float(t), float(a)) for d, t, a in self.poles)
        for n, (d, t, a) in enumerate(poles, 1):
            if not d >= 0.0:
                raise ValueError(f"Cole-Cole pole {n}: d_eps must be >= 0, got {d}")
            if not t > 0.0:
                raise ValueError(f"Cole-Cole pole {n}: tau must be > 0 s, got {t}")
            if not 0.0 <= a < 1.0:
                raise ValueError(f"Cole-Cole pole {n}: alpha must be in [0, 1), got {a}")
        object.__setattr__(self, "poles", poles)

    @property
    def static_dispersive_eps(self) -> float:
        """``eps_inf + sum d_eps``: the low-frequency limit of the dispersive (non-ionic) part."""
        return self.eps_inf + sum(p[0] for p in self.poles)


def cole_cole_permittivity(params: ColeColeParams, f_Hz):
    """Complex relative permittivity ``eps*`` of a Cole-Cole model (engineering sign, ``exp(+j w t)``).

    Parameters
    ----------
    params : ColeColeParams
    f_Hz : float or array_like, shape (nf,)
        Frequencies in Hz, > 0.

    Returns
    -------
    complex or ndarray of complex, shape (nf,)
        ``eps' - j eps''``; the imaginary part is <= 0 for a lossy medium.
    """
    f = np.asarray(f_Hz, dtype=float)
    if np.any(~(f > 0)):
        raise ValueError(f"Cole-Cole model: frequencies must be > 0 Hz, got {f_Hz!r}")
    w = 2.0 * np.pi * f
    eps = np.full(f.shape, params.eps_inf, dtype=complex)
    for d_eps, tau, alpha in params.poles:
        if d_eps:
            eps = eps + d_eps / (1.0 + (1j * w * tau) ** (1.0 - alpha))
    eps = eps + params.sigma_i_S_per_m / (1j * w * EPS0)
    return eps[()] if eps.ndim == 0 else eps


def permittivity2conductivity(eps_complex, f_Hz):
    """Total conductivity ``sigma = -Im(eps*) w eps0`` in S/m, same shape as the inputs."""
    return -np.imag(eps_complex) * 2.0 * np.pi * np.asarray(f_Hz, dtype=float) * EPS0


@dataclass(frozen=True)
class GabrielTissue:
    """One entry of the built-in tissue table (``data/tissues.json``)."""

    name: str
    label: str
    model: ColeColeParams
    density_kg_m3: float


@lru_cache(maxsize=1)
def _table() -> dict:
    text = resources.files("bodysweep.geometry").joinpath("data/tissues.json").read_text()
    return json.loads(text)


@lru_cache(maxsize=1)
def builtin_tissues() -> dict[str, GabrielTissue]:
    """All built-in dispersive tissues, keyed by name (``skin_dry``, ``muscle``, ...)."""
    out = {}
    for name, t in _table()["tissues"].items():
        poles = tuple((d, tau * unit, a) for (d, tau, a), unit in zip(t["poles"], _TAU_UNITS_S))
        out[name] = GabrielTissue(name=name, label=t["label"],
                                  model=ColeColeParams(t["eps_inf"], poles, t["sigma_i"]),
                                  density_kg_m3=float(t["density"]))
    return out


def tissue_citation() -> str:
    """Where the built-in Cole-Cole parameters come from."""
    return _table()["citation"]


def _builtin(name: str) -> GabrielTissue:
    try:
        return builtin_tissues()[name]
    except KeyError:
        raise ValueError(f"unknown tissue {name!r}; built-in tissues: {sorted(builtin_tissues())}") from None


def tissue_properties(name: str, f_Hz):
    """Relative permittivity and conductivity of a built-in tissue.

    Parameters
    ----------
    name : str
        A built-in tissue name (see :func:`builtin_tissues`).
    f_Hz : float or array_like, shape (nf,)

    Returns
    -------
    eps_r, sigma_S_per_m : float or ndarray, shape (nf,)
    """
    eps = cole_cole_permittivity(_builtin(name).model, f_Hz)
    return np.real(eps)[()], permittivity2conductivity(eps, f_Hz)[()]


def tissue_density(name: str) -> float:
    """Mass density (kg/m^3) of a built-in tissue; source in ``data/tissues.json``."""
    return _builtin(name).density_kg_m3


def builtin_material(name: str, f_Hz: float) -> Material:
    """A built-in name (a Gabriel tissue or ``"pec"``) as a Material at ``f_Hz``."""
    if name == PEC_NAME:
        return Material(name=PEC_NAME, kind="pec")
    eps_r, sigma = tissue_properties(name, float(f_Hz))
    return Material(name=name, kind="dielectric", eps_r=float(eps_r), sigma_S_per_m=float(sigma),
                    density_kg_m3=tissue_density(name), is_tissue=True)


def is_builtin(name: str) -> bool:
    return name == PEC_NAME or name in builtin_tissues()


def _positive(part: str, key: str, v: float, allow_zero: bool = False) -> float:
    v = float(v)
    ok = v >= 0 if allow_zero else v > 0
    if not ok or not np.isfinite(v):
        raise ValueError(f"{part}: {key} must be {'>= 0' if allow_zero else '> 0'}, got {v}")
    return v


# --------------------------------------------------------------------------- user-defined materials
@dataclass(frozen=True)
class FixedTissue:
    """A tissue with fixed properties (the same at every frequency)."""

    name: str
    eps_r: float
    sigma_S_per_m: float
    density_kg_m3: float

    type = "fixed_tissue"

    def __post_init__(self):
        part = f"tissue {self.name!r}"
        if not self.name:
            raise ValueError("fixed tissue: name must not be empty")
        if not float(self.eps_r) >= 1.0:
            raise ValueError(f"{part}: eps_r must be >= 1, got {self.eps_r}")
        object.__setattr__(self, "eps_r", float(self.eps_r))
        object.__setattr__(self, "sigma_S_per_m", _positive(part, "sigma_S_per_m", self.sigma_S_per_m, True))
        object.__setattr__(self, "density_kg_m3", _positive(part, "density_kg_m3", self.density_kg_m3))

    def to_material(self, f_Hz: float) -> Material:
        return Material(self.name, "dielectric", self.eps_r, self.sigma_S_per_m, self.density_kg_m3, True)

    def to_dict(self) -> dict:
        return {"type": self.type, "name": self.name, "eps_r": self.eps_r,
                "sigma_S_per_m": self.sigma_S_per_m, "density_kg_m3": self.density_kg_m3}


@dataclass(frozen=True)
class TissueLiquid:
    """A tissue-simulating liquid given at a few frequencies, interpolated linearly in between.

    Parameters
    ----------
    frequencies_Hz, eps_r, sigma_S_per_m : tuple of float, shape (n,)
        Strictly increasing frequencies and the liquid's values there. Asking for a frequency outside
        ``[frequencies_Hz[0], frequencies_Hz[-1]]`` is an error (no extrapolation).
    density_kg_m3 : float
    """

    name: str
    frequencies_Hz: tuple[float, ...]
    eps_r: tuple[float, ...]
    sigma_S_per_m: tuple[float, ...]
    density_kg_m3: float = 1000.0

    type = "liquid"

    def __post_init__(self):
        part = f"liquid {self.name!r}"
        if not self.name:
            raise ValueError("liquid: name must not be empty")
        f = tuple(float(x) for x in self.frequencies_Hz)
        e = tuple(float(x) for x in self.eps_r)
        s = tuple(float(x) for x in self.sigma_S_per_m)
        if len(f) < 1 or len(e) != len(f) or len(s) != len(f):
            raise ValueError(f"{part}: frequencies_Hz, eps_r and sigma_S_per_m need the same length >= 1, "
                             f"got {len(f)}, {len(e)}, {len(s)}")
        if any(b <= a for a, b in zip(f, f[1:])) or f[0] <= 0:
            raise ValueError(f"{part}: frequencies_Hz must be > 0 and strictly increasing, got {list(f)}")
        if min(e) < 1.0:
            raise ValueError(f"{part}: every eps_r must be >= 1, got {list(e)}")
        if min(s) < 0.0:
            raise ValueError(f"{part}: every sigma_S_per_m must be >= 0, got {list(s)}")
        object.__setattr__(self, "frequencies_Hz", f)
        object.__setattr__(self, "eps_r", e)
        object.__setattr__(self, "sigma_S_per_m", s)
        object.__setattr__(self, "density_kg_m3", _positive(part, "density_kg_m3", self.density_kg_m3))

    def properties(self, f_Hz: float) -> tuple[float, float]:
        """(eps_r, sigma) at ``f_Hz`` by linear interpolation between the given frequencies."""
        f = float(f_Hz)
        lo, hi = self.frequencies_Hz[0], self.frequencies_Hz[-1]
        # a relative tolerance so that 433 MHz given as 433e6 or 433 * 1e6 both hit an end point
        if f < lo * (1 - 1e-9) or f > hi * (1 + 1e-9):
            raise ValueError(f"liquid {self.name!r}: no data at {f:g} Hz; given from {lo:g} to {hi:g} Hz "
                             "(no extrapolation)")
        f = min(max(f, lo), hi)
        return (float(np.interp(f, self.frequencies_Hz, self.eps_r)),
                float(np.interp(f, self.frequencies_Hz, self.sigma_S_per_m)))

    def to_material(self, f_Hz: float) -> Material:
        eps_r, sigma = self.properties(f_Hz)
        return Material(self.name, "dielectric", eps_r, sigma, self.density_kg_m3, True)

    def to_dict(self) -> dict:
        return {"type": self.type, "name": self.name, "frequencies_Hz": list(self.frequencies_Hz),
                "eps_r": list(self.eps_r), "sigma_S_per_m": list(self.sigma_S_per_m),
                "density_kg_m3": self.density_kg_m3}


@dataclass(frozen=True)
class Dielectric:
    """A non-tissue dielectric (casing, capsule, shell): ``eps_r`` with a loss tangent OR a conductivity.

    ``sigma = w eps0 eps_r tan(delta)`` when the loss tangent is given. Carries no SAR.
    """

    name: str
    eps_r: float
    loss_tangent: float | None = None
    sigma_S_per_m: float | None = None

    type = "dielectric"

    def __post_init__(self):
        part = f"dielectric {self.name!r}"
        if not self.name:
            raise ValueError("dielectric: name must not be empty")
        if not float(self.eps_r) >= 1.0:
            raise ValueError(f"{part}: eps_r must be >= 1, got {self.eps_r}")
        object.__setattr__(self, "eps_r", float(self.eps_r))
        if self.loss_tangent is not None and self.sigma_S_per_m is not None:
            raise ValueError(f"{part}: give loss_tangent or sigma_S_per_m, not both "
                             f"(got {self.loss_tangent} and {self.sigma_S_per_m})")
        if self.loss_tangent is not None:
            object.__setattr__(self, "loss_tangent", _positive(part, "loss_tangent", self.loss_tangent, True))
        if self.sigma_S_per_m is not None:
            object.__setattr__(self, "sigma_S_per_m", _positive(part, "sigma_S_per_m", self.sigma_S_per_m, True))

    def conductivity(self, f_Hz: float) -> float:
        if self.loss_tangent is not None:
            return 2.0 * np.pi * float(f_Hz) * EPS0 * self.eps_r * self.loss_tangent
        return self.sigma_S_per_m or 0.0

    def to_material(self, f_Hz: float) -> Material:
        return Material(self.name, "dielectric", self.eps_r, float(self.conductivity(f_Hz)), 0.0, False)

    def to_dict(self) -> dict:
        d = {"type": self.type, "name": self.name, "eps_r": self.eps_r}
        if self.loss_tangent is not None:
            d["loss_tangent"] = self.loss_tangent
        if self.sigma_S_per_m is not None:
            d["sigma_S_per_m"] = self.sigma_S_per_m
        return d

    def to_inline_dict(self) -> dict:
        """Like :meth:`to_dict` without ``type`` and ``name`` (for casings written inside their part)."""
        d = self.to_dict()
        del d["type"], d["name"]
        return d


@dataclass(frozen=True)
class Conductor:
    """A metal: finite conductivity ``sigma_S_per_m``, or a perfect conductor when it is None."""

    name: str
    sigma_S_per_m: float | None = None

    type = "conductor"

    def __post_init__(self):
        if not self.name:
            raise ValueError("conductor: name must not be empty")
        if self.sigma_S_per_m is not None:
            object.__setattr__(self, "sigma_S_per_m",
                               _positive(f"conductor {self.name!r}", "sigma_S_per_m", self.sigma_S_per_m))

    def to_material(self, f_Hz: float) -> Material:
        if self.sigma_S_per_m is None:
            return Material(self.name, "pec")
        return Material(self.name, "conductor", 1.0, self.sigma_S_per_m, 0.0, False)

    def to_dict(self) -> dict:
        d: dict = {"type": self.type, "name": self.name}
        if self.sigma_S_per_m is not None:
            d["sigma_S_per_m"] = self.sigma_S_per_m
        return d


MaterialSpec = FixedTissue | TissueLiquid | Dielectric | Conductor
MATERIAL_TYPES: dict[str, type] = {c.type: c for c in (FixedTissue, TissueLiquid, Dielectric, Conductor)}


def material_spec_from_dict(d: Mapping) -> MaterialSpec:
    """Inverse of ``spec.to_dict()``; the ``type`` key picks the kind."""
    d = dict(d)
    kind = d.pop("type", None)
    try:
        cls = MATERIAL_TYPES[kind]
    except KeyError:
        raise ValueError(f"material {d.get('name', '?')!r}: type must be one of {sorted(MATERIAL_TYPES)}, "
                         f"got {kind!r}") from None
    try:
        return cls(**d)
    except TypeError as e:
        raise ValueError(f"material {d.get('name', '?')!r} ({kind}): {e}") from None


def resolve_material(name: str, f_Hz: float, user: Mapping[str, MaterialSpec] | None = None) -> Material:
    """A material name -> Material at ``f_Hz``: user-declared names first, then built-ins."""
    if user and name in user:
        return user[name].to_material(f_Hz)
    if is_builtin(name):
        return builtin_material(name, f_Hz)
    declared = sorted(user) if user else []
    raise ValueError(f"material {name!r} is neither declared in the scene's materials {declared} "
                     f"nor built in ({PEC_NAME!r}, {sorted(builtin_tissues())})")
