from bodysweep.workflow.cluster import cluster_resources, cluster_threads

rule solve:
    input:
        case=f"{STORE}/{{solve}}/{CF.SOLVE_FILE}",
        scene=f"{STORE}/{{solve}}/{CF.SCENE_FILE}",
    output:
        f"{STORE}/{{solve}}/{CF.EXCITE_PREFIX}{{port}}/{CF.STATUS_FILE}",
    log:
        f"{STORE}/{{solve}}/logs/solve_{{port}}.log",
    # On a cluster (non-local executor) threads, memory and time limit come from the case's cost
    # estimate (bodysweep.workflow.cluster); locally threads_per_job applies. Snakemake knows its
    # executor only at job time, hence the callables.
    threads: cluster_threads(lambda wc: f"{STORE}/{wc.solve}", RUN.threads_per_job, lambda: not workflow.local_exec)
    resources: **cluster_resources(lambda wc: f"{STORE}/{wc.solve}", lambda: not workflow.local_exec)
    shell:
        '"{PY}" -m bodysweep.workflow.steps solve "{STORE}/{wildcards.solve}" --port {wildcards.port}'
        ' --threads {threads} > "{log}" 2>&1'
