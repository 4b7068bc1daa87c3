"""Port signals to S-parameters: DFT, power waves, S-matrix assembly, accepted power, Touchstone.

Phasor convention
-----------------
Time-harmonic quantities are *peak* phasors with the engineering sign convention
``v(t) = Re{V exp(+j 2 pi f t)}``. The DFT below therefore uses the kernel ``exp(-j 2 pi f t)``,
and average power is ``P = 0.5 Re{V conj(I)}``.

Port convention
---------------
``I`` is the current flowing *into* the port (into the network) through the port's terminals,
``V`` the voltage across the port. With this, ``0.5 Re{V conj(I)} > 0`` means the network absorbs power.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

__all__ = [
    "dft",
    "power_waves",
    "smatrix_from_waves",
    "accepted_power",
    "passivity",
    "reciprocity",
    "write_touchstone",
]

# frequencies processed per block in :func:`dft` (bounds the (nf, nt) kernel memory)
_DFT_BLOCK_ELEMENTS = 4_000_000


def dft(signal, t_s, f_Hz, *, one_sided: bool = False, rtol_dt: float = 1e-6) -> np.ndarray:
    """Fourier transform of a uniformly sampled time signal at arbitrary frequencies.

    Computes the rectangle-rule approximation of the continuous Fourier integral

    ``X(f) = sum_n x(t_n) exp(-j 2 pi f t_n) dt``

    i.e. the kernel sign is negative (engineering convention ``exp(+j w t)`` for phasors). The
    absolute time ``t_n`` (not ``n dt``) is used, so a delayed start of the record is accounted for.

    Parameters
    ----------
    signal : array_like, shape (..., nt)
        Real or complex samples; the last axis is time.
    t_s : array_like, shape (nt,)
        Sample times in seconds, uniformly spaced (checked to ``rtol_dt``).
    f_Hz : array_like, shape (nf,) or scalar
        Frequencies in hertz.
    one_sided : bool, optional
        If true, multiply by 2 (the single-sided spectrum used when a real transient is read as
        the peak phasor of its positive-frequency part). Ratios (S-parameters) do not depend on it;
        absolute powers do, so use the same choice for every signal that is combined.
    rtol_dt : float, optional
        Allowed relative deviation of the time steps from their mean.

    Returns
    -------
    numpy.ndarray, complex, shape (..., nf)
    """
    x = np.asarray(signal)
    t = np.asarray(t_s, dtype=float)
    f = np.atleast_1d(np.asarray(f_Hz, dtype=float))
    if t.ndim != 1 or t.size < 2:
        raise ValueError(f"dft: t_s must be a 1-D array of at least 2 sample times, got shape {t.shape}")
    if x.shape[-1] != t.size:
        raise ValueError(
            f"dft: signal has {x.shape[-1]} samples on its last axis but t_s has {t.size}; they must match"
        )
    steps = np.diff(t)
    dt = float(steps.mean())
    if not dt > 0:
        raise ValueError(f"dft: t_s must increase, mean time step is {dt!r} s")
    dev = float(np.max(np.abs(steps - dt))) / dt
    if dev > rtol_dt:
        raise ValueError(
            f"dft: time steps must be uniform; largest relative deviation {dev:.3g} exceeds {rtol_dt:g}"
        )
    lead = x.shape[:-1]
    x2 = x.reshape(-1, t.size)
    out = np.empty((x2.shape[0], f.size), dtype=complex)
    block = max(1, _DFT_BLOCK_ELEMENTS // t.size)
    for i0 in range(0, f.size, block):
        fb = f[i0 : i0 + block]
        kernel = np.exp(-2j * np.pi * np.outer(t, fb))  # (nt, nfb)
        out[:, i0 : i0 + block] = x2 @ kernel
    out *= dt * (2.0 if one_sided else 1.0)
    return out.reshape(lead + (f.size,))


def power_waves(V, I, z0_ohm=50.0):
    """Power waves of Kurokawa (1965) at a port.

    ``a = (V + Z0 I) / (2 sqrt(Re Z0))``, ``b = (V - conj(Z0) I) / (2 sqrt(Re Z0))``

    with ``I`` the current flowing *into* the port. For real ``Z0`` these are the usual incident
    and reflected waves, with ``|a|^2/2`` the incident and ``|b|^2/2`` the reflected power for
    peak phasors (``0.5(|a|^2 - |b|^2) = 0.5 Re{V conj(I)}``).

    Parameters
    ----------
    V, I : array_like, complex, broadcastable (e.g. (n_exc, n_ports, nf))
        Peak voltage and current phasors.
    z0_ohm : complex or array_like, broadcastable to V
        Reference impedance; its real part must be positive.

    Returns
    -------
    a, b : numpy.ndarray, complex, broadcast shape of V, I, z0_ohm
        Units sqrt(W) (peak).
    """
    V = np.asarray(V, dtype=complex)
    I = np.asarray(I, dtype=complex)
    z0 = np.asarray(z0_ohm, dtype=complex)
    if np.any(z0.real <= 0):
        raise ValueError(f"power_waves: reference impedance must have Re(Z0) > 0 ohm, got {z0_ohm!r}")
    k = 1.0 / (2.0 * np.sqrt(z0.real))
    a = (V + z0 * I) * k
    b = (V - np.conj(z0) * I) * k
    return a, b


def smatrix_from_waves(a, b, exc_ports=None, *, rcond: float = 1e-12) -> np.ndarray:
    """Scattering matrix from the port waves of one or more excitations.

    Parameters
    ----------
    a, b : array_like, complex, shape (n_exc, n_ports, nf)
        Incident and reflected waves at every port, for each excitation ``k`` (one simulation
        in which port ``exc_ports[k]`` was driven).
    exc_ports : sequence of int, optional
        Driven port of each excitation (0-based); default ``0, 1, ..., n_exc-1``.
    rcond : float, optional
        Excitation matrices whose reciprocal condition number is below this give NaN.

    Returns
    -------
    S : numpy.ndarray, complex, shape (nf, n_ports, n_ports)

    Notes
    -----
    * **All ports excited** (every port appears in ``exc_ports``): with the wave matrices
      ``A[:, k] = a[k]`` and ``B[:, k] = b[k]`` (columns = excitations), ``B = S A`` holds for each
      frequency, so ``S = B A^-1`` (least squares if there are more excitations than ports). This
      is exact whatever the non-driven ports reflect, because their incident waves enter ``A``.
    * **Only some ports excited**: for each driven port ``j`` the column ``S[:, :, j]`` is filled
      with ``b_i / a_j``. This assumes the non-driven ports are matched-terminated, i.e. their
      incident wave is ~0; for a lumped port terminated in a resistance equal to ``Z0`` the load
      reflects nothing, so ``a_i = 0`` and ``S_ij = b_i / a_j`` exactly. The columns of ports
      that were never driven are NaN. (If the same port was driven more than once, the last
      excitation wins.)
    """
    a = np.asarray(a, dtype=complex)
    b = np.asarray(b, dtype=complex)
    if a.shape != b.shape or a.ndim != 3:
        raise ValueError(
            f"smatrix_from_waves: a and b must both have shape (n_exc, n_ports, nf), got {a.shape} and {b.shape}"
        )
    n_exc, n_ports, nf = a.shape
    exc = list(range(n_exc)) if exc_ports is None else [int(p) for p in exc_ports]
    if len(exc) != n_exc:
        raise ValueError(
            f"smatrix_from_waves: exc_ports has {len(exc)} entries but there are {n_exc} excitations"
        )
    bad = [p for p in exc if not 0 <= p < n_ports]
    if bad:
        raise ValueError(f"smatrix_from_waves: exc_ports {bad} outside 0..{n_ports - 1}")
    S = np.full((nf, n_ports, n_ports), np.nan + 0j, dtype=complex)
    if set(exc) == set(range(n_ports)):
        A = np.transpose(a, (2, 1, 0))  # (nf, n_ports, n_exc): columns = excitations
        B = np.transpose(b, (2, 1, 0))
        for fi in range(nf):
            sv = np.linalg.svd(A[fi], compute_uv=False)
            if sv[-1] <= rcond * sv[0]:
                continue
            # S A = B  <=>  A^T S^T = B^T
            S[fi] = np.linalg.lstsq(A[fi].T, B[fi].T, rcond=None)[0].T
        return S
    for k, j in enumerate(exc):
        aj = a[k, j, :]
        with np.errstate(divide="ignore", invalid="ignore"):
            col = b[k, :, :] / aj[None, :]  # (n_ports, nf)
        col[:, aj == 0] = np.nan
        S[:, :, j] = col.T
    return S


def accepted_power(V, I) -> np.ndarray:
    """Power accepted by a port, ``0.5 Re{V conj(I)}`` in watts.

    Parameters
    ----------
    V, I : array_like, complex, broadcastable (e.g. (nf,))
        *Peak* voltage and current phasors, ``I`` flowing into the port. (For RMS phasors the
        factor 0.5 would be 1.)

    Returns
    -------
    numpy.ndarray, float, broadcast shape
    """
    return 0.5 * np.real(np.asarray(V, dtype=complex) * np.conj(np.asarray(I, dtype=complex)))


def _check_S(S, what: str) -> np.ndarray:
    S = np.asarray(S, dtype=complex)
    if S.ndim == 2:
        S = S[None]
    if S.ndim != 3 or S.shape[1] != S.shape[2]:
        raise ValueError(f"{what}: S must have shape (nf, n, n), got {np.shape(S)}")
    return S


def passivity(S) -> np.ndarray:
    """Largest column power sum ``max_j sum_i |S_ij|^2`` per frequency.

    It is the fraction of the incident power that leaves the network when a single port is
    driven (others matched), maximised over the driven port; a passive network gives <= 1.
    (Necessary, not sufficient: full passivity needs all eigenvalues of ``S^H S`` <= 1.)
    Columns containing NaN (never excited) are ignored; all-NaN gives NaN.

    Parameters
    ----------
    S : array_like, complex, shape (nf, n, n)

    Returns
    -------
    numpy.ndarray, float, shape (nf,)
    """
    S = _check_S(S, "passivity")
    col = np.sum(np.abs(S) ** 2, axis=1)  # (nf, n) NaN where any entry NaN
    out = np.full(S.shape[0], np.nan)
    ok = np.isfinite(col)
    for fi in range(S.shape[0]):
        if ok[fi].any():
            out[fi] = col[fi, ok[fi]].max()
    return out


def reciprocity(S) -> np.ndarray:
    """Deviation from reciprocity, ``|S21 - S12|`` for a 2-port (``max |S - S^T|`` for n ports).

    Parameters
    ----------
    S : array_like, complex, shape (nf, n, n)

    Returns
    -------
    numpy.ndarray, float, shape (nf,)
    """
    S = _check_S(S, "reciprocity")
    d = np.abs(S - np.transpose(S, (0, 2, 1)))
    return d.reshape(S.shape[0], -1).max(axis=1)


def write_touchstone(path, f_Hz, S, z0_ohm=50.0, comments=(), *, form: str = "ri") -> Path:
    """Write S-parameters as a Touchstone (version 1) file.

    The file is written to a temporary name in the target folder and renamed into place, with the
    same file mode as every other output (:func:`bodysweep.workflow.atomic.atomic_path`).

    Parameters
    ----------
    path : str or Path
        Target file. The extension is replaced by the Touchstone one (``.s<n>p``).
    f_Hz : array_like, shape (nf,)
        Frequencies in hertz.
    S : array_like, complex, shape (nf, n, n)
        Every entry finite (a NaN is refused: standard readers reject it).
    z0_ohm : float, optional
        Real reference impedance of all ports.
    comments : str or sequence of str, optional
        Comment lines written at the top (each prefixed with ``!``).
    form : {"ri", "ma", "db"}, optional
        Number format (real/imaginary, magnitude/angle, dB/angle).

    Returns
    -------
    Path
        The written file.

    Notes
    -----
    Touchstone File Format Specification, version 1.1 (IBIS Open Forum, 2002): comment lines start
    with ``!``; the option line ``# HZ S RI R 50``; one data line per frequency, the frequency then the
    entries as pairs, for two ports in the order S11 S21 S12 S22 (the specification's exception),
    for more ports row by row at most four pairs to a line. Numbers are written with 17 significant
    digits (read back exactly). Written by bodysweep itself, so that a finish job need not import
    scikit-rf (and scipy), which cost more start-up time than the rest of the job's imports.
    """
    S = _check_S(S, "write_touchstone")
    f = np.atleast_1d(np.asarray(f_Hz, dtype=float))
    if f.shape != (S.shape[0],):
        raise ValueError(f"write_touchstone: f_Hz has shape {f.shape}, S has {S.shape[0]} frequencies")
    z0 = complex(z0_ohm)
    if z0.imag != 0 or z0.real <= 0:
        raise ValueError(f"write_touchstone: z0_ohm must be real and positive, got {z0_ohm!r}")
    forms = {"ri": "RI", "ma": "MA", "db": "DB"}
    if form not in forms:
        raise ValueError(f"write_touchstone: form must be one of {sorted(forms)}, got {form!r}")
    if not np.all(np.isfinite(S)):
        raise ValueError("write_touchstone: S holds NaN or infinite entries; write only what was computed "
                         "(many Touchstone readers refuse nan)")
    n = S.shape[1]
    target = Path(path).with_suffix(f".s{n}p")
    if isinstance(comments, str):
        comments = [comments]
    lines = []
    for c in comments:
        lines.extend("!" + ln for ln in (str(c).splitlines() or [""]))
    lines.append(f"# HZ S {forms[form]} R {format(z0.real, '.17g')}")
    # entry order: two ports column by column (S11 S21 S12 S22), otherwise row by row
    order = [(i, j) for j in range(n) for i in range(n)] if n == 2 else [(i, j) for i in range(n) for j in range(n)]
    num = lambda x: format(float(x), ".17g")  # noqa: E731
    for k in range(f.size):
        pairs = []
        for i, j in order:
            v = complex(S[k, i, j])
            if form == "ri":
                a, b = v.real, v.imag
            else:
                mag = abs(v)
                a = mag if form == "ma" else (20 * np.log10(mag) if mag > 0 else -400.0)
                b = float(np.degrees(np.angle(v)))
            pairs.append(f"{num(a)} {num(b)}")
        per_line = len(pairs) if n <= 2 else 4
        chunks = [pairs[q:q + per_line] for q in range(0, len(pairs), per_line)]
        lines.append(num(f[k]) + " " + " ".join(chunks[0]))
        lines += ["  " + " ".join(c) for c in chunks[1:]]
    from bodysweep.workflow.atomic import atomic_path

    with atomic_path(target) as tmp:
        with open(tmp, "w", encoding="ISO-8859-1", newline="\n") as fh:
            fh.write("\n".join(lines) + "\n")
    return target
