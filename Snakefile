# bodysweep pipeline, from a checkout: the rules live in the package (workflow/Snakefile, installed with the
# wheel and found by `bodysweep run` through the package); this file only points Snakemake at them, so that
#   snakemake --configfile studies/demo_forearm_capsule.yaml --cores 2
# works from the repository root as well.
include: "workflow/Snakefile"

# an included file's first rule is not Snakemake's default target: name it here
rule everything:
    input: rules.all.input
