"""Snakemake rule ``export_h5ad``: gloam.h5ad with the clustering beside the prepared data."""

from gloam.errors import exit_on_user_error
from gloam.stages import export_h5ad, rule_environment

job = snakemake  # noqa: F821 -- injected by Snakemake's script directive

with rule_environment(job.log[0], job.threads):
    exit_on_user_error(
        lambda: export_h5ad(
            job.input.prepared,
            job.input.consensus,
            job.input.fuzzifier,
            job.input.selection,
            job.params.settings,
            job.output.h5ad,
        )
    )
