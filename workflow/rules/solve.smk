rule solve:
    input:
        case=f"{CASES}/{{case}}/case.json",
        scene=f"{CASES}/{{case}}/scene.json",
    output:
        f"{CASES}/{{case}}/excite_{{port}}/status.json",
    log:
        f"{CASES}/{{case}}/logs/solve_{{port}}.log",
    threads: RUN.threads_per_job
    shell:
        '"{PY}" -m bodysweep.workflow.steps solve "{CASES}/{wildcards.case}" --port {wildcards.port}'
        ' --threads {threads} > "{log}" 2>&1'
