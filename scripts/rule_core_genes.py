"""Snakemake rule ``core_genes``: gene sets at each threshold and the cluster-profile figure."""

from gloam.errors import exit_on_user_error
from gloam.stages import export_core_genes, rule_environment

job = snakemake  # noqa: F821 -- injected by Snakemake's script directive
out = job.output

with rule_environment(job.log[0], job.threads):
    exit_on_user_error(
        lambda: export_core_genes(
            job.input.prepared,
            job.input.consensus,
            job.params.thresholds,
            job.params.time_unit,
            genesets=out.genesets,
            profiles_figure=(out.profiles_png, out.profiles_pdf, out.profiles_svg),
            prefix=job.wildcards.run,
        )
    )
