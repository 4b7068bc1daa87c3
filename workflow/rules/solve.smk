from bodysweep.workflow.cluster import cluster_resources, threads_for_case

rule solve:
    input:
        case=f"{CASES}/{{case}}/case.json",
        scene=f"{CASES}/{{case}}/scene.json",
    output:
        f"{CASES}/{{case}}/excite_{{port}}/status.json",
    log:
        f"{CASES}/{{case}}/logs/solve_{{port}}.log",
    # On a cluster (non-local executor) threads, memory and time limit come from the case's cost
    # estimate (bodysweep.workflow.cluster); locally threads_per_job applies and mem_mb/runtime are unused.
    threads: RUN.threads_per_job if workflow.local_exec else (lambda wc: threads_for_case(f"{CASES}/{wc.case}"))
    resources: **({} if workflow.local_exec else cluster_resources(lambda wc: f"{CASES}/{wc.case}"))
    shell:
        '"{PY}" -m bodysweep.workflow.steps solve "{CASES}/{wildcards.case}" --port {wildcards.port}'
        ' --threads {threads} > "{log}" 2>&1'
