"""Snakemake rule ``demo_data``: write the invented demo counts, sample sheet and truth."""

from gloam.errors import exit_on_user_error
from gloam.stages import rule_environment, run_demo

job = snakemake  # noqa: F821 -- injected by Snakemake's script directive

with rule_environment(job.log[0], job.threads):
    exit_on_user_error(
        lambda: run_demo(
            job.output.counts,
            job.output.samples,
            job.output.truth,
            seed=job.params.seed,
            n_genes=job.params.n_genes,
            n_replicates=job.params.n_replicates,
        )
    )
