rule collect:
    input:
        expand(f"{CASES}/{{case}}/{CF.METRICS_FILE}", case=RUN.case_ids),
        RUN.layout.plan_file,
    output:
        RUN.layout.table_files(),
    log:
        f"{STUDY}/logs/collect.log",
    shell:
        '"{PY}" -m bodysweep.workflow.steps collect "{STUDY}" > "{log}" 2>&1'
