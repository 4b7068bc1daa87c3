rule scene:
    input:
        f"{STORE}/{{solve}}/{CF.SOLVE_FILE}",
    output:
        scene=f"{STORE}/{{solve}}/{CF.SCENE_FILE}",
        preview=f"{STORE}/{{solve}}/{CF.PREVIEW_FILE}",
    log:
        f"{STORE}/{{solve}}/logs/scene.log",
    shell:
        '"{PY}" -m bodysweep.workflow.steps scene "{STORE}/{wildcards.solve}" > "{log}" 2>&1'
