"""Snakemake rule ``export``: tables, gloam.h5ad and the threshold-free figures of a run."""

from gloam.errors import exit_on_user_error
from gloam.stages import export_results, rule_environment

job = snakemake  # noqa: F821 -- injected by Snakemake's script directive
out = job.output

with rule_environment(job.log[0], job.threads):
    exit_on_user_error(
        lambda: export_results(
            job.input.prepared,
            job.input.consensus,
            job.input.fuzzifier,
            job.input.fuzzifier_curve,
            job.input.selection,
            job.input.validity,
            job.params.settings,
            memberships=out.memberships,
            centroids=out.centroids,
            clusters=out.clusters,
            robustness=out.robustness,
            h5ad=out.h5ad,
            validity_figure=(out.validity_png, out.validity_pdf, out.validity_svg),
            fuzzifier_figure=(out.fuzzifier_png, out.fuzzifier_pdf, out.fuzzifier_svg),
            overview_figure=(out.overview_png, out.overview_pdf, out.overview_svg),
        )
    )
