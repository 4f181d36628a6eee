"""Snakemake rule ``prepare``: validate, normalise, filter and standardise one run's matrix."""

from gloam.errors import exit_on_user_error
from gloam.stages import rule_environment, run_prepare

job = snakemake  # noqa: F821 -- injected by Snakemake's script directive

with rule_environment(job.log[0], job.threads):
    exit_on_user_error(
        lambda: run_prepare(
            job.input.matrix,
            job.input.samples,
            job.params.settings,
            h5ad=job.output.h5ad,
            zscores=job.output.zscores,
            gene_report=job.output.gene_report,
            summary=job.output.summary,
        )
    )
