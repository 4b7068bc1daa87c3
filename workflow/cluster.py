"""Batch-scheduler requests for one case: memory, time limit and threads from the case's cost estimate.

A solve job on a cluster must ask for enough memory and time, or the scheduler kills it; asking for far
more makes it wait longer in the queue. The request is derived from the case's cost estimate
(:class:`~bodysweep.workflow.meshing.cost.CostEstimate`: cells, engine memory in bytes, single-thread CPU
seconds per excited port) with margins, and grows on each retry, so a job that
hit its limit is resubmitted larger.

The Snakemake rule that solves a case uses it as (workflow/rules/solve.smk)::

    from bodysweep.workflow.cluster import cluster_resources, cluster_threads
    rule solve:
        threads: cluster_threads(case_dir, local_threads, lambda: not workflow.local_exec)
        resources: **cluster_resources(case_dir, lambda: not workflow.local_exec)  # per case and attempt

Resource names follow Snakemake's standard resources: ``mem_mb`` (megabytes; SLURM reads ``--mem``
in MiB, so bytes are converted with 2**20), ``runtime`` (minutes, SLURM ``--time``), and the job's
``threads`` (SLURM ``--cpus-per-task``). Partition and account are site settings: they come from the
cluster profile's ``default-resources`` or from ``bodysweep run --partition/--account``.
"""
from __future__ import annotations

import math
import os
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Mapping

from .casefolder import SolveFolder
from .meshing.cost import CostEstimate

MIB = 2**20
"""Bytes per MiB; SLURM's memory unit "M" is 1024-based (sbatch man page, --mem)."""


@dataclass(frozen=True)
class JobSizing:
    """How a cost estimate becomes a scheduler request.

    Parameters
    ----------
    memory_factor : float
        Engine memory is multiplied by this (the estimate's own error plus field dumps). 1 ... 10.
    memory_base_mb : int
        Added to every request: the job's own Snakemake process and the Python interpreter with
        numpy/h5py/openEMS loaded (measured together about 350 MB). 0 ... 100 000.
    runtime_factor : float
        Wall time estimate is multiplied by this (slower nodes, shared memory bandwidth). 1 ... 20.
    runtime_base_s : float
        Added to every wall time: job start, imports, mesh set-up, writing results. 0 ... 36 000.
    parallel_efficiency : float
        Speed-up per thread assumed when a case runs on several threads (FDTD updates are memory-bound,
        so doubling threads does not halve the time). 0.1 ... 1.
    max_threads : int
        Upper bound on threads per job. 1 ... 256.
    retry_growth : float
        Memory and time are multiplied by ``retry_growth ** (attempt - 1)`` on each resubmission. 1 ... 4.
    min_runtime_min : int
        Smallest time limit requested, minutes (SLURM counts time limits in whole minutes). 1 ... 10 000.
    """

    memory_factor: float = 1.5
    memory_base_mb: int = 512
    runtime_factor: float = 2.0
    runtime_base_s: float = 60.0
    parallel_efficiency: float = 0.7
    max_threads: int = 8
    retry_growth: float = 1.5
    min_runtime_min: int = 2

    def __post_init__(self):
        limits = {
            "memory_factor": (1.0, 10.0),
            "memory_base_mb": (0, 100_000),
            "runtime_factor": (1.0, 20.0),
            "runtime_base_s": (0.0, 36_000.0),
            "parallel_efficiency": (0.1, 1.0),
            "max_threads": (1, 256),
            "retry_growth": (1.0, 4.0),
            "min_runtime_min": (1, 10_000),
        }
        for name, (lo, hi) in limits.items():
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not (lo <= v <= hi):
                raise ValueError(f"job sizing: {name} = {v!r} is outside the allowed range {lo} ... {hi}")
        for name in ("memory_base_mb", "max_threads", "min_runtime_min"):
            if not isinstance(getattr(self, name), int):
                raise ValueError(f"job sizing: {name} must be an integer, got {getattr(self, name)!r}")

    def to_dict(self) -> dict:
        return asdict(self)


DEFAULT_SIZING = JobSizing()


def cells2threads(cells: int, max_threads: int = 8, requested: int = 0) -> int:
    """Threads for an FDTD case of ``cells`` cells.

    Small meshes gain nothing from more threads (thread start-up and synchronisation per timestep
    outweigh the work), so the count grows with the mesh: 1 below 200 000 cells, 2 below 1 million,
    4 below 5 million, else 8 -- our own rule of thumb, capped by ``max_threads``. A positive
    ``requested`` (the study's solver ``threads``) wins, still capped.
    """
    if requested and requested > 0:
        return max(1, min(int(requested), max_threads))
    if cells < 200_000:
        n = 1
    elif cells < 1_000_000:
        n = 2
    elif cells < 5_000_000:
        n = 4
    else:
        n = 8
    return max(1, min(n, max_threads))


def cost2resources(cost: CostEstimate, threads: int, attempt: int = 1, sizing: JobSizing = DEFAULT_SIZING) -> dict:
    """Scheduler request for one solve job (one excited port of the case).

    Parameters
    ----------
    cost : CostEstimate
        The case's estimate: memory of one excitation, CPU time per excitation
        (:attr:`~bodysweep.workflow.meshing.cost.CostEstimate.cpu_seconds_per_excitation`).
    threads : int
        Threads the job runs on (>= 1).
    attempt : int
        1 for the first submission, 2 for the first retry, ...
    sizing : JobSizing
        Margins.

    Returns
    -------
    dict
        ``mem_mb`` (int, MiB, what SLURM ``--mem`` receives), ``runtime`` (int, minutes, SLURM
        ``--time``), ``threads`` (int).
    """
    if threads < 1:
        raise ValueError(f"job resources: threads must be >= 1, got {threads}")
    if attempt < 1:
        raise ValueError(f"job resources: attempt counts from 1, got {attempt}")
    grow = sizing.retry_growth ** (attempt - 1)
    mem_mb = math.ceil((cost.memory_bytes * sizing.memory_factor / MIB + sizing.memory_base_mb) * grow)
    speedup = 1.0 + (threads - 1) * sizing.parallel_efficiency
    wall_s = cost.cpu_seconds_per_excitation / speedup * sizing.runtime_factor + sizing.runtime_base_s
    runtime_min = max(sizing.min_runtime_min, math.ceil(wall_s * grow / 60.0))
    return {"mem_mb": int(mem_mb), "runtime": int(runtime_min), "threads": int(threads)}


_FOLDER_COSTS: dict[tuple[str, int, int], tuple[CostEstimate, int]] = {}


def _case_cost_from_folder(case_dir: Path) -> tuple[CostEstimate, int]:
    """The cost estimate of a prepared solve (or case) folder and the requested threads (0 = choose).

    The estimate is the solve's stored one (``mesh.json``; meshed and stored here when no stage did it
    before, :func:`bodysweep.workflow.estimate.solve_estimate`; no openEMS import). Results are cached per
    inputs file modification time and size: Snakemake asks for a job's resources several times.
    """
    folder = SolveFolder(case_dir)
    case_file = folder.inputs_file  # a solve folder of the store has solve.json (its solver settings lack threads)
    try:
        st = case_file.stat()
    except FileNotFoundError:
        raise FileNotFoundError(f"{case_file} does not exist; the case must be prepared before it is sized") from None
    key = (str(case_file.resolve()), st.st_mtime_ns, st.st_size)
    hit = _FOLDER_COSTS.get(key)
    if hit is not None:
        return hit
    case = folder.read_inputs()
    requested = int((case.get("solver") or {}).get("threads", 0) or 0)
    from .estimate import solve_estimate

    cost = solve_estimate(folder.dir)  # CostEstimate checks itself: positive cells, memory and CPU time
    _FOLDER_COSTS[key] = (cost, requested)
    return cost, requested


def resources_for_case(source: str | os.PathLike | Mapping | CostEstimate, attempt: int = 1,
                       sizing: JobSizing = DEFAULT_SIZING) -> dict:
    """Scheduler request (``mem_mb``, ``runtime``, ``threads``) for solving one case.

    Parameters
    ----------
    source : path, CostEstimate or mapping
        A prepared solve or case folder (its stored mesh's estimate, see :func:`_case_cost_from_folder`),
        an estimate, or its :meth:`~bodysweep.workflow.meshing.cost.CostEstimate.to_dict` form.
    attempt : int
        Snakemake's attempt counter (1 on the first submission); each retry asks for more.
    sizing : JobSizing
        Margins; the defaults suit openEMS on a typical cluster node.
    """
    requested = 0
    if isinstance(source, (str, os.PathLike)):
        cost, requested = _case_cost_from_folder(Path(source))
    elif isinstance(source, CostEstimate):
        cost = source
    else:
        cost = CostEstimate.from_dict(source)
    threads = cells2threads(cost.cells, sizing.max_threads, requested)
    return cost2resources(cost, threads, attempt, sizing)


def threads_for_case(source: str | os.PathLike | Mapping | CostEstimate, sizing: JobSizing = DEFAULT_SIZING) -> int:
    """Threads for solving one case (see :func:`resources_for_case`)."""
    return resources_for_case(source, 1, sizing)["threads"]


#: what the solve rule declares when it runs on this machine: Snakemake's own default memory
#: (``max(2*input.size_mb, 1000)``, Snakemake docs "Standard resources") and one hour; the local
#: executor only compares them with a ``--resources`` limit if one is given.
LOCAL_DECLARED = {"mem_mb": 1000, "runtime": 60}


def cluster_resources(case_dir_of, on_cluster, sizing: JobSizing = DEFAULT_SIZING) -> dict:
    """Snakemake ``resources:`` of the solve rule: ``mem_mb`` and ``runtime`` per case and attempt.

    Parameters
    ----------
    case_dir_of : callable
        ``wildcards -> case folder`` of the job.
    on_cluster : callable
        ``() -> bool``: True when jobs go to a scheduler. Snakemake knows its executor only after the
        Snakefile is read, so this is asked when a job's resources are evaluated
        (``lambda: not workflow.local_exec``).
    sizing : JobSizing
        Margins.

    Returns
    -------
    dict
        ``{"mem_mb": f(wildcards, attempt), "runtime": f(wildcards, attempt)}``, for
        ``resources: **cluster_resources(...)`` in a rule. Off the cluster they give
        :data:`LOCAL_DECLARED` without costing the case.
    """
    def mem_mb(wildcards, attempt):
        if not on_cluster():
            return LOCAL_DECLARED["mem_mb"]
        return resources_for_case(case_dir_of(wildcards), attempt=attempt, sizing=sizing)["mem_mb"]

    def runtime(wildcards, attempt):
        if not on_cluster():
            return LOCAL_DECLARED["runtime"]
        return resources_for_case(case_dir_of(wildcards), attempt=attempt, sizing=sizing)["runtime"]

    return {"mem_mb": mem_mb, "runtime": runtime}


def cluster_threads(case_dir_of, local_threads: int, on_cluster, sizing: JobSizing = DEFAULT_SIZING):
    """Snakemake ``threads:`` of the solve rule: ``local_threads`` here, from the cost estimate on a cluster."""
    def threads(wildcards):
        if not on_cluster():
            return int(local_threads)
        return threads_for_case(case_dir_of(wildcards), sizing)

    return threads


def profile2default_resources(profile_dir: str | os.PathLike | None) -> list[str]:
    """The ``default-resources`` of a Snakemake profile as ``NAME=VALUE`` strings (empty without one)."""
    if profile_dir is None:
        return []
    import yaml

    path = Path(profile_dir) / "config.yaml"
    if not path.exists():
        return []
    conf = yaml.safe_load(path.read_text()) or {}
    res = conf.get("default-resources") or conf.get("default_resources") or []
    if isinstance(res, Mapping):
        return [f"{k}={v}" for k, v in res.items()]
    return [str(r) for r in res]


def site_resource_args(profile_dir: str | os.PathLike | None, partition: str | None = None,
                       account: str | None = None) -> list[str]:
    """Snakemake options putting every cluster job into ``partition`` and charging it to ``account``.

    A ``--default-resources`` given on the command line replaces the profile's whole list, so the
    profile's entries are repeated with ``slurm_partition``/``slurm_account`` set (or replaced).
    Returns ``[]`` when neither is given.
    """
    site = {k: v for k, v in (("slurm_partition", partition), ("slurm_account", account)) if v}
    if not site:
        return []
    for k, v in site.items():
        if not all(c.isalnum() or c in "-_.," for c in v):
            raise ValueError(f"cluster {k.split('_')[1]} {v!r}: use letters, digits, '-', '_', '.' or ','")
    kept = [r for r in profile2default_resources(profile_dir) if r.split("=", 1)[0].strip() not in site]
    # quoted so that Snakemake reads the value as a string, not as a Python name
    return ["--default-resources", *kept, *(f"{k}='{v}'" for k, v in site.items())]
