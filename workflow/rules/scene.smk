rule scene:
    input:
        f"{CASES}/{{case}}/case.json",
    output:
        scene=f"{CASES}/{{case}}/scene.json",
        preview=f"{CASES}/{{case}}/preview.png",
    log:
        f"{CASES}/{{case}}/logs/scene.log",
    shell:
        '"{PY}" -m bodysweep.workflow.steps scene "{CASES}/{wildcards.case}" > "{log}" 2>&1'
