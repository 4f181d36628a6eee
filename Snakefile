# gloam: soft (fuzzy c-means) clustering of gene-expression time courses.
# Run the demo with `snakemake --cores 2`; see README.md for the config reference.

from snakemake.utils import min_version

min_version("9.0")


configfile: "config/config.yaml"


report: "workflow/report/workflow.rst"


include: "workflow/rules/common.smk"
include: "workflow/rules/prepare.smk"
include: "workflow/rules/scan.smk"
include: "workflow/rules/select.smk"
include: "workflow/rules/export.smk"
include: "workflow/rules/summary.smk"


rule all:
    input:
        get_final_outputs,
    default_target: True
