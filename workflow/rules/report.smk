rule report:
    input:
        RUN.layout.table_files(),
    output:
        RUN.layout.report_file,
    log:
        f"{STUDY}/logs/report.log",
    shell:
        '"{PY}" -m bodysweep.workflow.steps report "{STUDY}" > "{log}" 2>&1'
