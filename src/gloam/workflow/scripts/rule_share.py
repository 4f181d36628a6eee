# ruff: noqa: E402 -- gloam is imported once the package root is on the path
"""Snakemake rules ``share_prepared`` and ``share_comparison``: another run's files, linked."""

import sys
from pathlib import Path

job = snakemake  # noqa: F821 -- injected by Snakemake's script directive
# The gloam this script belongs to (<package root>/gloam/workflow/scripts), the controller's,
# comes first: never another gloam that the job's environment may hold.
sys.path.insert(0, str(Path(job.scriptdir).resolve().parents[2]))

from gloam.artifacts import link_shared
from gloam.stages import rule_environment

with rule_environment(job.log[0], job.threads, inputs=job.input, outputs=job.output):
    link_shared(dict(job.input.items()), dict(job.output.items()))
