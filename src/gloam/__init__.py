"""gloam: soft (fuzzy c-means) clustering of gene-expression time courses."""

__version__ = "0.1.0"
