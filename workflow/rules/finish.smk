rule finish:
    input:
        case=f"{CASES}/{{case}}/{CF.CASE_FILE}",
        solves=lambda wc: [f"{STORE}/{RUN.solve_of(wc.case)}/{CF.EXCITE_PREFIX}{p}/{CF.STATUS_FILE}"
                           for p in RUN.ports(wc.case)],
    output:
        f"{CASES}/{{case}}/{CF.METRICS_FILE}",
    log:
        f"{CASES}/{{case}}/{CF.LOGS_DIR}/{CF.FINISH_LOG}",
    params:
        ports=lambda wc: " ".join(str(p) for p in RUN.ports(wc.case)),
        solve=lambda wc: f"{STORE}/{RUN.solve_of(wc.case)}",
    shell:
        '"{PY}" -m bodysweep.workflow.steps finish "{CASES}/{wildcards.case}" --solve-dir "{params.solve}"'
        ' --ports {params.ports} > "{log}" 2>&1'
