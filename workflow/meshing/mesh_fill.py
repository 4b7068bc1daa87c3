"""Filling the gaps between fixed mesh lines: the graded size field, equidistributed lines, grading repair.

Steps 4 and 5 of :mod:`.mesh` (its docstring tells the whole story): each gap between neighbouring
fixed lines receives lines so that no cell exceeds the size envelope (the lower envelope of the size
limits, relaxed away from each limit no faster than the grading allows), then any neighbour pair still
above ``max_growth_ratio`` is repaired by re-spacing cells on the larger side. Pure numpy; metres.
"""
from __future__ import annotations

import math

import numpy as np

#: size-field grading slope, as a fraction of ln(max_growth_ratio) (headroom for rounding)
_GRADING_SLOPE_FRACTION = 0.5


def _short_gap_cells(ratio: float) -> int:
    """Gaps between fixed lines needing at most this many cells get uniform cells (tighter ratio: more)."""
    return max(3, int(np.ceil(2.0 / np.log(ratio))))


def size_envelope(x: np.ndarray, limits: np.ndarray, slope: float) -> np.ndarray:
    """Largest allowed cell size at ``x``: the lower envelope of interval limits, graded by ``slope``.

    Parameters
    ----------
    x : ndarray, shape (m,)
        Positions (metres).
    limits : ndarray, shape (k, 3)
        Rows ``(lo, hi, h_max)``: cells inside ``[lo, hi]`` are at most ``h_max``.
    slope : float
        Outside an interval the limit relaxes as ``h_max + slope * distance``.

    Returns
    -------
    ndarray, shape (m,)
    """
    x = np.asarray(x, float)[:, None]
    lo, hi, h = limits[:, 0][None, :], limits[:, 1][None, :], limits[:, 2][None, :]
    dist = np.maximum(0.0, np.maximum(lo - x, x - hi))
    return np.min(h + slope * dist, axis=1)


def _samples(a: float, b: float, limits: np.ndarray, slope: float) -> int:
    """Number of sample points over ``[a, b]`` that resolve the size envelope (8 per smallest cell)."""
    return _sample_count(b - a, float(size_envelope(np.array([a, b]), limits, slope).min()),
                         float(limits[:, 2].min()), slope)


def _sample_count(span: float, s_ends: float, h_min: float, slope: float) -> int:
    """:func:`_samples` from the envelope's smaller end value ``s_ends`` and the finest limit ``h_min``."""
    s_min = min(s_ends, h_min + slope * span)
    return min(max(math.ceil(8 * span / max(s_min, 1e-12)), 17), 20001)


def equidistribute(a: float, b: float, limits: np.ndarray, slope: float,
                   sampled: tuple[np.ndarray, np.ndarray] | None = None) -> np.ndarray:
    """Interior lines between fixed lines ``a < b`` so that no cell exceeds the size envelope.

    The number of cells is the integral of ``1 / s(x)`` rounded up; lines sit at equal steps of that
    integral, so cells follow the shape of the size field ``s``. Returns shape ``(n - 1,)``.
    ``sampled`` is ``(xs, s(xs))`` on the sample points of :func:`_samples` when already known.
    """
    span = b - a
    if sampled is None:
        xs = np.linspace(a, b, _samples(a, b, limits, slope))
        w = 1.0 / size_envelope(xs, limits, slope)
    else:
        xs, w = sampled[0], 1.0 / sampled[1]
    dx = np.diff(xs)

    def cumulative(v):
        return np.concatenate([[0.0], np.cumsum(0.5 * (v[1:] + v[:-1]) * dx)])

    phi = cumulative(w)
    n = max(1, int(np.ceil(phi[-1] - 1e-9)))
    if n == 1:
        return np.empty(0)
    # the extra cells from rounding up go to the middle of the gap (a bump vanishing at both ends),
    # so the cells next to the fixed lines keep the size the envelope gives there, as the
    # neighbouring gap's cells do
    bump = np.sin(np.pi * (xs - a) / span) ** 2 * w
    extra = n - phi[-1]
    pb = cumulative(bump)
    if extra > 0 and pb[-1] > 0:
        phi = phi + extra / pb[-1] * pb
    targets = np.arange(1, n) * phi[-1] / n
    return np.interp(targets, phi, xs)


def repair_grading(lines: np.ndarray, ratio: float, fixed: np.ndarray | None = None,
                   max_iter: int = 20_000) -> np.ndarray:
    """Re-space cells until no two neighbours differ by more than ``ratio``; ``fixed`` lines never move.

    For each violating pair (finest first) the cells on the side of the larger one are replaced,
    over the shortest window that works, by a sequence grading geometrically from the small cell
    to the cell after the window. Windows never cross a fixed line.

    Parameters
    ----------
    lines : ndarray, shape (n,)
        Strictly increasing positions (fixed lines included).
    ratio : float
        Allowed neighbour ratio (> 1).
    fixed : ndarray, shape (k,), optional
        Positions that must stay (default: the two end lines).

    Returns
    -------
    ndarray, shape (n',)
    """
    x = np.asarray(lines, float).copy()
    fx = np.asarray([x[0], x[-1]] if fixed is None else fixed, float)
    tol = 1.0 + 1e-9
    for _ in range(max_iter):
        h = np.diff(x)
        if len(h) < 2:
            return x
        up = h[1:] / h[:-1]
        bad = np.nonzero((up > ratio * tol) | (1.0 / up > ratio * tol))[0]
        if len(bad) == 0:
            return x
        small = np.minimum(h[bad], h[bad + 1])
        i = int(bad[np.argmin(small)])
        s_i, j = (i, i + 1) if h[i + 1] > h[i] else (i + 1, i)  # small cell, first cell of the window
        d = j - s_i
        is_fixed = np.isin(x, fx) | np.isclose(x[:, None], fx[None, :], rtol=0, atol=1e-15).any(axis=1)
        done = False
        for m in range(1, len(h)):
            last = j + (m - 1) * d
            if not 0 <= last < len(h):
                break
            window = [j + k * d for k in range(m)]
            total = float(h[window].sum())
            nxt = last + d
            h_to = float(h[nxt]) if 0 <= nxt < len(h) else None
            sizes = _graded_split(total, float(h[s_i]), h_to, ratio)
            if sizes is not None:
                face = x[j] if d > 0 else x[j + 1]
                inner = face + d * np.cumsum(sizes)[:-1]
                lo_i, hi_i = (j, last + 1) if d > 0 else (last, j + 1)
                x = np.sort(np.concatenate([x[: lo_i + 1], inner, x[hi_i:]]))
                done = True
                break
            # the window may not swallow a fixed line
            edge = last + 1 if d > 0 else last
            if is_fixed[edge]:
                break
        if not done:  # fall back: halve the larger cell, the next passes grade around it
            x = np.sort(np.append(x, 0.5 * (x[j] + x[j + 1])))
    raise RuntimeError("mesh grading repair did not converge")  # pragma: no cover


def _graded_split(total: float, h_from: float, h_to: float | None, ratio: float) -> np.ndarray | None:
    """Sizes, shape (n,), summing to ``total``, grading from a cell ``h_from`` to a cell ``h_to``.

    The sizes interpolate geometrically between the two neighbours (a missing ``h_to`` leaves the
    far end free); the fewest cells whose ratios to each other and to both neighbours stay within
    ``ratio`` are used. ``None`` if no such sequence exists.
    """
    for n in range(1, 2000):
        if h_to is None:
            rho = min(ratio, (total / h_from) ** (1.0 / n)) if n > 1 else ratio
            c = h_from * rho ** np.arange(1, n + 1)
        else:
            rho = (h_to / h_from) ** (1.0 / (n + 1))
            c = h_from * rho ** np.arange(1, n + 1)
        f = total / c.sum()
        c = c * f
        inner = np.all(np.maximum(c[1:] / c[:-1], c[:-1] / c[1:]) <= ratio * (1 + 1e-12)) if n > 1 else True
        ends = 1 / ratio <= c[0] / h_from <= ratio and (h_to is None or 1 / ratio <= h_to / c[-1] <= ratio)
        if inner and ends:
            return c
        if c.max() * ratio < h_from and (h_to is None or c.max() * ratio < h_to):
            break  # more cells only make them smaller
    return None


def cells_needed(a: float, b: float, limits: np.ndarray, slope: float) -> float:
    """Integral of ``1 / s(x)`` over ``[a, b]`` for the size envelope ``s`` (a fractional cell count)."""
    xs = np.linspace(a, b, _samples(a, b, limits, slope))
    return _integral(xs, size_envelope(xs, limits, slope))


def _integral(xs: np.ndarray, s: np.ndarray) -> float:
    w = 1.0 / s
    return float(np.sum(0.5 * (w[1:] + w[:-1]) * np.diff(xs)))


class _GapEnvelope:
    """The size envelope sampled over one gap between fixed lines, updated as limits are added.

    The envelope is a minimum over the limit rows, so folding in only the new rows gives the very
    same samples as evaluating all rows again (and the same cell count when none of them is lower).
    """

    def __init__(self, a: float, b: float):
        self.a, self.b = a, b
        self.xs = self.s = None
        self.s_max = 0.0
        self.rows = 0  # limit rows folded in
        self.cells = 0.0

    def cells_needed(self, limits: np.ndarray, slope: float, s_ends: float, h_min: float) -> float:
        """:func:`cells_needed` over the gap for ``limits`` (whose first rows are those seen before).

        ``s_ends`` is the smaller envelope value at the two ends, ``h_min`` the finest limit.
        """
        m = _sample_count(self.b - self.a, s_ends, h_min, slope)
        if self.xs is None or len(self.xs) != m:
            self.xs = np.linspace(self.a, self.b, m)
            self.s = size_envelope(self.xs, limits, slope)
            self.s_max = float(self.s.max())
            self.cells = _integral(self.xs, self.s)
        elif len(limits) > self.rows:
            new = limits[self.rows:]
            # lowest value the new rows take over the gap (rounding is monotonic, so no sample is lower)
            floor = new[:, 2] + slope * np.maximum(0.0, np.maximum(new[:, 0] - self.b, self.a - new[:, 1]))
            if float(floor.min()) < self.s_max:
                vals = size_envelope(self.xs, new, slope)
                if np.any(vals < self.s):
                    self.s = np.minimum(self.s, vals)
                    self.s_max = float(self.s.max())
                    self.cells = _integral(self.xs, self.s)
        self.rows = len(limits)
        return self.cells


def _axis_lines(fixed: list[tuple[float, int, str]], limits: np.ndarray, ratio: float) -> np.ndarray:
    pos = np.array([p for p, _, _ in fixed])
    slope = _GRADING_SLOPE_FRACTION * np.log(ratio)
    gaps = np.diff(pos)
    # each gap between fixed lines is also a size limit, so its neighbourhood grades from it
    lim = np.vstack([limits, np.column_stack([pos[:-1], pos[1:], gaps])])
    # short gaps (few cells) cannot follow the size field after rounding the cell count up; give
    # them uniform cells and make that size a limit too, so that the neighbours grade from it
    cap = np.full(len(gaps), np.inf)
    short = _short_gap_cells(ratio)
    envelopes = [_GapEnvelope(a, b) for a, b in zip(pos[:-1], pos[1:])]
    ends = size_envelope(pos, lim, slope)  # the envelope at the fixed lines, kept current as limits come
    h_min = float(lim[:, 2].min())
    for _ in range(200):
        changed = False
        for k, (a, b) in enumerate(zip(pos[:-1], pos[1:])):
            s_ends = float(min(ends[k], ends[k + 1]))
            n = max(1, int(np.ceil(envelopes[k].cells_needed(lim, slope, s_ends, h_min) - 1e-9)))
            if n <= short and gaps[k] / n < cap[k] * (1 - 1e-9):
                cap[k] = gaps[k] / n
                lim = np.vstack([lim, [a, b, cap[k]]])
                ends = np.minimum(ends, size_envelope(pos, lim[-1:], slope))
                h_min = min(h_min, float(cap[k]))
                changed = True
        if not changed:
            break
    out = [pos[:1]]
    for k, (env, a, b) in enumerate(zip(envelopes, pos[:-1], pos[1:])):
        env.cells_needed(lim, slope, float(min(ends[k], ends[k + 1])), h_min)  # current for the final limits
        out.append(equidistribute(a, b, lim, slope, sampled=(env.xs, env.s)))
        out.append(np.array([b]))
    lines = np.concatenate(out)
    return repair_grading(lines, ratio, fixed=pos)
