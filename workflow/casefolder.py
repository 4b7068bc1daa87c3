"""The case folder and the solve folder: every file they hold, by name, with its typed write and read.

This module is the contract between the pipeline's stages written as code (DEVELOPERS.md, "The case
folder", describes the same files in prose). No other module spells a file name of these folders
(``tests/test_casefolder.py`` checks it); every stage reads and writes them through:

:class:`CaseFolder`
    ``results/<study>/cases/<case_id>/``: ``case.json`` (the case), ``metrics.json`` (its figures or its
    failure), ``result.h5`` (SAR volumes, band S-matrix), the Touchstone file, ``logs/``, the link
    ``solve`` to its solve folder.
:class:`SolveFolder`
    ``<store>/<solve_id>/`` (or, for a single case folder run by hand or in a test, the case folder
    itself): ``solve.json``, ``scene.json`` and ``preview.png`` (the built scene), ``mesh.json`` (the
    stored mesh description and cost estimate), an optional hand mesh ``mesh_plan.json``, ``logs/``,
    ``.lock``, one :class:`Excitation` folder per excited port.
:class:`Excitation`
    ``excite_<p>/``: ``status.json`` and its copy ``outcome.json``, ``signals.h5`` (port signals and
    phasors), ``fields_raw.h5`` (port 1: the raw SAR data), ``solver.log``, and for port 1 the engine's
    own averaged SAR (``solver_sar.h5``, ``solver_sar_status.json``, ``solver_sar.log``).

Every file is written under a temporary name and renamed into place (:mod:`.atomic`); JSON files are
canonical (sorted keys). The on-disk format is that of earlier versions, so existing results stay readable.
"""
from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from .atomic import atomic_path, json_text, write_if_changed, write_json, write_text

# -- names: the one place they are spelled -------------------------------------------------------------
CASE_FILE = "case.json"
METRICS_FILE = "metrics.json"
RESULT_FILE = "result.h5"
TOUCHSTONE_STEM = "sparams"
SOLVE_LINK = "solve"
LOGS_DIR = "logs"
FINISH_LOG = "finish.log"
SOLVE_FILE = "solve.json"
SCENE_FILE = "scene.json"
PREVIEW_FILE = "preview.png"
MESH_FILE = "mesh.json"
HAND_MESH_FILE = "mesh_plan.json"
LOCK_FILE = ".lock"
EXCITE_PREFIX = "excite_"
STATUS_FILE = "status.json"
OUTCOME_FILE = "outcome.json"
SIGNALS_FILE = "signals.h5"
FIELDS_FILE = "fields_raw.h5"
SOLVER_LOG = "solver.log"
ENGINE_SAR_FILE = "solver_sar.h5"
ENGINE_SAR_STATUS_FILE = "solver_sar_status.json"
ENGINE_SAR_LOG = "solver_sar.log"
#: the engine's scratch folder inside an excitation folder (removed after the run)
SCRATCH_DIR = ".engine_run"
#: what a reset of a failed case keeps in its folder
KEPT_ON_RESET = (CASE_FILE, SOLVE_LINK)


def read_json(path: str | Path) -> dict | None:
    """A JSON file's content, or None when it is missing or does not parse (a half-written file never
    exists: see :mod:`.atomic`)."""
    try:
        with open(path, "rb") as fh:
            return json.load(fh)
    except (FileNotFoundError, NotADirectoryError, ValueError):
        return None


def read_json_strict(path: str | Path) -> dict:
    """A JSON file's content; ``FileNotFoundError`` / ``ValueError`` as they come."""
    with open(path, "rb") as fh:
        return json.load(fh)


def touchstone_name(n_ports: int) -> str:
    """The Touchstone file name of an ``n_ports``-port result (``sparams.s2p`` ...)."""
    return f"{TOUCHSTONE_STEM}.s{int(n_ports)}p"


# -- the excitation folder -----------------------------------------------------------------------------
@dataclass(frozen=True)
class Excitation:
    """``excite_<port>/`` of a solve folder: what one engine run with ``port`` driven left."""

    dir: Path
    port: int

    @property
    def label(self) -> str:
        """``excite_<p>/status.json`` as messages name the status file."""
        return f"{self.dir.name}/{STATUS_FILE}"

    @property
    def status_file(self) -> Path:
        return self.dir / STATUS_FILE

    @property
    def outcome_file(self) -> Path:
        return self.dir / OUTCOME_FILE

    @property
    def signals_file(self) -> Path:
        return self.dir / SIGNALS_FILE

    @property
    def fields_file(self) -> Path:
        return self.dir / FIELDS_FILE

    @property
    def log_file(self) -> Path:
        return self.dir / SOLVER_LOG

    @property
    def scratch(self) -> Path:
        return self.dir / SCRATCH_DIR

    @property
    def engine_sar_file(self) -> Path:
        return self.dir / ENGINE_SAR_FILE

    @property
    def engine_sar_status_file(self) -> Path:
        return self.dir / ENGINE_SAR_STATUS_FILE

    @property
    def engine_sar_log(self) -> Path:
        return self.dir / ENGINE_SAR_LOG

    def engine_sar_files(self) -> tuple[Path, ...]:
        return (self.engine_sar_file, self.engine_sar_status_file, self.engine_sar_log)

    def result_files(self) -> tuple[str, ...]:
        """Files a successful run of this port leaves beside its status."""
        return (SIGNALS_FILE, FIELDS_FILE) if self.port == 1 else (SIGNALS_FILE,)

    def missing_results(self) -> list[str]:
        return [f for f in self.result_files() if not (self.dir / f).exists()]

    # status and its kept copy
    def read_status(self) -> dict | None:
        return read_json(self.status_file)

    def read_status_strict(self) -> dict:
        return read_json_strict(self.status_file)

    def write_status(self, status: dict) -> None:
        write_json(self.status_file, status)

    def restore_status(self, status: dict) -> bool:
        """Put a kept status back as ``status.json``; an unchanged file keeps its modification time."""
        return write_if_changed(self.status_file, json_text(status))

    def read_outcome(self) -> dict | None:
        return read_json(self.outcome_file)

    def keep_outcome(self, status: dict) -> None:
        """Copy the status to ``outcome.json`` (Snakemake removes ``status.json`` before it reruns a job)."""
        write_json(self.outcome_file, status)

    def remove_status(self) -> None:
        for p in (self.status_file, self.outcome_file):
            p.unlink(missing_ok=True)

    def write_log(self, text: str) -> None:
        write_text(self.log_file, text)

    # signals.h5
    def write_signals(self, port_data: list[dict], f_band_Hz, frequency_Hz: float, attrs: dict) -> None:
        """Port signals of the run: per port ``t_voltage_s``, ``voltage_V``, ``t_current_s``, ``current_A``,
        band phasors ``V_band``, ``I_band`` (nf,); attributes ``V_f0``, ``I_f0``, ``impedance_ohm``, ``excited``;
        file attributes ``attrs`` (timesteps, decay_reached, excited_port, pulse) and ``frequency_Hz``."""
        import h5py

        with atomic_path(self.signals_file) as tmp:
            with h5py.File(tmp, "w") as h5:
                h5.create_dataset("f_band_Hz", data=np.asarray(f_band_Hz, float))
                for k, v in attrs.items():
                    h5.attrs[k] = v
                h5.attrs["frequency_Hz"] = float(frequency_Hz)
                for d in port_data:
                    g = h5.create_group(f"port{d['number']}")
                    for k in ("t_voltage_s", "voltage_V", "t_current_s", "current_A", "V_band", "I_band"):
                        g.create_dataset(k, data=d[k])
                    for k in ("V_f0", "I_f0", "impedance_ohm", "excited"):
                        g.attrs[k] = d[k]

    def read_signals(self) -> dict:
        """``signals.h5`` as written by :meth:`write_signals`: file-level ``f_band_Hz``, ``frequency_Hz``,
        ``excited_port``, ``timesteps``, ``decay_reached``, and ``ports``: a list ordered by port number of
        dicts with ``number``, the four time signals, ``V_band``, ``I_band``, ``V_f0``, ``I_f0``,
        ``impedance_ohm``."""
        import h5py

        with h5py.File(self.signals_file, "r") as h5:
            numbers = sorted(int(k[4:]) for k in h5.keys() if k.startswith("port"))
            out: dict[str, Any] = {
                "f_band_Hz": h5["f_band_Hz"][()], "frequency_Hz": float(h5.attrs["frequency_Hz"]),
                "excited_port": int(h5.attrs["excited_port"]), "timesteps": int(h5.attrs["timesteps"]),
                "decay_reached": bool(h5.attrs["decay_reached"]), "ports": []}
            for n in numbers:
                g = h5[f"port{n}"]
                p = {k: g[k][()] for k in ("t_voltage_s", "voltage_V", "t_current_s", "current_A", "V_band", "I_band")}
                p.update(number=n, V_f0=complex(g.attrs["V_f0"]), I_f0=complex(g.attrs["I_f0"]),
                         impedance_ohm=float(g.attrs["impedance_ohm"]))
                out["ports"].append(p)
        return out

    # fields_raw.h5
    def write_fields(self, arrays: dict, attrs: dict) -> None:
        """The raw SAR data of port 1: ``E_V_per_m`` (3, nx, ny, nz), ``sigma_S_per_m``, ``density_kg_m3``,
        ``volume_m3`` (nx, ny, nz), cell centres ``x_m`` ... and edges ``x_edges_m`` (nx+1,) ...; volumes
        compressed."""
        import h5py

        with atomic_path(self.fields_file) as tmp:
            with h5py.File(tmp, "w") as h5:
                for k, v in arrays.items():
                    if np.ndim(v) >= 3:
                        h5.create_dataset(k, data=v, compression="gzip", compression_opts=4)
                    else:
                        h5.create_dataset(k, data=v)
                for k, v in attrs.items():
                    h5.attrs[k] = v

    def read_fields(self) -> dict:
        """Every array of ``fields_raw.h5`` (see :meth:`write_fields`)."""
        import h5py

        with h5py.File(self.fields_file, "r") as h5:
            return {k: h5[k][()] for k in h5.keys()}

    # the engine's own averaged SAR (port 1, optional)
    def write_engine_sar(self, volumes: dict[str, dict]) -> None:
        """``solver_sar.h5``: one dataset per averaging (name -> ``{"sar", "x_m", "y_m", "z_m"}``), the cell
        centres of the first."""
        import h5py

        with atomic_path(self.engine_sar_file) as tmp:
            with h5py.File(tmp, "w") as dst:
                first = next(iter(volumes.values()))
                for a in "xyz":
                    dst.create_dataset(f"{a}_m", data=first[f"{a}_m"])
                for name, d in volumes.items():
                    dst.create_dataset(name, data=d["sar"], compression="gzip")
                dst.attrs["SAR_Method"] = "IEEE_62704"

    def read_engine_sar(self, dataset: str) -> tuple[np.ndarray, list[np.ndarray]]:
        """One averaged volume of ``solver_sar.h5`` and the cell centres ``[x, y, z]``."""
        import h5py

        with h5py.File(self.engine_sar_file, "r") as h5:
            return h5[dataset][()], [h5[f"{a}_m"][()] for a in "xyz"]

    def read_engine_sar_status(self) -> dict | None:
        return read_json(self.engine_sar_status_file)

    def write_engine_sar_status(self, status: dict) -> None:
        write_json(self.engine_sar_status_file, status)


# -- the solve folder ----------------------------------------------------------------------------------
@dataclass(frozen=True)
class SolveFolder:
    """A solve folder of the store (``solve.json``), or a case folder run on its own (``case.json``)."""

    dir: Path

    def __post_init__(self):
        object.__setattr__(self, "dir", Path(self.dir))

    @property
    def record_file(self) -> Path:
        return self.dir / SOLVE_FILE

    @property
    def scene_file(self) -> Path:
        return self.dir / SCENE_FILE

    @property
    def preview_file(self) -> Path:
        return self.dir / PREVIEW_FILE

    @property
    def mesh_file(self) -> Path:
        return self.dir / MESH_FILE

    @property
    def hand_mesh_file(self) -> Path:
        return self.dir / HAND_MESH_FILE

    @property
    def lock_file(self) -> Path:
        return self.dir / LOCK_FILE

    @property
    def logs_dir(self) -> Path:
        return self.dir / LOGS_DIR

    def excitation(self, port: int) -> Excitation:
        return Excitation(self.dir / f"{EXCITE_PREFIX}{int(port)}", int(port))

    def scratch_dirs(self) -> list[Path]:
        """Engine scratch folders left in the excitation folders (a killed job's)."""
        return sorted(self.dir.glob(f"{EXCITE_PREFIX}*/{SCRATCH_DIR}*"))

    # solve.json / case.json: the inputs
    @property
    def inputs_file(self) -> Path:
        """``solve.json`` when the folder has one, else ``case.json`` (a case folder run on its own)."""
        return self.record_file if self.record_file.exists() else self.dir / CASE_FILE

    def read_inputs(self) -> dict:
        return read_json_strict(self.inputs_file)

    def read_record(self) -> dict | None:
        return read_json(self.record_file)

    def write_record(self, record: dict) -> bool:
        """Write ``solve.json`` if missing or different; True if written."""
        return write_if_changed(self.record_file, json_text(record))

    # scene.json, preview.png
    def read_scene(self) -> dict | None:
        return read_json(self.scene_file)

    def read_scene_strict(self) -> dict:
        return read_json_strict(self.scene_file)

    def write_scene(self, scene: dict) -> None:
        write_json(self.scene_file, scene)

    def built_files(self) -> tuple[Path, Path]:
        return self.scene_file, self.preview_file

    def remove_scene(self) -> None:
        for p in self.built_files():
            p.unlink(missing_ok=True)

    # mesh.json: the stored mesh description (see bodysweep.workflow.meshrecord)
    def read_mesh(self) -> dict | None:
        return read_json(self.mesh_file)

    def write_mesh(self, record: dict) -> None:
        write_if_changed(self.mesh_file, json_text(record))

    def read_hand_mesh(self) -> dict | None:
        """A hand mesh (``lines_x``, ``lines_y``, ``lines_z``, ``interior_bounds``, metres), or None."""
        if not self.hand_mesh_file.exists():
            return None
        return read_json_strict(self.hand_mesh_file)


# -- the case folder -----------------------------------------------------------------------------------
@dataclass(frozen=True)
class CaseFolder:
    """``results/<study>/cases/<case_id>/``."""

    dir: Path

    def __post_init__(self):
        object.__setattr__(self, "dir", Path(self.dir))

    @property
    def case_id(self) -> str:
        return self.dir.name

    @property
    def case_file(self) -> Path:
        return self.dir / CASE_FILE

    @property
    def metrics_file(self) -> Path:
        return self.dir / METRICS_FILE

    @property
    def result_file(self) -> Path:
        return self.dir / RESULT_FILE

    @property
    def solve_link(self) -> Path:
        return self.dir / SOLVE_LINK

    @property
    def logs_dir(self) -> Path:
        return self.dir / LOGS_DIR

    @property
    def finish_log(self) -> Path:
        return self.logs_dir / FINISH_LOG

    def solve_folder(self) -> SolveFolder:
        """The solve this case reads: through the link ``solve`` when it points to a folder, else the case
        folder itself (a case folder run on its own)."""
        return SolveFolder(self.solve_link if self.solve_link.is_dir() else self.dir)

    # case.json
    def read_case(self) -> dict | None:
        return read_json(self.case_file)

    def read_case_strict(self) -> dict:
        return read_json_strict(self.case_file)

    # metrics.json
    def has_metrics(self) -> bool:
        return self.metrics_file.exists()

    def read_metrics(self) -> dict | None:
        return read_json(self.metrics_file)

    def read_metrics_strict(self) -> dict:
        return read_json_strict(self.metrics_file)

    def write_metrics(self, metrics: dict) -> None:
        write_json(self.metrics_file, metrics)

    # Touchstone
    def touchstone_target(self, n_ports: int = 2) -> Path:
        return self.dir / touchstone_name(n_ports)

    def touchstone_file(self) -> Path | None:
        """The case's Touchstone file (two-port first), or None."""
        return next((p for p in (self.touchstone_target(2), self.touchstone_target(1)) if p.exists()), None)

    def remove_other_touchstones(self, keep: Path) -> None:
        """Remove a Touchstone file of another port count left by an earlier run."""
        for stale in self.dir.glob(f"{TOUCHSTONE_STEM}.s*p"):
            if stale != keep:
                stale.unlink(missing_ok=True)

    def missing_results(self, ports) -> list[str]:
        """Files a finished (ok or warning) case lacks besides ``metrics.json``: ``result.h5`` and its
        Touchstone file (two-port when port 2 was excited; else either, one-port for a scene without
        implant or when only port 1 was excited)."""
        out = [] if self.result_file.exists() else [RESULT_FILE]
        if 2 in list(ports):
            if not self.touchstone_target(2).exists():
                out.append(touchstone_name(2))
        elif self.touchstone_file() is None:
            out.append(touchstone_name(1))
        return out

    # result.h5
    def write_result(self, attrs: dict, f_band_Hz, S_band, sar: dict | None) -> None:
        """``result.h5``: attributes ``attrs`` (case_id, solve_id, scene, settings, versions as JSON text,
        frequency_Hz), ``sparams/f_Hz`` (nf,), ``sparams/S`` (nf, n, n); with ``sar`` (``edges`` three
        arrays, ``density_kg_m3``, ``volumes`` name -> (nx, ny, nz)) the group ``sar`` in W/kg per W
        accepted at port 1 (volumes as float32)."""
        import h5py

        with atomic_path(self.result_file) as tmp:
            with h5py.File(tmp, "w") as h5:
                for k, v in attrs.items():
                    h5.attrs[k] = v
                h5.create_dataset("sparams/f_Hz", data=f_band_Hz)
                h5.create_dataset("sparams/S", data=S_band)
                if sar:
                    g = h5.create_group("sar")
                    g.attrs["unit"] = "W/kg per W accepted at port 1"
                    for a, e in zip("xyz", sar["edges"]):
                        g.create_dataset(f"{a}_edges_m", data=e)
                    g.create_dataset("density_kg_m3", data=sar["density_kg_m3"], compression="gzip")
                    for k, v in sar["volumes"].items():
                        g.create_dataset(k, data=np.asarray(v).astype(np.float32), compression="gzip",
                                         compression_opts=4)

    def read_result_band(self) -> tuple[np.ndarray, np.ndarray]:
        """The band S-matrix of ``result.h5``: ``(f_Hz (nf,), S (nf, n, n))``, NaN = not computed."""
        import h5py

        with h5py.File(self.result_file, "r") as h5:
            return h5["sparams/f_Hz"][()], h5["sparams/S"][()]

    def read_result_case_id(self) -> str | None:
        import h5py

        with h5py.File(self.result_file, "r") as h5:
            v = h5.attrs.get("case_id")
        return None if v is None else str(v)

    def sar_volume_names(self) -> list[str]:
        """Names of the SAR volumes in ``result.h5`` (``local``, ``avg_1g`` ...); empty without a group ``sar``."""
        import h5py

        with h5py.File(self.result_file, "r") as h5:
            return sorted(k for k in h5["sar"] if k == "local" or k.startswith("avg_")) if "sar" in h5 else []

    def read_sar(self, name: str = "local") -> dict:
        """One SAR volume of ``result.h5`` with its grid: ``values`` (nx, ny, nz) float, ``edges`` (three
        arrays, metres), ``density_kg_m3``. ``KeyError`` naming what is missing."""
        import h5py

        with h5py.File(self.result_file, "r") as h5:
            if "sar" not in h5 or name not in h5["sar"]:
                raise KeyError(f"{self.result_file}: no SAR volume sar/{name}")
            g = h5["sar"]
            return {"values": np.asarray(g[name][()], dtype=float),
                    "edges": [g[f"{a}_edges_m"][()] for a in "xyz"], "density_kg_m3": g["density_kg_m3"][()]}

    def has_result(self) -> bool:
        return self.result_file.exists()
