"""Time planning at scale: ``bodysweep plan`` on a 10,000-case study, and Snakemake dry runs of the real
Snakefile for 1,000 and 5,000 cases against a bare two-rule Snakefile with the same number of cases (one job
per case) and against a bare chain of three rules (three jobs per case, as ours: scene, solve, finish).

    .venv/bin/python benchmarks/plan_scale.py [--plan-cases 10000] [--dry-cases 1000 5000]

Everything happens in a temporary folder. The study is the tiny test study with its implant depth
swept over N distinct values (N distinct cases). ``plan`` runs as a user runs it, ``bodysweep plan`` in a
fresh process each time: *cold* (nothing remembered: expansion, mesh and cost estimate of every case),
*warm* (the same command again, nothing changed: the remembered expansion and estimates). The dry run is
timed as ``bodysweep run`` starts Snakemake (the plan written by the run handed over, nothing expanded
again) and as a user starts it by hand (``snakemake --configfile STUDY``: the Snakefile prepares the
study from its remembered expansion). Prints seconds, the ratios and the targets of issue 17 beside them.
"""
from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import yaml

from bodysweep.workflow.pipeline import prepare, snakemake_args, snakemake_cmd

TINY = Path(__file__).resolve().parent.parent / "tests" / "pipeline" / "data" / "tiny.yaml"
#: targets of issue 17 (seconds for 10,000 cases; ratio to the bare three-rule chain at 5,000 cases)
PLAN_WARM_S, PLAN_COLD_S, DRY_RATIO = 2.0, 10.0, 1.5


def verdict(value: float, target: float) -> str:
    return f"target <= {target:g}: {'met' if value <= target else 'NOT met'}"

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
    """``bodysweep plan`` in a fresh process: cold, then warm twice. ``plan`` remembers its expansion and
    estimates only in a study folder that exists (as after a run), so the folder is made first."""
    study = study_with(n, work)
    (work / "results" / f"scale_{n}").mkdir(parents=True)
    cmd = [sys.executable, "-m", "bodysweep.workflow.cli", "plan", str(study), "--results-dir", str(work / "results"),
           "--accept-cost"]
    for what, target in (("cold: expansion, states, mesh + cost estimate of each", PLAN_COLD_S),
                         ("warm: nothing changed since", PLAN_WARM_S), ("warm, again", PLAN_WARM_S)):
        t0 = time.perf_counter()
        p = subprocess.run(cmd, capture_output=True, text=True)
        t1 = time.perf_counter()
        tail = (p.stdout.strip().splitlines() or [p.stderr.strip()])[-1]
        print(f"plan, {n} cases ({what}): {t1 - t0:.1f} s (exit {p.returncode}); {verdict(t1 - t0, target)}")
        print(f"  {tail[:200]}")


def dry_run(args: list[str], cwd: Path) -> float:
    t0 = time.perf_counter()
    p = subprocess.run(snakemake_cmd(*args), cwd=cwd, capture_output=True, text=True)
    if p.returncode != 0:
        raise RuntimeError(p.stdout[-2000:] + p.stderr[-2000:])
    return time.perf_counter() - t0


def time_dry_runs(n: int, work: Path) -> None:
    study = study_with(n, work)
    t0 = time.perf_counter()
    prep = prepare(study, work / "results")  # what `bodysweep run` does before it starts Snakemake
    t_prep = time.perf_counter() - t0
    handed = snakemake_args(study, results_dir="results", workdir=work, cores=2, profile="local", dry_run=True,
                            prepared=prep)
    by_hand = snakemake_args(study, results_dir="results", workdir=work, cores=2, profile="local", dry_run=True)
    t_real = min(dry_run(handed, work) for _ in range(2))
    t_hand = dry_run(by_hand, work)
    t_bare = bare_dry_run(BARE, "bare", n, work)
    t_chain = bare_dry_run(CHAIN, "chain", n, work)
    print(f"snakemake dry run, {n} cases: as `bodysweep run` starts it (plan handed over) {t_real:.1f} s "
          f"(preparing the case folders before: {t_prep:.1f} s); started by hand (--configfile, remembered "
          f"expansion) {t_hand:.1f} s; bare two-rule Snakefile {t_bare:.1f} s, ratio {t_real / t_bare:.2f}; "
          f"bare chain of three jobs per case {t_chain:.1f} s, ratio {t_real / t_chain:.2f} "
          f"({verdict(t_real / t_chain, DRY_RATIO)}), by hand {t_hand / t_chain:.2f}")


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
