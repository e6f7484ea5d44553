"""Data in: contracts and validation, the split, the feature recipe and the design diagnostics."""
