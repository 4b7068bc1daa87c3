rule finish:
    input:
        case=f"{CASES}/{{case}}/case.json",
        solves=lambda wc: [f"{STORE}/{RUN.solve_of(wc.case)}/excite_{p}/status.json" for p in RUN.ports(wc.case)],
    output:
        f"{CASES}/{{case}}/metrics.json",
    log:
        f"{CASES}/{{case}}/logs/finish.log",
    params:
        ports=lambda wc: " ".join(str(p) for p in RUN.ports(wc.case)),
        solve=lambda wc: f"{STORE}/{RUN.solve_of(wc.case)}",
    shell:
        '"{PY}" -m bodysweep.workflow.steps finish "{CASES}/{wildcards.case}" --solve-dir "{params.solve}"'
        ' --ports {params.ports} > "{log}" 2>&1'
