rule scene:
    input:
        f"{STORE}/{{solve}}/solve.json",
    output:
        scene=f"{STORE}/{{solve}}/scene.json",
        preview=f"{STORE}/{{solve}}/preview.png",
    log:
        f"{STORE}/{{solve}}/logs/scene.log",
    shell:
        '"{PY}" -m bodysweep.workflow.steps scene "{STORE}/{wildcards.solve}" > "{log}" 2>&1'
