"""Snakemake rule ``export_genesets``: core lists, GMT files, ranked lists, background."""

from gloam.errors import exit_on_user_error
from gloam.stages import export_gene_sets, rule_environment

job = snakemake  # noqa: F821 -- injected by Snakemake's script directive

with rule_environment(job.log[0], job.threads):
    exit_on_user_error(
        lambda: export_gene_sets(
            job.input.memberships,
            job.params.thresholds,
            job.output.genesets,
            prefix=job.wildcards.run,
        )
    )
