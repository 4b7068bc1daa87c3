"""Time planning at scale: ``bodysweep plan`` on a 10,000-case study, and Snakemake dry runs of the real
Snakefile for 1,000 and 5,000 cases against a bare two-rule Snakefile with the same number of cases (one job
per case) and against a bare chain of three rules (three jobs per case, as ours: scene, solve, finish).

    .venv/bin/python benchmarks/plan_scale.py [--plan-cases 10000] [--dry-cases 1000 5000]

Everything happens in a temporary folder. The study is the tiny test study with its implant depth
swept over N distinct values (N distinct cases). Prints seconds and the ratio real / bare.
"""
from __future__ import annotations

import argparse
import io
import subprocess
import sys
import tempfile
import time
from contextlib import redirect_stdout
from pathlib import Path

import numpy as np
import yaml

from bodysweep.workflow import cli
from bodysweep.workflow.pipeline import snakemake_args, snakemake_cmd

TINY = Path(__file__).resolve().parent.parent / "tests" / "pipeline" / "data" / "tiny.yaml"

BARE = '''
# bare two-rule workflow: one copy job per case
N = {n}
rule all:
    input: expand("bare/{i}/out.txt", i=range(N))
rule make:
    input: "bare/{i}/in.txt"
    output: "bare/{i}/out.txt"
    shell: "cp {input} {output}"
'''

CHAIN = '''
# bare chain of three rules per case (the job count of ours: scene -> solve -> finish), one gather rule
N = {n}
rule all:
    input: expand("chain/{i}/c.txt", i=range(N))
rule a:
    input: "chain/{i}/in.txt"
    output: "chain/{i}/a.txt"
    shell: "cp {input} {output}"
rule b:
    input: "chain/{i}/a.txt"
    output: "chain/{i}/b.txt"
    shell: "cp {input} {output}"
rule c:
    input: "chain/{i}/b.txt"
    output: "chain/{i}/c.txt"
    shell: "cp {input} {output}"
'''


def bare_dry_run(text: str, name: str, n: int, work: Path) -> float:
    d = work / f"{name}_{n}"
    for i in range(n):
        (d / name / str(i)).mkdir(parents=True)
        (d / name / str(i) / "in.txt").write_text("x")
    (d / "Snakefile").write_text(text.replace("{n}", str(n)))
    args = ["--snakefile", str(d / "Snakefile"), "--directory", str(d), "--cores", "1", "--dry-run", "--quiet",
            "rules"]
    return dry_run(args, d)


def study_with(n: int, folder: Path) -> Path:
    d = yaml.safe_load(TINY.read_text())
    d["study"] = f"scale_{n}"
    d["budget"] = {"max_cases": max(n, 10)}
    d["sweep"]["blocks"] = [{"grid": {"depth": [float(v) for v in np.round(np.linspace(4.0, 14.0, n), 6)]}}]
    p = folder / f"scale_{n}.yaml"
    p.write_text(yaml.safe_dump(d, sort_keys=False))
    return p


def time_plan(n: int, work: Path) -> None:
    """``plan`` twice in this process: cold (every case meshed and estimated) and warm (estimates read back
    from ``cost_estimates.json``; plan only writes it into a study folder that exists, as after a run)."""
    study = study_with(n, work)
    (work / "results" / f"scale_{n}").mkdir(parents=True)
    for what in ("cold: expansion, states, mesh + cost estimate of each", "warm: estimates remembered"):
        t0 = time.perf_counter()
        buf = io.StringIO()
        with redirect_stdout(buf):
            rc = cli.main(["plan", str(study), "--results-dir", str(work / "results"), "--accept-cost"])
        t1 = time.perf_counter()
        tail = buf.getvalue().strip().splitlines()[-1]
        print(f"plan, {n} cases ({what}): {t1 - t0:.1f} s (exit {rc})")
        print(f"  {tail[:200]}")


def dry_run(args: list[str], cwd: Path) -> float:
    t0 = time.perf_counter()
    p = subprocess.run(snakemake_cmd(*args), cwd=cwd, capture_output=True, text=True)
    if p.returncode != 0:
        raise RuntimeError(p.stdout[-2000:] + p.stderr[-2000:])
    return time.perf_counter() - t0


def time_dry_runs(n: int, work: Path) -> None:
    study = study_with(n, work)
    real = snakemake_args(study, results_dir="results", workdir=work, cores=2, profile="local", dry_run=True)
    t_first = dry_run(real, work)  # includes writing the n case folders
    t_real = dry_run(real, work)
    t_bare = bare_dry_run(BARE, "bare", n, work)
    t_chain = bare_dry_run(CHAIN, "chain", n, work)
    print(f"snakemake dry run, {n} cases: bodysweep Snakefile {t_real:.1f} s (first, preparing the case folders: "
          f"{t_first:.1f} s), bare two-rule Snakefile {t_bare:.1f} s, ratio {t_real / t_bare:.2f}; "
          f"bare chain of three jobs per case {t_chain:.1f} s, ratio {t_real / t_chain:.2f}")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--plan-cases", type=int, default=10_000)
    ap.add_argument("--dry-cases", type=int, nargs="*", default=[1000, 5000])
    a = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        if a.plan_cases:
            time_plan(a.plan_cases, work)
        for n in a.dry_cases:
            time_dry_runs(n, work)


if __name__ == "__main__":
    sys.exit(main())
