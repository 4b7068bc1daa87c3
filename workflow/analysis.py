"""Reading a finished study from an analysis script: its tables and a case's SAR volume.

>>> import bodysweep
>>> tables = bodysweep.load_tables("studies/demo_forearm_capsule.yaml")       # doctest: +SKIP
>>> tables["summary"][["label", "S21_dB", "status"]]                          # doctest: +SKIP
>>> vol = bodysweep.load_sar_volume("studies/demo_forearm_capsule.yaml", 0, mass_g=10)  # doctest: +SKIP
>>> vol.values.shape, vol.peak()                                              # doctest: +SKIP

``study`` is either the study file (its results are looked up in ``results_dir/<study name>``) or the
study's results folder itself (the one holding ``plan.json``). Everything is read through the names of
the case-folder contract (DEVELOPERS.md); nothing is computed again. Volumes and coordinates are SI
(W/kg per watt accepted at port 1, metres), as ``result.h5`` stores them. A case whose status is not
``ok`` still gives its volume, with ``status`` and ``reason`` on it; a failed case has none and raises.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .casefolder import CaseFolder
from .layout import TABLE_NAMES, StudyLayout, read_plan


@dataclass(frozen=True)
class SarVolume:
    """One SAR volume of one case on its FDTD grid.

    Attributes
    ----------
    values : ndarray, shape (nx, ny, nz)
        SAR in W/kg per watt accepted at port 1: local, or averaged over ``mass_g`` grams; NaN where the
        averaging has no valid cube.
    x_edges_m, y_edges_m, z_edges_m : ndarray, shapes (nx+1,), (ny+1,), (nz+1,)
        Cell edges, metres (body surface at ``z = 0``, tissue below).
    density_kg_m3 : ndarray, shape (nx, ny, nz)
        Mass density per cell (0 in air).
    mass_g : float or None
        Averaging mass, ``None`` for local SAR.
    case_id, label, status, reason
        The case, and its status from ``metrics.json`` (``ok``, ``warning`` with a reason, ...).
    """

    values: np.ndarray
    x_edges_m: np.ndarray
    y_edges_m: np.ndarray
    z_edges_m: np.ndarray
    density_kg_m3: np.ndarray
    mass_g: float | None
    case_id: str
    label: str
    status: str
    reason: str | None

    def centres_m(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Cell centres along x, y, z, metres."""
        return tuple(0.5 * (e[1:] + e[:-1]) for e in (self.x_edges_m, self.y_edges_m, self.z_edges_m))

    def peak(self) -> tuple[float, tuple[float, float, float]]:
        """Largest value (NaN ignored) and the centre of its cell, metres."""
        if not np.isfinite(self.values).any():
            raise ValueError(f"case {self.case_id}: the SAR volume holds no finite value")
        i = np.unravel_index(np.nanargmax(self.values), self.values.shape)
        c = self.centres_m()
        return float(self.values[i]), (float(c[0][i[0]]), float(c[1][i[1]]), float(c[2][i[2]]))


class StudyResults:
    """The results folder of one study (see the module docstring for ``study``)."""

    def __init__(self, study: str | Path, results_dir: str | Path = "results"):
        path = Path(study)
        if path.is_dir():
            self.layout = StudyLayout(path)
        elif path.is_file():
            from .study import load_study

            self.layout = StudyLayout.of(load_study(path).name, results_dir)
        else:
            raise FileNotFoundError(f"{study}: neither a study file nor a study's results folder")
        if not self.layout.plan_file.exists():
            raise FileNotFoundError(f"{self.layout.plan_file} does not exist: run `bodysweep run` on the study first")
        self.cases: list[dict] = read_plan(self.layout)["cases"]

    @property
    def root(self) -> Path:
        return self.layout.root

    def tables(self) -> dict[str, "pd.DataFrame"]:  # noqa: F821 (pandas imported when called)
        """``{"summary": ..., "sparams": ..., "sar": ..., "uncertainty": ...}`` as pandas DataFrames (the Parquet files)."""
        import pandas as pd

        missing = [n for n in TABLE_NAMES if not (self.layout.tables_dir / f"{n}.parquet").exists()]
        if missing:
            raise FileNotFoundError(f"{self.layout.tables_dir} lacks {', '.join(missing)}: run `bodysweep collect` "
                                    "on the study first")
        return {n: pd.read_parquet(self.layout.tables_dir / f"{n}.parquet") for n in TABLE_NAMES}

    def case(self, case: str | int) -> dict:
        """The plan entry of a case given by case id, label, or index in the study's case list."""
        for e in self.cases:
            if case in (e["case_id"], e.get("label")):
                return e
        if isinstance(case, int) and not isinstance(case, bool) and 0 <= case < len(self.cases):
            return self.cases[case]
        raise KeyError(f"case {case!r} is not in {self.root}: give a case id, a label or an index "
                       f"0..{len(self.cases) - 1}")

    def sar_volume(self, case: str | int, mass_g: float | None = None) -> SarVolume:
        """The local (``mass_g=None``) or mass-averaged SAR volume of a case (``result.h5``, group ``sar``)."""
        e = self.case(case)
        folder = CaseFolder(self.layout.case_dir(e["case_id"]))
        metrics = folder.read_metrics()
        if metrics is None:
            raise FileNotFoundError(f"case {e['case_id']} ({e.get('label', '')}) has no result yet: run the study")
        if not folder.has_result():
            raise FileNotFoundError(f"case {e['case_id']} ({e.get('label', '')}) has no SAR volume: status "
                                    f"{metrics.get('status')!r}, {metrics.get('reason') or 'no reason recorded'}")
        key = "local" if mass_g is None else f"avg_{float(mass_g):g}g"
        have = folder.sar_volume_names()
        if not have:
            raise KeyError(f"case {e['case_id']}: {folder.result_file.name} holds no SAR volumes")
        if key not in have:
            raise KeyError(f"case {e['case_id']}: no SAR volume for mass_g={mass_g!r}; stored: {', '.join(have)}")
        vol = folder.read_sar(key)
        return SarVolume(values=vol["values"], x_edges_m=vol["edges"][0], y_edges_m=vol["edges"][1],
                         z_edges_m=vol["edges"][2], density_kg_m3=vol["density_kg_m3"],
                         mass_g=None if mass_g is None else float(mass_g), case_id=e["case_id"],
                         label=e.get("label", ""), status=str(metrics.get("status")), reason=metrics.get("reason"))

def open_study(study: str | Path, results_dir: str | Path = "results") -> StudyResults:
    """The results of a study: ``.tables()``, ``.sar_volume(case, mass_g)``, ``.cases``, ``.root``."""
    return StudyResults(study, results_dir)


def load_tables(study: str | Path, results_dir: str | Path = "results") -> dict[str, "pd.DataFrame"]:  # noqa: F821
    """A study's tables in one call: ``{"summary", "sparams", "sar"}`` -> pandas DataFrame."""
    return open_study(study, results_dir).tables()


def load_sar_volume(study: str | Path, case: str | int, mass_g: float | None = None,
                    results_dir: str | Path = "results") -> SarVolume:
    """A case's SAR volume in one call (case id, label or index; ``mass_g`` None for local SAR)."""
    return open_study(study, results_dir).sar_volume(case, mass_g)
