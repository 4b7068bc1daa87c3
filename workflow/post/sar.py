"""Local specific absorption rate (SAR) on a rectilinear, possibly non-uniform grid.

Grid convention (the raw SAR dump of the solver): quantities are given per *cell*, shape
``(nx, ny, nz)``; the cell edges are ``x`` (nx+1,), ``y`` (ny+1,), ``z`` (nz+1,) in metres,
strictly increasing. Density ``rho == 0`` marks a non-tissue cell (air, metal, background).

Fields are *peak* phasors (``e(t) = Re{E exp(j w t)}``), so the time-averaged local SAR is
``sigma |E|^2 / (2 rho)`` (IEC/IEEE 62704-1:2017, definition of SAR with peak field amplitude;
with RMS fields the factor 1/2 disappears).
"""
from __future__ import annotations

import numpy as np

__all__ = ["check_grid", "cell_volumes", "cell_centres", "local_sar", "absorbed_power", "tissue_mass"]


def check_grid(x, y, z, shape=None):
    """Validate cell edges and return them as float arrays.

    Parameters
    ----------
    x, y, z : array_like, shapes (nx+1,), (ny+1,), (nz+1,)
        Strictly increasing cell edges in metres.
    shape : tuple of int, optional
        Expected cell array shape ``(nx, ny, nz)``.

    Returns
    -------
    tuple of numpy.ndarray
    """
    out = []
    for name, e in zip("xyz", (x, y, z)):
        e = np.asarray(e, dtype=float)
        if e.ndim != 1 or e.size < 2:
            raise ValueError(f"grid: {name} edges must be a 1-D array of at least 2 values, got shape {e.shape}")
        d = np.diff(e)
        if not np.all(d > 0):
            i = int(np.argmin(d))
            raise ValueError(
                f"grid: {name} edges must increase strictly; edge {i + 1} ({e[i + 1]!r} m) is not above {e[i]!r} m"
            )
        out.append(e)
    cells = tuple(e.size - 1 for e in out)
    if shape is not None and tuple(shape) != cells:
        raise ValueError(f"grid: arrays have shape {tuple(shape)} but the edges describe {cells} cells")
    return tuple(out)


def cell_volumes(x, y, z) -> np.ndarray:
    """Cell volumes ``dx dy dz`` in m^3, shape (nx, ny, nz)."""
    x, y, z = check_grid(x, y, z)
    return np.diff(x)[:, None, None] * np.diff(y)[None, :, None] * np.diff(z)[None, None, :]


def cell_centres(x, y, z):
    """Cell centre coordinates per axis, shapes (nx,), (ny,), (nz,) in metres."""
    x, y, z = check_grid(x, y, z)
    return 0.5 * (x[1:] + x[:-1]), 0.5 * (y[1:] + y[:-1]), 0.5 * (z[1:] + z[:-1])


def local_sar(E, sigma, rho) -> np.ndarray:
    """Local SAR ``sigma |E|^2 / (2 rho)`` in W/kg; 0 where ``rho == 0``.

    Parameters
    ----------
    E : array_like
        Either the complex peak-phasor field, shape (3, nx, ny, nz) (V/m), or already
        ``|E|^2 = |Ex|^2 + |Ey|^2 + |Ez|^2`` of peak phasors, shape (nx, ny, nz) (V^2/m^2).
    sigma : array_like, shape (nx, ny, nz)
        Conductivity in S/m at the case frequency.
    rho : array_like, shape (nx, ny, nz)
        Mass density in kg/m^3 (0 for non-tissue cells).

    Returns
    -------
    numpy.ndarray, float, shape (nx, ny, nz)
    """
    E = np.asarray(E)
    if E.ndim == 4:
        if E.shape[0] != 3:
            raise ValueError(f"local_sar: a field array must have shape (3, nx, ny, nz), got {E.shape}")
        e2 = np.sum(np.abs(E) ** 2, axis=0)
    elif E.ndim == 3:
        if np.iscomplexobj(E) or np.any(E < 0):
            raise ValueError("local_sar: a 3-D E argument is |E|^2 and must be real and non-negative")
        e2 = E.astype(float)
    else:
        raise ValueError(f"local_sar: E must be (3, nx, ny, nz) or |E|^2 (nx, ny, nz), got shape {E.shape}")
    sigma = np.asarray(sigma, dtype=float)
    rho = np.asarray(rho, dtype=float)
    if sigma.shape != e2.shape or rho.shape != e2.shape:
        raise ValueError(
            f"local_sar: field, sigma and rho must share shape {e2.shape}, got {sigma.shape} and {rho.shape}"
        )
    if np.any(rho < 0) or np.any(sigma < 0):
        raise ValueError("local_sar: sigma and rho must be non-negative")
    out = np.zeros(e2.shape)
    t = rho > 0
    out[t] = sigma[t] * e2[t] / (2.0 * rho[t])
    return out


def tissue_mass(rho, x, y, z) -> float:
    """Total mass ``sum rho dV`` in kg."""
    rho = np.asarray(rho, dtype=float)
    return float(np.sum(rho * cell_volumes(*check_grid(x, y, z, rho.shape))))


def absorbed_power(sar, rho, x, y, z) -> float:
    """Total power absorbed in tissue, ``sum SAR rho dV`` in W."""
    sar = np.asarray(sar, dtype=float)
    rho = np.asarray(rho, dtype=float)
    return float(np.sum(sar * rho * cell_volumes(*check_grid(x, y, z, rho.shape))))
