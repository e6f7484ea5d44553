"""oddsmith: a reproducible development pipeline for yes/no prediction models."""

__version__ = "0.1.0"
