"""Reading SLURM's job-completion records in the cluster tests."""
from __future__ import annotations


def tres2dict(tres: str) -> dict[str, str]:
    """``cpu=2,mem=3G,node=1`` -> ``{"cpu": "2", "mem": "3G", "node": "1"}``."""
    return dict(kv.split("=", 1) for kv in tres.split(",") if "=" in kv)


def tres_mem2mib(value: str) -> float:
    """A TRES memory value (``512M``, ``3G``, ``1T``) in MiB; SLURM's unit letters are 1024-based (sbatch man page)."""
    scale = {"K": 1 / 1024, "M": 1.0, "G": 1024.0, "T": 1024.0**2}
    return float(value[:-1]) * scale[value[-1]] if value[-1] in scale else float(value)
