# bodysweep pipeline: one study file -> case folders -> FDTD solves -> metrics -> tables -> report.
#
#   snakemake --configfile studies/demo_forearm_capsule.yaml --cores 2 --rerun-triggers mtime
#   bodysweep run studies/demo_forearm_capsule.yaml            (the same, with progress and checks)
#
# The study file is the config. Reading it here expands the study and writes each case's case.json only
# when its content changed (results/<study>/cases/<case_id>/), so an unchanged rerun schedules nothing.
# Optional config keys (--config k=v): results_dir (default results), threads_per_job (engine threads
# per solve job; default 1, so that the cores run cases side by side).
import sys

from bodysweep.workflow.pipeline import snakefile_context

RUN = snakefile_context(config, main_process=workflow.is_main_process,
                        configfiles=workflow.overwrite_configfiles)
CASES = str(RUN.layout.cases_dir)
STUDY = str(RUN.layout.root)
PY = sys.executable  # the interpreter with bodysweep installed runs every step

wildcard_constraints:
    case=r"[^/]+",
    port=r"\d+",

# Light steps run in this process, also when the solve/scene/finish jobs go to a cluster scheduler.
localrules: all, collect, report

# Every case's metrics.json is a target of its own: a result removed on purpose (bodysweep run
# --retry-failed) is redone even though the tables built from it are still newer than the rest.
rule all:
    input:
        RUN.layout.report_file,
        expand(f"{CASES}/{{case}}/metrics.json", case=RUN.case_ids),

include: "workflow/rules/scene.smk"    # build the scene at the case frequency, three-plane preview
include: "workflow/rules/solve.smk"    # one FDTD run per case and excited port
include: "workflow/rules/finish.smk"   # S-matrix, averaged SAR, SAR-limited link budget -> metrics.json
include: "workflow/rules/collect.smk"  # tidy tables (Parquet + CSV)
include: "workflow/rules/report.smk"   # plots and report.md
