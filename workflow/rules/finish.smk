rule finish:
    input:
        lambda wc: [f"{CASES}/{wc.case}/excite_{p}/status.json" for p in RUN.ports(wc.case)],
    output:
        f"{CASES}/{{case}}/metrics.json",
    log:
        f"{CASES}/{{case}}/logs/finish.log",
    params:
        ports=lambda wc: " ".join(str(p) for p in RUN.ports(wc.case)),
    shell:
        '"{PY}" -m bodysweep.workflow.steps finish "{CASES}/{wildcards.case}" --ports {params.ports}'
        ' > "{log}" 2>&1'
